package bench

import (
	"encoding/json"
	"errors"
	"fmt"
	"image"
	"math"
	"os"
	"path/filepath"
	"testing"

	"gocv.io/x/gocv"
)

// referenceFile holds values computed by scikit-image (an implementation
// independent of ours) with bench/testdata/reference_metrics.py.
type referenceFile struct {
	ScikitImage string `json:"scikit_image"`
	Pairs       []struct {
		Name   string   `json:"name"`
		A      string   `json:"a"`
		B      string   `json:"b"`
		SSIM   float64  `json:"ssim"`
		PSNRdB *float64 `json:"psnr_db"` // nil means +Inf
		MAE    float64  `json:"mae"`
	} `json:"pairs"`
}

// Tolerances for the comparison with scikit-image. Our luma and blurs are
// float32 where skimage works in float64; the differences measured on the
// fixtures are far below these (see TestMetricsMatchScikitImage output
// with -v). The SSIM tolerance also pins the border convention: averaging
// the whole same-size map instead of the valid region changes the mean
// SSIM of these 192x160 fixtures by 3.9e-4 (graf1_blur) and 2.1e-3
// (baboon_jpeg), measured with skimage's full=True map.
const (
	tolSSIM = 1e-5 // absolute, SSIM units (measured max 2.7e-7)
	tolPSNR = 1e-4 // dB (measured max 1.8e-7)
	tolMAE  = 1e-4 // 8-bit levels
)

func readFixture(t testing.TB, name string) gocv.Mat {
	t.Helper()
	path := filepath.Join("testdata", "metrics", name)
	m := gocv.IMRead(path, gocv.IMReadUnchanged)
	if m.Empty() {
		t.Fatalf("cannot read fixture %s", path)
	}
	return m
}

func TestMetricsMatchScikitImage(t *testing.T) {
	raw, err := os.ReadFile(filepath.Join("testdata", "reference_metrics.json"))
	if err != nil {
		t.Fatal(err)
	}
	var ref referenceFile
	if err := json.Unmarshal(raw, &ref); err != nil {
		t.Fatalf("reference_metrics.json: %v", err)
	}
	if len(ref.Pairs) < 5 {
		t.Fatalf("reference file has only %d pairs", len(ref.Pairs))
	}
	var s Scorer
	defer s.Close()
	for _, p := range ref.Pairs {
		t.Run(p.Name, func(t *testing.T) {
			a, b := readFixture(t, p.A), readFixture(t, p.B)
			defer a.Close()
			defer b.Close()
			got, err := s.Score(a, b)
			if err != nil {
				t.Fatal(err)
			}
			wantPSNR := math.Inf(1)
			if p.PSNRdB != nil {
				wantPSNR = *p.PSNRdB
			}
			t.Logf("skimage %s: SSIM ours %.6f ref %.6f (diff %.2e); PSNR ours %.4f ref %.4f dB (diff %.2e); MAE ours %.4f ref %.4f",
				ref.ScikitImage, got.SSIM, p.SSIM, got.SSIM-p.SSIM, got.PSNRdB, wantPSNR, got.PSNRdB-wantPSNR, got.MAE, p.MAE)
			if math.Abs(got.SSIM-p.SSIM) > tolSSIM {
				t.Errorf("SSIM = %.6f, scikit-image %.6f (tolerance %g)", got.SSIM, p.SSIM, tolSSIM)
			}
			if math.IsInf(wantPSNR, 1) {
				if !math.IsInf(got.PSNRdB, 1) {
					t.Errorf("PSNR = %v, want +Inf for identical images", got.PSNRdB)
				}
			} else if math.Abs(got.PSNRdB-wantPSNR) > tolPSNR {
				t.Errorf("PSNR = %.5f dB, scikit-image %.5f (tolerance %g)", got.PSNRdB, wantPSNR, tolPSNR)
			}
			if math.Abs(got.MAE-p.MAE) > tolMAE {
				t.Errorf("MAE = %.5f, reference %.5f", got.MAE, p.MAE)
			}
		})
	}
}

// constImage returns a rows x cols 8-bit BGR image of one colour.
func constImage(rows, cols int, bgr [3]float64) gocv.Mat {
	return gocv.NewMatWithSizeFromScalar(gocv.NewScalar(bgr[0], bgr[1], bgr[2], 0), rows, cols, gocv.MatTypeCV8UC3)
}

// TestMetricsClosedForm checks values that follow from the definitions by
// hand: for two flat images all variances are zero, so SSIM reduces to
// the luminance term (2 m1 m2 + C1)/(m1^2 + m2^2 + C1) (Wang et al. 2004,
// eq. 13 (equation number from memory) with sigma = 0); PSNR of a 1-level difference is
// 20 log10(255) = 48.1308 dB.
func TestMetricsClosedForm(t *testing.T) {
	c1 := math.Pow(0.01*255, 2)
	tests := []struct {
		name     string
		a, b     [3]float64 // BGR
		wantSSIM float64
		wantPSNR float64
		wantMAE  float64
	}{
		{"one level", [3]float64{100, 100, 100}, [3]float64{101, 101, 101},
			(2*100*101 + c1) / (100*100 + 101*101 + c1), 20 * math.Log10(255), 1},
		{"ten levels", [3]float64{100, 100, 100}, [3]float64{110, 110, 110},
			(2*100*110 + c1) / (100*100 + 110*110 + c1), 20*math.Log10(255) - 20, 10},
		// pure blue 200 vs black: Y = 0.114*200 = 22.8
		{"blue only", [3]float64{200, 0, 0}, [3]float64{0, 0, 0},
			c1 / (22.8*22.8 + c1), 10 * math.Log10(255*255/(22.8*22.8)), 22.8},
		// pure red 100 vs pure green 100: Y 29.9 vs 58.7
		{"red vs green", [3]float64{0, 0, 100}, [3]float64{0, 100, 0},
			(2*29.9*58.7 + c1) / (29.9*29.9 + 58.7*58.7 + c1), 10 * math.Log10(255*255/(28.8*28.8)), 28.8},
	}
	var s Scorer
	defer s.Close()
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			a, b := constImage(24, 32, tt.a), constImage(24, 32, tt.b)
			defer a.Close()
			defer b.Close()
			got, err := s.Score(a, b)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(got.SSIM-tt.wantSSIM) > 1e-5 {
				t.Errorf("SSIM = %.7f, want %.7f", got.SSIM, tt.wantSSIM)
			}
			if math.Abs(got.PSNRdB-tt.wantPSNR) > 1e-4 {
				t.Errorf("PSNR = %.6f, want %.6f", got.PSNRdB, tt.wantPSNR)
			}
			if math.Abs(got.MAE-tt.wantMAE) > 1e-4 {
				t.Errorf("MAE = %.6f, want %.6f", got.MAE, tt.wantMAE)
			}
		})
	}
}

func TestMetricsProperties(t *testing.T) {
	a, b := readFixture(t, "baboon_crop.png"), readFixture(t, "baboon_jpeg30.png")
	defer a.Close()
	defer b.Close()
	var s Scorer
	defer s.Close()
	ab, err := s.Score(a, b)
	if err != nil {
		t.Fatal(err)
	}
	t.Run("symmetric", func(t *testing.T) {
		ba, err := s.Score(b, a)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(ab.SSIM-ba.SSIM) > 1e-9 || ab.PSNRdB != ba.PSNRdB || ab.MAE != ba.MAE {
			t.Errorf("Score(a,b) = %+v, Score(b,a) = %+v", ab, ba)
		}
	})
	t.Run("identical", func(t *testing.T) {
		got, err := s.Score(a, a)
		if err != nil {
			t.Fatal(err)
		}
		if got.SSIM != 1 || !math.IsInf(got.PSNRdB, 1) || got.MAE != 0 {
			t.Errorf("Score(a,a) = %+v, want SSIM 1, PSNR +Inf, MAE 0", got)
		}
	})
	t.Run("single metrics agree with Score", func(t *testing.T) {
		p, err := s.PSNR(a, b)
		if err != nil || p != ab.PSNRdB {
			t.Errorf("PSNR = %v, %v; Score gave %v", p, err, ab.PSNRdB)
		}
		m, err := s.MAE(a, b)
		if err != nil || m != ab.MAE {
			t.Errorf("MAE = %v, %v; Score gave %v", m, err, ab.MAE)
		}
		v, err := s.SSIM(a, b)
		if err != nil || v != ab.SSIM {
			t.Errorf("SSIM = %v, %v; Score gave %v", v, err, ab.SSIM)
		}
	})
	t.Run("gray and float luma inputs give the same scores", func(t *testing.T) {
		var la, lb gocv.Mat
		if err := Luma(&la, a); err != nil {
			t.Fatal(err)
		}
		defer la.Close()
		if err := Luma(&lb, b); err != nil {
			t.Fatal(err)
		}
		defer lb.Close()
		got, err := s.Score(la, lb)
		if err != nil {
			t.Fatal(err)
		}
		if got != ab {
			t.Errorf("float luma input: %+v, BGR input: %+v", got, ab)
		}
		bgra := gocv.NewMat()
		defer bgra.Close()
		gocv.CvtColor(a, &bgra, gocv.ColorBGRToBGRA)
		got, err = s.Score(bgra, b)
		if err != nil {
			t.Fatal(err)
		}
		if got != ab {
			t.Errorf("BGRA input: %+v, BGR input: %+v", got, ab)
		}
	})
	t.Run("non-continuous region equals its copy", func(t *testing.T) {
		r := image.Rect(7, 5, 7+100, 5+90)
		ra, rb := a.Region(r), b.Region(r)
		defer ra.Close()
		defer rb.Close()
		if ra.IsContinuous() {
			t.Fatal("test needs a non-continuous region")
		}
		ca, cb := ra.Clone(), rb.Clone()
		defer ca.Close()
		defer cb.Close()
		got, err := s.Score(ra, rb)
		if err != nil {
			t.Fatal(err)
		}
		want, err := s.Score(ca, cb)
		if err != nil {
			t.Fatal(err)
		}
		if got != want {
			t.Errorf("region %+v, copy %+v", got, want)
		}
	})
	t.Run("worse degradation scores worse", func(t *testing.T) {
		blur := gocv.NewMat()
		defer blur.Close()
		gocv.GaussianBlur(b, &blur, image.Pt(0, 0), 3, 3, gocv.BorderReflect101)
		worse, err := s.Score(a, blur)
		if err != nil {
			t.Fatal(err)
		}
		if !(worse.SSIM < ab.SSIM && worse.PSNRdB < ab.PSNRdB && worse.MAE > ab.MAE) {
			t.Errorf("JPEG+blur %+v not worse than JPEG %+v", worse, ab)
		}
	})
}

// TestInPlaceBlurMatchesSeparate guards the in-place GaussianBlur the
// Scorer relies on to keep five planes instead of ten.
func TestInPlaceBlurMatchesSeparate(t *testing.T) {
	a := readFixture(t, "graf1_crop.png")
	defer a.Close()
	var y gocv.Mat
	if err := Luma(&y, a); err != nil {
		t.Fatal(err)
	}
	defer y.Close()
	sep := gocv.NewMat()
	defer sep.Close()
	k := image.Pt(SSIMWindow, SSIMWindow)
	gocv.GaussianBlur(y, &sep, k, SSIMSigma, SSIMSigma, gocv.BorderReflect101)
	gocv.GaussianBlur(y, &y, k, SSIMSigma, SSIMSigma, gocv.BorderReflect101)
	diff := gocv.NewMat()
	defer diff.Close()
	gocv.AbsDiff(y, sep, &diff)
	_, maxv, _, _ := gocv.MinMaxLoc(diff)
	if maxv != 0 {
		t.Errorf("in-place blur differs from separate blur by up to %g", maxv)
	}
}

func TestMetricsErrors(t *testing.T) {
	big := constImage(20, 20, [3]float64{1, 2, 3})
	defer big.Close()
	other := constImage(20, 21, [3]float64{1, 2, 3})
	defer other.Close()
	tiny := constImage(10, 30, [3]float64{1, 2, 3})
	defer tiny.Close()
	empty := gocv.NewMat()
	defer empty.Close()
	wrong := gocv.NewMatWithSize(20, 20, gocv.MatTypeCV16UC1)
	defer wrong.Close()
	var zero gocv.Mat
	tests := []struct {
		name string
		a, b gocv.Mat
		want error
	}{
		{"size mismatch", big, other, ErrSizeMismatch},
		{"too small for SSIM", tiny, tiny, ErrImageTooSmall},
		{"empty", empty, big, ErrEmptyImage},
		{"zero Mat", big, zero, ErrEmptyImage},
		{"16-bit", big, wrong, ErrImageType},
	}
	var s Scorer
	defer s.Close()
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			got, err := s.Score(tt.a, tt.b)
			if !errors.Is(err, tt.want) {
				t.Fatalf("err = %v, want %v", err, tt.want)
			}
			if !math.IsNaN(got.SSIM) || !math.IsNaN(got.PSNRdB) {
				t.Errorf("scores on error = %+v, want NaN", got)
			}
		})
	}
	t.Run("PSNR works below the SSIM window", func(t *testing.T) {
		p, err := s.PSNR(tiny, tiny)
		if err != nil || !math.IsInf(p, 1) {
			t.Errorf("PSNR = %v, %v", p, err)
		}
	})
}

func TestCapPSNR(t *testing.T) {
	for _, tt := range []struct{ in, want float64 }{
		{math.Inf(1), PSNRCapDB}, {150, PSNRCapDB}, {35.5, 35.5}, {PSNRCapDB, PSNRCapDB},
	} {
		if got := CapPSNR(tt.in); got != tt.want {
			t.Errorf("CapPSNR(%v) = %v, want %v", tt.in, got, tt.want)
		}
	}
	if !math.IsNaN(CapPSNR(math.NaN())) {
		t.Error("CapPSNR(NaN) should stay NaN")
	}
}

// hdPair returns two 1280x720 BGR frames: an upscaled fixture and a
// JPEG-degraded version of it.
func hdPair(b *testing.B) (gocv.Mat, gocv.Mat) {
	src, deg := readFixture(b, "baboon_crop.png"), readFixture(b, "baboon_jpeg30.png")
	defer src.Close()
	defer deg.Close()
	a, c := gocv.NewMat(), gocv.NewMat()
	gocv.Resize(src, &a, image.Pt(1280, 720), 0, 0, gocv.InterpolationLinear)
	gocv.Resize(deg, &c, image.Pt(1280, 720), 0, 0, gocv.InterpolationLinear)
	return a, c
}

// BenchmarkScore measures all three metrics on one 1280x720 pair. Run on
// one core with: taskset -c 0 go test -run '^$' -bench Score ./bench/
func BenchmarkScore1280x720(b *testing.B) {
	a, c := hdPair(b)
	defer a.Close()
	defer c.Close()
	var s Scorer
	defer s.Close()
	if _, err := s.Score(a, c); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		if _, err := s.Score(a, c); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkPSNR1280x720 measures PSNR+MAE alone (no SSIM filtering).
func BenchmarkPSNR1280x720(b *testing.B) {
	a, c := hdPair(b)
	defer a.Close()
	defer c.Close()
	var s Scorer
	defer s.Close()
	b.ReportAllocs()
	for b.Loop() {
		if _, err := s.PSNR(a, c); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkLuma1280x720 measures the BGR to float32 luma conversion.
func BenchmarkLuma1280x720(b *testing.B) {
	a, c := hdPair(b)
	defer a.Close()
	defer c.Close()
	var y gocv.Mat
	defer y.Close()
	b.ReportAllocs()
	for b.Loop() {
		if err := Luma(&y, a); err != nil {
			b.Fatal(err)
		}
	}
}

// ExampleScorer scores a frame against a slightly brighter copy.
func ExampleScorer() {
	a := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(100, 100, 100, 0), 32, 32, gocv.MatTypeCV8UC3)
	defer a.Close()
	b := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(101, 101, 101, 0), 32, 32, gocv.MatTypeCV8UC3)
	defer b.Close()
	var s Scorer
	defer s.Close()
	r, err := s.Score(a, b)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("PSNR %.2f dB, SSIM %.5f, MAE %.1f\n", r.PSNRdB, r.SSIM, r.MAE)
	// Output: PSNR 48.13 dB, SSIM 0.99995, MAE 1.0
}
