package bench

import (
	"context"
	"image"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/internal/lossmodel"
	"stopgap/predictor"
)

// opencvDataDir holds the example images of Debian's opencv-doc.
const opencvDataDir = "/usr/share/doc/opencv-doc/examples/data"

// readH1to3p reads the 3x3 <data> block of the Oxford "graf" ground-truth
// homography file shipped with opencv-doc.
func readH1to3p(t *testing.T) predictor.Homography {
	t.Helper()
	raw, err := os.ReadFile(filepath.Join(opencvDataDir, "H1to3p.xml"))
	if err != nil {
		t.Skipf("opencv-doc example data not installed (%v); install the Debian package opencv-doc", err)
	}
	s := string(raw)
	a, b := strings.Index(s, "<data>"), strings.Index(s, "</data>")
	if a < 0 || b < a {
		t.Fatal("H1to3p.xml: no <data> block")
	}
	f := strings.Fields(s[a+len("<data>") : b])
	if len(f) != 9 {
		t.Fatalf("H1to3p.xml: %d values, want 9", len(f))
	}
	var h predictor.Homography
	for i, v := range f {
		x, err := strconv.ParseFloat(v, 64)
		if err != nil {
			t.Fatal(err)
		}
		h[i/3][i%3] = x
	}
	return h
}

func homMat(h predictor.Homography) gocv.Mat {
	m := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	for r := 0; r < 3; r++ {
		for c := 0; c < 3; c++ {
			m.SetDoubleAt(r, c, h[r][c])
		}
	}
	return m
}

// TestMisalignmentGraf checks the image-based misalignment on the Oxford
// affine-region pair graf1.png/graf3.png with its published ground-truth
// homography H1to3p (opencv-doc): graf1 warped by H1to3p is a "prediction"
// of graf3 with no residual motion beyond the accuracy of the published
// homography, and the same warp followed by a known shift of (6, -4) px must
// be measured as that shift (|(6, -4)| = 7.21 px) at every point.
func TestMisalignmentGraf(t *testing.T) {
	h := readH1to3p(t)
	g1 := gocv.IMRead(filepath.Join(opencvDataDir, "graf1.png"), gocv.IMReadColor)
	defer g1.Close()
	g3 := gocv.IMRead(filepath.Join(opencvDataDir, "graf3.png"), gocv.IMReadColor)
	defer g3.Close()
	if g1.Empty() || g3.Empty() {
		t.Fatal("could not read graf1.png/graf3.png")
	}
	w, ht := g3.Cols(), g3.Rows()
	// Points and region in the middle of graf3, inside the overlap.
	pts := [][2]float64{{float64(w) * 0.4, float64(ht) * 0.4}, {float64(w) * 0.6, float64(ht) * 0.5}, {float64(w) * 0.5, float64(ht) * 0.65}}
	region := image.Rect(w/4, ht/4, 3*w/4, 3*ht/4)
	m := NewMisalignmentMeter()
	defer m.Close()
	for _, tc := range []struct {
		name           string
		dx, dy         float64
		want, tolerate float64
	}{
		{"published homography", 0, 0, 0, 1.5},
		{"shifted by (6,-4) px", 6, -4, math.Hypot(6, -4), 0.5},
	} {
		t.Run(tc.name, func(t *testing.T) {
			shift := predictor.Homography{{1, 0, tc.dx}, {0, 1, tc.dy}, {0, 0, 1}}
			hm := homMat(shift.Mul(h))
			defer hm.Close()
			pred := gocv.NewMat()
			defer pred.Close()
			gocv.WarpPerspective(g1, &pred, hm, image.Pt(w, ht))
			got, err := m.Measure(pred, g3, region, pts)
			if err != nil {
				t.Fatal(err)
			}
			t.Logf("measured %.3f px with %d inliers, want %.3f px", got.MaxPx, got.Inliers, tc.want)
			if !(math.Abs(got.MaxPx-tc.want) <= tc.tolerate) {
				t.Errorf("misalignment %.3f px, want %.3f ± %.2f", got.MaxPx, tc.want, tc.tolerate)
			}
		})
	}
	// Featureless input is "not measured" (NaN), not zero.
	flat := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(100, 100, 100, 0), ht, w, gocv.MatTypeCV8UC3)
	defer flat.Close()
	got, err := m.Measure(flat, flat, region, pts)
	if err != nil || !math.IsNaN(got.MaxPx) {
		t.Errorf("flat images: %v %v, want NaN", got.MaxPx, err)
	}
	if _, err := m.Measure(flat, g1, region, pts); err == nil && g1.Cols() != flat.Cols() {
		t.Error("different sizes must fail")
	}
}

// TestTruthMisalignment: an exact prediction has zero misalignment; a yaw
// error of e rad about the camera's vertical axis moves a ground point d m
// straight ahead of a level camera at height h by (fx·tan e,
// fy·h/d·(1/cos e − 1)) pixels (pinhole geometry, closed form), largest at
// the nearest reference point (5 m).
func TestTruthMisalignment(t *testing.T) {
	cam := predictor.Camera{Width: 320, Height: 180, Fx: 160, Fy: 160, Cx: 160, Cy: 90, HeightM: 1.4, PitchDeg: 1e-9}
	cm := predictor.ConfidenceModel{}
	truth := [3]float64{1, 0.05, 0.02}
	if px, err := TruthMisalignmentPx(cam, cm, truth, truth); err != nil || px > 1e-9 {
		t.Fatalf("exact prediction: %v px, %v", px, err)
	}
	// Pure rotation about the camera centre: camera at the vehicle origin.
	e := 0.01
	px, err := TruthMisalignmentPx(cam, cm, [3]float64{0, 0, 0}, [3]float64{0, 0, e})
	if err != nil {
		t.Fatal(err)
	}
	if want := math.Hypot(160*math.Tan(e), 160*1.4/5*(1/math.Cos(e)-1)); math.Abs(px-want) > 1e-9 {
		t.Fatalf("yaw error %g rad: %v px, want %v", e, px, want)
	}
	if got := PxToMrad(px, 160); math.Abs(got-1000*px/160) > 1e-12 {
		t.Fatal("PxToMrad")
	}
}

// TestMisalignmentAgreesWithTruth: on a simulated drive, the misalignment
// measured from the images agrees with the exact one from truth.csv. On
// 320x180 drives we measured a median difference of 0.09 px and a 90th
// percentile of 0.35 px (seeds 3 and 13, 184 ticks); the test allows 0.5
// and 1.5 px.
func TestMisalignmentAgreesWithTruth(t *testing.T) {
	cfg := smallConfig()
	cfg.PanYawRateRps = 0.5
	drive := smallDrive(t, cfg)
	var out replayOutput
	_, err := replayDrive(context.Background(), ReplayConfig{Drive: drive, Examples: -1,
		Loss:   lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.3, BurstMs: 300, Seed: 2},
		Policy: predictor.DefaultPolicy()}, &out)
	if err != nil {
		t.Fatal(err)
	}
	rows := out.rows
	cam := predictor.Camera{Fx: 160}
	var d []float64
	for _, r := range rows {
		if r.State == TickLive || math.IsNaN(r.TruthMisalignMrad) || math.IsNaN(r.MisalignMrad) {
			continue
		}
		d = append(d, math.Abs(r.MisalignMrad-r.TruthMisalignMrad)*cam.Fx/1000)
	}
	if len(d) < 10 {
		t.Fatalf("only %d ticks measured", len(d))
	}
	slices.Sort(d)
	med, p90 := d[len(d)/2], d[len(d)*9/10]
	t.Logf("%d ticks: |images - truth| median %.3f px, p90 %.3f px, max %.3f px", len(d), med, p90, d[len(d)-1])
	if med > 0.5 || p90 > 1.5 {
		t.Errorf("median %.3f px, p90 %.3f px; want <= 0.5 and <= 1.5", med, p90)
	}
}
