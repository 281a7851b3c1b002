package predictor

import (
	"encoding/xml"
	"errors"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// noiseFrame returns a deterministic random BGR image (caller closes).
func noiseFrame(t testing.TB, w, h int, seed uint64) gocv.Mat {
	t.Helper()
	r := rand.New(rand.NewPCG(seed, 7))
	b := make([]byte, w*h*3+8)
	for i := 0; i < w*h*3; i += 8 {
		v := r.Uint64()
		for k := 0; k < 8; k++ {
			b[i+k] = byte(v >> (8 * k))
		}
	}
	b = b[:w*h*3]
	m, err := gocv.NewMatFromBytes(h, w, gocv.MatTypeCV8UC3, b)
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	return m.Clone()
}

func constFrame(w, h int, v float64) gocv.Mat {
	return gocv.NewMatWithSizeFromScalar(gocv.NewScalar(v, v, v, 0), h, w, gocv.MatTypeCV8UC3)
}

func bytesOf(t testing.TB, m gocv.Mat) []byte {
	t.Helper()
	b, err := m.DataPtrUint8()
	if err != nil {
		t.Fatal(err)
	}
	return b
}

// smallCam is a 160x120 camera with its horizon inside the image, so a
// split warp exercises sky, band and ground rows.
func smallCam() Camera {
	return Camera{Width: 160, Height: 120, Fx: 140, Fy: 140, Cx: 80, Cy: 60,
		HeightM: 1.4, PitchDeg: 10, RollDeg: 3, XOffsetM: 1.5, YOffsetM: 0.2}
}

// TestZeroMotionReproducesSource: with zero motion both homographies are the
// identity (to rounding), so the output must equal the input byte for byte,
// through both the single-warp and the split path, and nothing is unfilled.
func TestZeroMotionReproducesSource(t *testing.T) {
	c := smallCam()
	s, err := NewSynthesizer(c, SynthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	if a, b := s.BandRows(); !(a > 0 && b > a && b < c.Height) {
		t.Fatalf("band rows [%d,%d) should be inside the image", a, b)
	}
	src := noiseFrame(t, c.Width, c.Height, 1)
	defer src.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	g, f := GroundHomographyPlanar(c, 0, 0, 0), RotationHomographyPlanar(c, 0, 0, 0)
	far2 := f
	far2[0][2] += 1e-9 // forces the split path; moves pixels by 1e-9 px
	for name, pair := range map[string][2]Homography{"single": {IdentityHomography(), IdentityHomography()}, "split": {g, far2}} {
		syn, err := s.Warp(src, pair[0], pair[1], &dst)
		if err != nil {
			t.Fatal(err)
		}
		if syn.UnfilledPixels != 0 {
			t.Errorf("%s: %d unfilled pixels", name, syn.UnfilledPixels)
		}
		a, b := bytesOf(t, src), bytesOf(t, dst)
		diff := 0
		for i := range a {
			if a[i] != b[i] {
				diff++
			}
		}
		if diff != 0 {
			t.Errorf("%s: %d bytes differ from the source", name, diff)
		}
	}
}

// bruteUnfilled counts unfilled pixels one by one with the rule documented
// on Synthesis.UnfilledPixels, using division instead of the homogeneous
// inequalities of validCount.
func bruteUnfilled(c Camera, gi, fi Homography, split bool) int {
	hz := c.Horizon()
	n := 0
	for v := 0; v < c.Height; v++ {
		for u := 0; u < c.Width; u++ {
			m := fi
			if split && hz.SignedDistance(float64(u), float64(v)) >= 0 {
				m = gi
			}
			x, y, ok := m.Apply(float64(u), float64(v))
			const e = FillTolerancePx
			if !ok || x < -e || y < -e || x > float64(c.Width-1)+e || y > float64(c.Height-1)+e {
				n++
			}
		}
	}
	return n
}

func fillMotions() map[string]planar {
	m := testMotions()
	m["reverse-far"] = planar{-9, 0.5, 0.1}
	m["sharp-left"] = planar{4, 1.5, 0.7}
	m["spin-right"] = planar{0.5, -0.2, -1.2}
	return m
}

// TestUnfilledCountBruteForce: the row-interval count must equal a per-pixel
// count exactly, for split and single warps, including motions where part
// of the output sees points behind the source camera.
func TestUnfilledCountBruteForce(t *testing.T) {
	for _, c := range []Camera{smallCam(), {Width: 97, Height: 61, Fx: 80, Fy: 90, Cx: 50, Cy: 20,
		HeightM: 2, PitchDeg: -2, RollDeg: -7, XOffsetM: 0.3}} {
		s, err := NewSynthesizer(c, SynthOptions{BandPx: 8})
		if err != nil {
			t.Fatal(err)
		}
		src := constFrame(c.Width, c.Height, 255)
		dst := gocv.NewMat()
		for name, m := range fillMotions() {
			g := GroundHomographyPlanar(c, m.dx, m.dy, m.yaw)
			f := RotationHomographyPlanar(c, m.dx, m.dy, m.yaw)
			if m == (planar{}) {
				f[0][2] += 1e-9 // keep the split path
			}
			gi, _ := g.Inverse()
			fi, _ := f.Inverse()
			syn, err := s.Warp(src, g, f, &dst)
			if err != nil {
				t.Fatal(err)
			}
			if want := bruteUnfilled(c, gi, fi, true); syn.UnfilledPixels != want {
				t.Errorf("%dx%d %s split: counted %d, brute force %d", c.Width, c.Height, name, syn.UnfilledPixels, want)
			}
			syn, err = s.Warp(src, g, g, &dst)
			if err != nil {
				t.Fatal(err)
			}
			if want := bruteUnfilled(c, gi, gi, false); syn.UnfilledPixels != want {
				t.Errorf("%dx%d %s single: counted %d, brute force %d", c.Width, c.Height, name, syn.UnfilledPixels, want)
			}
		}
		src.Close()
		dst.Close()
		s.Close()
	}
}

// TestUnfilledMatchesOpenCVOutput warps an all-white frame with one map and
// counts output pixels that are not white, i.e. that OpenCV's bilinear warp
// (cv::warpPerspective, BORDER_CONSTANT 128) mixed with the border, plus our
// own grey paint behind the camera. Our exact count uses pixel centres while
// OpenCV rounds source coordinates to 1/32 px, so the two may differ only
// along the edge of the filled region: we allow 5% of the image perimeter.
func TestUnfilledMatchesOpenCVOutput(t *testing.T) {
	c := smallCam()
	s, err := NewSynthesizer(c, SynthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	src := constFrame(c.Width, c.Height, 255)
	defer src.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	tol := int(0.05*float64(2*(c.Width+c.Height))) + 1
	for name, m := range fillMotions() {
		g := GroundHomographyPlanar(c, m.dx, m.dy, m.yaw)
		syn, err := s.Warp(src, g, g, &dst)
		if err != nil {
			t.Fatal(err)
		}
		b := bytesOf(t, dst)
		notWhite := 0
		for i := 0; i < len(b); i += 3 {
			if b[i] != 255 || b[i+1] != 255 || b[i+2] != 255 {
				notWhite++
			}
		}
		if d := notWhite - syn.UnfilledPixels; d > tol || d < -tol {
			t.Errorf("%s: OpenCV output has %d non-white pixels, we counted %d (tolerance %d)", name, notWhite, syn.UnfilledPixels, tol)
		}
	}
}

// TestBandLayout: weights are 0 above the band, 256 below it, monotone
// down each column, and the band rows bracket the horizon.
func TestBandLayout(t *testing.T) {
	c := smallCam()
	s, err := NewSynthesizer(c, SynthOptions{BandPx: 10})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	a, b := s.BandRows()
	for _, u := range []int{0, c.Width / 2, c.Width - 1} {
		v, _ := c.Horizon().RowAt(float64(u))
		if !(float64(a) <= v && v < float64(b)) {
			t.Errorf("horizon row %g at column %d outside band rows [%d,%d)", v, u, a, b)
		}
		prev := uint16(0)
		for r := 0; r < b-a; r++ {
			w := s.weights[r*c.Width+u]
			if w < prev {
				t.Fatalf("weights not monotone in column %d", u)
			}
			prev = w
		}
	}
	// Level camera with the horizon at row 60 and band 10: rows 55..64 blend.
	lv := Camera{Width: 64, Height: 120, Fx: 100, Fy: 100, Cx: 32, Cy: 60, HeightM: 1}
	s2, err := NewSynthesizer(lv, SynthOptions{BandPx: 10})
	if err != nil {
		t.Fatal(err)
	}
	defer s2.Close()
	if a, b := s2.BandRows(); a != 56 || b != 65 {
		t.Errorf("level band rows [%d,%d), want [56,65): rows with |v-60| < 5 blend", a, b)
	}
	// Horizon far above the image (steep pitch): everything is ground.
	steep := lv
	steep.PitchDeg = 60
	s3, err := NewSynthesizer(steep, SynthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer s3.Close()
	if a, b := s3.BandRows(); a != 0 || b != 0 {
		t.Errorf("steep camera band rows [%d,%d), want [0,0)", a, b)
	}
}

func TestSynthesizerBadInput(t *testing.T) {
	if _, err := NewSynthesizer(Camera{}, SynthOptions{}); !errors.Is(err, ErrInvalidCamera) {
		t.Errorf("zero camera: %v", err)
	}
	if _, err := NewSynthesizer(smallCam(), SynthOptions{BandPx: 1}); !errors.Is(err, ErrInvalidConfig) {
		t.Errorf("band 1: %v", err)
	}
	s, err := NewSynthesizer(smallCam(), SynthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	wrong := constFrame(10, 10, 0)
	defer wrong.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	if _, err := s.Warp(wrong, IdentityHomography(), IdentityHomography(), &dst); !errors.Is(err, ErrFrameFormat) {
		t.Errorf("wrong size: %v", err)
	}
	if _, err := s.Warp(gocv.Mat{}, IdentityHomography(), IdentityHomography(), &dst); !errors.Is(err, ErrFrameFormat) {
		t.Errorf("zero Mat: %v", err)
	}
	src := constFrame(160, 120, 0)
	defer src.Close()
	if _, err := s.Warp(src, Homography{}, IdentityHomography(), &dst); !errors.Is(err, ErrSingular) {
		t.Errorf("singular: %v", err)
	}
	if _, err := s.Warp(src, IdentityHomography(), IdentityHomography(), nil); !errors.Is(err, ErrFrameFormat) {
		t.Errorf("nil dst: %v", err)
	}
	s.Close()
	s.Close()
	if _, err := s.Warp(src, IdentityHomography(), IdentityHomography(), &dst); !errors.Is(err, ErrClosed) {
		t.Errorf("after close: %v", err)
	}
}

// openCVMatrixXML reads the first matrix of an OpenCV FileStorage XML file
// (<name type_id="opencv-matrix"><rows/><cols/><dt/><data/></name>).
func openCVMatrixXML(path string) (Homography, error) {
	var h Homography
	raw, err := os.ReadFile(path)
	if err != nil {
		return h, err
	}
	var doc struct {
		Mats []struct {
			XMLName xml.Name
			Rows    int    `xml:"rows"`
			Cols    int    `xml:"cols"`
			Data    string `xml:"data"`
		} `xml:",any"`
	}
	if err := xml.Unmarshal(raw, &doc); err != nil {
		return h, err
	}
	if len(doc.Mats) == 0 || doc.Mats[0].Rows != 3 || doc.Mats[0].Cols != 3 {
		return h, errors.New(path + ": no 3x3 matrix")
	}
	f := strings.Fields(doc.Mats[0].Data)
	if len(f) != 9 {
		return h, errors.New(path + ": want 9 values")
	}
	for i, s := range f {
		v, err := strconv.ParseFloat(s, 64)
		if err != nil {
			return h, err
		}
		h[i/3][i%3] = v
	}
	return h, nil
}

const opencvData = "/usr/share/doc/opencv-doc/examples/data"

// TestWarpGrafGroundTruth: the Oxford affine-region "graf" pair shipped with
// opencv-doc comes with the ground-truth homography H1to3p (graf1 pixels ->
// graf3 pixels). Warping graf1 with it through our warp path must reproduce
// graf3 over the overlap. Measured zero-mean normalised cross-correlation
// of the grey levels over the valid overlap (1 px inside its edge): 0.869 on
// OpenCV 4.6 for both our single and split paths, the same as a bare
// gocv.WarpPerspective; the unwarped graf1 scores 0.04 on the same pixels.
// We assert > 0.80 for both paths, < 0.2 for the unwarped image, and that
// the two paths agree to 1 grey level.
func TestWarpGrafGroundTruth(t *testing.T) {
	hPath := filepath.Join(opencvData, "H1to3p.xml")
	if _, err := os.Stat(hPath); err != nil {
		t.Skipf("opencv-doc example data not installed (%v); install the Debian package opencv-doc", err)
	}
	h, err := openCVMatrixXML(hPath)
	if err != nil {
		t.Fatal(err)
	}
	g1 := gocv.IMRead(filepath.Join(opencvData, "graf1.png"), gocv.IMReadColor)
	defer g1.Close()
	g3 := gocv.IMRead(filepath.Join(opencvData, "graf3.png"), gocv.IMReadColor)
	defer g3.Close()
	if g1.Empty() || g3.Empty() || g1.Cols() != g3.Cols() || g1.Rows() != g3.Rows() {
		t.Fatal("could not read graf1.png/graf3.png")
	}
	w, ht := g1.Cols(), g1.Rows()
	cam := Camera{Width: w, Height: ht, Fx: 600, Fy: 600, Cx: float64(w) / 2, Cy: float64(ht) / 2, HeightM: 1.5}
	s, err := NewSynthesizer(cam, SynthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	hi, err := h.Inverse()
	if err != nil {
		t.Fatal(err)
	}
	// Valid overlap: output pixels whose 3x3 neighbourhood maps inside graf1.
	valid := make([]bool, w*ht)
	for v := 1; v < ht-1; v++ {
		for u := 1; u < w-1; u++ {
			ok := true
			for _, d := range [][2]int{{-1, -1}, {1, -1}, {-1, 1}, {1, 1}} {
				x, y, in := hi.Apply(float64(u+d[0]), float64(v+d[1]))
				if !in || x < 0 || y < 0 || x > float64(w-1) || y > float64(ht-1) {
					ok = false
				}
			}
			valid[v*w+u] = ok
		}
	}
	gray3 := gocv.NewMat()
	defer gray3.Close()
	gocv.CvtColor(g3, &gray3, gocv.ColorBGRToGray)
	far := h
	far[0][2] += 1e-9
	var outs [2][]byte
	for i, pair := range [][2]Homography{{h, h}, {h, far}} {
		dst := gocv.NewMat()
		if _, err := s.Warp(g1, pair[0], pair[1], &dst); err != nil {
			t.Fatal(err)
		}
		gray := gocv.NewMat()
		gocv.CvtColor(dst, &gray, gocv.ColorBGRToGray)
		outs[i] = append([]byte(nil), bytesOf(t, gray)...)
		gray.Close()
		dst.Close()
		ncc, n := nccMasked(outs[i], bytesOf(t, gray3), valid)
		t.Logf("path %d: NCC %.4f over %d pixels", i, ncc, n)
		if n < w*ht/4 || ncc < 0.80 {
			t.Errorf("path %d: NCC %.4f over %d pixels, want > 0.80 over at least a quarter of the image", i, ncc, n)
		}
	}
	gray1 := gocv.NewMat()
	defer gray1.Close()
	gocv.CvtColor(g1, &gray1, gocv.ColorBGRToGray)
	if ncc, _ := nccMasked(bytesOf(t, gray1), bytesOf(t, gray3), valid); ncc > 0.2 {
		t.Errorf("unwarped graf1 already has NCC %.4f with graf3: the check cannot discriminate", ncc)
	}
	for i := range outs[0] {
		if d := int(outs[0][i]) - int(outs[1][i]); d > 1 || d < -1 {
			t.Fatalf("single and split paths differ by %d at pixel %d", d, i)
		}
	}
}

// nccMasked is the zero-mean normalised cross-correlation of a and b over
// the pixels where mask is true.
func nccMasked(a, b []byte, mask []bool) (float64, int) {
	var sa, sb float64
	n := 0
	for i, m := range mask {
		if m {
			sa += float64(a[i])
			sb += float64(b[i])
			n++
		}
	}
	if n == 0 {
		return 0, 0
	}
	ma, mb := sa/float64(n), sb/float64(n)
	var sab, saa, sbb float64
	for i, m := range mask {
		if m {
			da, db := float64(a[i])-ma, float64(b[i])-mb
			sab += da * db
			saa += da * da
			sbb += db * db
		}
	}
	return sab / math.Sqrt(saa*sbb), n
}

// TestSynthesizeDistortedRoadPoint follows one road point through the whole
// chain with lens distortion: a bright blob centred on the point's distorted
// pixel in the T0 frame (our projection, checked against cv::projectPoints
// in TestProjectMatchesOpenCV) must appear, after Synthesize, at the
// pinhole pixel of the point seen from the T1 pose, computed without any
// homography, since predicted frames are in undistorted geometry. Blob
// centroids are compared to 0.15 px (the residual, under 0.1 px, is the blob's
// distortion by the non-linear map and 8-bit rounding).
func TestSynthesizeDistortedRoadPoint(t *testing.T) {
	c := Camera{Width: 320, Height: 240, Fx: 260, Fy: 260, Cx: 158, Cy: 122,
		K1: -0.25, K2: 0.07, P1: 0.001, P2: -0.0005, K3: -0.01,
		HeightM: 1.5, PitchDeg: 8, RollDeg: 1.5, XOffsetM: 1.2, YOffsetM: 0.1}
	s, err := NewSynthesizer(c, SynthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer s.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	for name, m := range map[string]planar{"still": {}, "forward-left": {1.5, 0.1, 0.08}, "right": {0.8, -0.05, -0.1}} {
		for _, p := range [][3]float64{{9, 0.5, 0}, {7, -1.5, 0}, {12, 2, 0}} {
			u0, v0, err := c.ProjectVehiclePoint(p)
			if err != nil {
				t.Fatal(err)
			}
			// The dot is a Gaussian blob centred exactly on the projection
			// (u0, v0), not a circle drawn at the rounded pixel, so that its
			// centroid must land on the independent target below.
			src := gaussDot(t, c.Width, c.Height, u0, v0, 1.2)
			// Independent target: the point moved into T1 vehicle
			// coordinates and projected with the pinhole model (no
			// homography involved).
			q := mul3v(transpose3(rotZ(m.yaw)), sub3(vec3(p), vec3{m.dx, m.dy, 0}))
			u1, v1, err := c.ProjectVehiclePointPinhole(q)
			if err != nil {
				t.Fatal(err)
			}
			mot := filter.Motion{DxM: m.dx, DyM: m.dy, DyawRad: m.yaw}
			if _, err := s.Synthesize(src, mot, &dst); err != nil {
				t.Fatal(err)
			}
			cu, cv, n := centroid(t, dst, u1, v1, 12)
			if n == 0 || math.Hypot(cu-u1, cv-v1) > 0.15 {
				t.Errorf("%s %v: dot centroid (%.3f,%.3f) of %d px, want the pinhole projection of the moved point (%.3f,%.3f)", name, p, cu, cv, n, u1, v1)
			}
			src.Close()
		}
	}
}

// gaussDot returns a black w x h BGR frame with a white Gaussian blob of
// standard deviation sigma pixels centred at the sub-pixel position (u, v).
func gaussDot(t testing.TB, w, h int, u, v, sigma float64) gocv.Mat {
	t.Helper()
	b := make([]byte, w*h*3)
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			d2 := (float64(x)-u)*(float64(x)-u) + (float64(y)-v)*(float64(y)-v)
			g := byte(math.Round(255 * math.Exp(-d2/(2*sigma*sigma))))
			i := 3 * (y*w + x)
			b[i], b[i+1], b[i+2] = g, g, g
		}
	}
	m, err := gocv.NewMatFromBytes(h, w, gocv.MatTypeCV8UC3, b)
	if err != nil {
		t.Fatal(err)
	}
	defer m.Close()
	return m.Clone()
}

// centroid is the intensity-weighted centroid of the green channel above
// 20 within r pixels of (u0, v0) (away from any grey fill).
func centroid(t *testing.T, m gocv.Mat, u0, v0, r float64) (u, v float64, n int) {
	b := bytesOf(t, m)
	w := m.Cols()
	var su, sv, sw float64
	for i := 0; i < len(b); i += 3 {
		px := i / 3
		x, y := float64(px%w), float64(px/w)
		if math.Abs(x-u0) > r || math.Abs(y-v0) > r {
			continue
		}
		if g := float64(b[i+1]); g > 20 {
			su += g * x
			sv += g * y
			sw += g
			n++
		}
	}
	if sw == 0 {
		return 0, 0, 0
	}
	return su / sw, sv / sw, n
}
