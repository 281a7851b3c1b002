package predictor

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"
)

// TestConfidenceJacobianNumeric checks the analytic Jacobian behind
// sigmaPlanar against central finite differences of our own projection
// (ProjectVehiclePointPinhole, itself checked against cv::projectPoints): a
// covariance with a single unit variance on one motion component must give
// sigma equal to the largest column norm over the reference points.
func TestConfidenceJacobianNumeric(t *testing.T) {
	const h = 1e-6
	for name, c := range testCameras() {
		for mname, m := range testMotions() {
			for k := 0; k < 3; k++ {
				var cov [3][3]float64
				cov[k][k] = 1
				got, err := ConfidenceModel{}.sigmaPlanar(c, m.dx, m.dy, m.yaw, cov)
				if err != nil {
					t.Fatal(err)
				}
				want := 0.0
				for _, d := range DefaultReferenceDistancesM() {
					p1 := vec3{c.XOffsetM + d, c.YOffsetM, 0}
					// World point fixed at its T0 position for the nominal motion.
					rz := rotZ(m.yaw)
					q := mul3v(rz, p1)
					p0 := vec3{q[0] + m.dx, q[1] + m.dy, 0}
					proj := func(mot [3]float64) (float64, float64) {
						p := mul3v(transpose3(rotZ(mot[2])), sub3(p0, vec3{mot[0], mot[1], 0}))
						u, v, err := c.ProjectVehiclePointPinhole(p)
						if err != nil {
							t.Fatal(err)
						}
						return u, v
					}
					plus := [3]float64{m.dx, m.dy, m.yaw}
					minus := plus
					plus[k] += h
					minus[k] -= h
					u1, v1 := proj(plus)
					u0, v0 := proj(minus)
					n := math.Hypot((u1-u0)/(2*h), (v1-v0)/(2*h))
					want = math.Max(want, n)
				}
				if math.Abs(got-want) > 1e-4*math.Max(1, want) {
					t.Errorf("%s/%s component %d: analytic %g numeric %g", name, mname, k, got, want)
				}
			}
		}
	}
}

// TestConfidenceMonotone: growing the covariance (scaling it up or adding a
// positive semi-definite matrix) never raises the confidence, and zero
// covariance gives confidence 1.
func TestConfidenceMonotone(t *testing.T) {
	c := testCameras()["hd-pitch-roll"]
	cm := ConfidenceModel{}
	base := [3][3]float64{{0.01, 0.001, 0}, {0.001, 0.004, 0.0002}, {0, 0.0002, 0.0001}}
	s0, err := cm.sigmaPlanar(c, 2, 0.1, 0.05, [3][3]float64{})
	if err != nil || s0 != 0 || cm.FromSigma(s0, c.Fx) != 1 {
		t.Fatalf("zero covariance: sigma %g conf %g err %v", s0, cm.FromSigma(s0, c.Fx), err)
	}
	prev := 1.0
	for _, k := range []float64{0.01, 0.1, 0.5, 1, 2, 5, 20, 100, 1000, 10000} {
		var cov [3][3]float64
		for i := range cov {
			for j := range cov[i] {
				cov[i][j] = k * base[i][j]
			}
		}
		s, err := cm.sigmaPlanar(c, 2, 0.1, 0.05, cov)
		if err != nil {
			t.Fatal(err)
		}
		conf := cm.FromSigma(s, c.Fx)
		if conf > prev || conf < 0 || conf > 1 {
			t.Fatalf("scale %g: confidence %g after %g", k, conf, prev)
		}
		prev = conf
	}
	if prev > 0.01 {
		t.Fatalf("huge covariance still gives confidence %g", prev)
	}
	// Adding PSD rank-one terms v vᵀ.
	s1, _ := cm.sigmaPlanar(c, 2, 0.1, 0.05, base)
	for _, v := range [][3]float64{{0.1, 0, 0}, {0, 0.1, 0}, {0, 0, 0.01}, {0.05, -0.05, 0.003}} {
		cov := base
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				cov[i][j] += v[i] * v[j]
			}
		}
		s2, _ := cm.sigmaPlanar(c, 2, 0.1, 0.05, cov)
		if s2 < s1 {
			t.Errorf("adding %v lowered sigma %g -> %g", v, s1, s2)
		}
	}
}

// TestConfidenceFromSigmaWorked checks the probability against worked
// values of the normal distribution: P(|Z| <= 1) = 0.6826894921370859 and
// P(|Z| <= 1.959963984540054) = 0.95 (standard normal table values, from
// memory; math.Erf recomputes them). With ToleranceMrad 4 and Fx 1000 px the
// tolerance is 4 px.
func TestConfidenceFromSigmaWorked(t *testing.T) {
	cm := ConfidenceModel{ToleranceMrad: 4}
	if got := cm.FromSigma(4, 1000); math.Abs(got-0.6826894921370859) > 1e-12 {
		t.Fatalf("sigma = tolerance: got %v, want 0.68269", got)
	}
	if got := cm.FromSigma(4/1.959963984540054, 1000); math.Abs(got-0.95) > 1e-9 {
		t.Fatalf("sigma = tolerance/1.96: got %v, want 0.95", got)
	}
	// Monte Carlo of the stated meaning: the share of normal errors within
	// the tolerance.
	rng := rand.New(rand.NewPCG(1, 2))
	in := 0
	const n = 200000
	for range n {
		if math.Abs(3*rng.NormFloat64()) <= 4 {
			in++
		}
	}
	if got, want := float64(in)/n, cm.FromSigma(3, 1000); math.Abs(got-want) > 0.005 {
		t.Fatalf("simulated share %v, formula %v", got, want)
	}
	// Twice the resolution, twice the pixel error: the same confidence.
	if a, b := cm.FromSigma(3, 1000), cm.FromSigma(6, 2000); math.Abs(a-b) > 1e-15 {
		t.Fatalf("resolution dependent: %v vs %v", a, b)
	}
	if cm.FromSigma(0, 1000) != 1 {
		t.Fatal("zero sigma must give 1")
	}
	if cm.FromSigma(math.NaN(), 1000) != 0 || cm.FromSigma(-1, 1000) != 0 || cm.FromSigma(1, 0) != 0 {
		t.Fatal("bad sigma or focal length must give 0")
	}
}

func TestConfidenceBadInput(t *testing.T) {
	c := testCameras()["level"]
	bad := []struct {
		name string
		cov  [3][3]float64
		dx   float64
	}{
		{"negative variance", [3][3]float64{{-1, 0, 0}, {0, 1, 0}, {0, 0, 1}}, 0},
		{"NaN covariance", [3][3]float64{{math.NaN(), 0, 0}}, 0},
		{"Inf motion", [3][3]float64{}, math.Inf(1)},
	}
	for _, tc := range bad {
		if _, err := (ConfidenceModel{}).sigmaPlanar(c, tc.dx, 0, 0, tc.cov); !errors.Is(err, ErrInvalidMotion) {
			t.Errorf("%s: got %v", tc.name, err)
		}
	}
	if err := (ConfidenceModel{ToleranceMrad: -1}).Validate(); !errors.Is(err, ErrInvalidConfig) {
		t.Errorf("negative scale: %v", err)
	}
	if err := (ConfidenceModel{ReferenceDistancesM: []float64{5, 0}}).Validate(); !errors.Is(err, ErrInvalidConfig) {
		t.Errorf("zero distance: %v", err)
	}
	// Reference points behind a camera mounted far ahead of them.
	far := c
	far.XOffsetM = 1
	if _, err := (ConfidenceModel{ReferenceDistancesM: []float64{-0.5}}).sigmaPlanar(far, 0, 0, 0, [3][3]float64{}); !errors.Is(err, ErrBehindCamera) {
		t.Errorf("all points behind: %v", err)
	}
}
