package filter

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

func newKalman(t testing.TB, n int) *Kalman {
	t.Helper()
	k, err := NewKalman(n)
	if err != nil {
		t.Fatal(err)
	}
	return k
}

// TestKalmanBuildingHeight runs the scalar "height of a building" example
// of the kalmanfilter.net online tutorial (A. Becker), one-dimensional
// Kalman filter section, static-system example: true height 50 m, altimeter
// standard deviation 5 m (r = 25 m²), initial guess 60 m with variance
// 225 m², no process noise, ten measurements. All printed values below are
// (from memory): the measurements, and the first-step gain 0.9, estimate
// 50.13 m, variance 22.5 m², and the final variance 2.47 m². The final
// estimate printed there is not asserted because I do not remember it with
// confidence.
//
// The whole run is also checked against a closed form derived here: for a
// constant observed with independent noise and no process noise the Kalman
// posterior equals the information-form batch estimate
// P_n = 1/(1/P0 + n/r), x_n = P_n·(x0/P0 + Σz/r).
func TestKalmanBuildingHeight(t *testing.T) {
	z := []float64{49.03, 48.44, 55.21, 49.98, 50.6, 52.61, 45.87, 42.64, 48.26, 55.84} // (from memory)
	const x0, p0, r = 60.0, 225.0, 25.0
	k := newKalman(t, 1)
	if err := k.Set([]float64{x0}, []float64{p0}); err != nil {
		t.Fatal(err)
	}
	f := mat.NewDense(1, 1, []float64{1})
	q := mat.NewDense(1, 1, []float64{0})
	h := mat.NewDense(1, 1, []float64{1})
	rm := mat.NewDense(1, 1, []float64{r})
	sum := 0.0
	for i, zi := range z {
		if err := k.Predict(f, q); err != nil {
			t.Fatal(err)
		}
		if _, err := k.Update(mat.NewVecDense(1, []float64{zi}), h, rm); err != nil {
			t.Fatal(err)
		}
		x, p := k.Mean(nil)[0], k.Cov(nil)[0]
		if i == 0 {
			// Printed to two decimals (from memory): K = 0.9, x = 50.13, p = 22.5.
			if math.Abs(x-50.13) > 0.005 || math.Abs(p-22.5) > 1e-12 {
				t.Errorf("step 1: x=%v p=%v, want 50.13 and 22.5", x, p)
			}
		}
		n := float64(i + 1)
		sum += zi
		pn := 1 / (1/p0 + n/r)
		xn := pn * (x0/p0 + sum/r)
		if math.Abs(x-xn) > 1e-12*xn || math.Abs(p-pn) > 1e-12*pn {
			t.Errorf("step %d: x=%.15g p=%.15g, closed form x=%.15g p=%.15g", i+1, x, p, xn, pn)
		}
	}
	if p := k.Cov(nil)[0]; math.Abs(p-2.47) > 0.005 {
		t.Errorf("final variance %v, printed 2.47 (from memory)", p)
	}
}

// TestKalmanLocalLevelSteadyState checks the predict path with process
// noise on the random walk plus noise ("local level") model x' = x + w,
// w ~ N(0, q), z = x + v, v ~ N(0, r). Its steady-state prior variance
// solves the scalar Riccati equation P = P·r/(P + r) + q, so
// P = (q + sqrt(q² + 4·q·r))/2 (derived here).
func TestKalmanLocalLevelSteadyState(t *testing.T) {
	for _, tc := range []struct{ q, r float64 }{{1, 1}, {0.01, 4}, {10, 0.1}} {
		k := newKalman(t, 1)
		_ = k.Set([]float64{0}, []float64{100})
		f := mat.NewDense(1, 1, []float64{1})
		qm := mat.NewDense(1, 1, []float64{tc.q})
		h := mat.NewDense(1, 1, []float64{1})
		rm := mat.NewDense(1, 1, []float64{tc.r})
		z := mat.NewVecDense(1, []float64{0})
		for range 500 {
			_ = k.Predict(f, qm)
			if _, err := k.Update(z, h, rm); err != nil {
				t.Fatal(err)
			}
		}
		_ = k.Predict(f, qm)
		want := (tc.q + math.Sqrt(tc.q*tc.q+4*tc.q*tc.r)) / 2
		if got := k.Cov(nil)[0]; math.Abs(got-want) > 1e-12*want {
			t.Errorf("q=%v r=%v: steady prior variance %.15g, want %.15g", tc.q, tc.r, got, want)
		}
	}
}

// TestKalmanAlphaBetaSteadyState checks a two-state constant-velocity
// filter with discrete white noise acceleration,
// Q = σa²·[[T⁴/4, T³/2], [T³/2, T²]], position measured with σw, against
// the steady-state α-β gains in terms of the tracking index
// λ = σa·T²/σw (Kalata 1984; Bar-Shalom, Li, Kirubarajan 2001, sec. 6.5):
// α = −(λ² + 8λ − (λ+4)·sqrt(λ² + 8λ))/8, β = (λ² + 4λ − λ·sqrt(λ² + 8λ))/4,
// with the gain K = [α, β/T] (formulas from memory).
func TestKalmanAlphaBetaSteadyState(t *testing.T) {
	for _, tc := range []struct{ T, sa, sw float64 }{{0.1, 1, 0.5}, {1, 0.2, 3}, {0.01, 5, 0.01}} {
		T := tc.T
		k := newKalman(t, 2)
		_ = k.Set([]float64{0, 0}, []float64{1e4, 0, 0, 1e4})
		f := mat.NewDense(2, 2, []float64{1, T, 0, 1})
		v := tc.sa * tc.sa
		q := mat.NewDense(2, 2, []float64{v * T * T * T * T / 4, v * T * T * T / 2, v * T * T * T / 2, v * T * T})
		h := mat.NewDense(1, 2, []float64{1, 0})
		r := mat.NewDense(1, 1, []float64{tc.sw * tc.sw})
		z := mat.NewVecDense(1, []float64{0})
		for range 5000 {
			_ = k.Predict(f, q)
			if _, err := k.Update(z, h, r); err != nil {
				t.Fatal(err)
			}
		}
		// Gain from the steady prior: K = P⁻Hᵀ/(HP⁻Hᵀ + r).
		_ = k.Predict(f, q)
		p := k.Cov(nil)
		s := p[0] + tc.sw*tc.sw
		k1, k2 := p[0]/s, p[2]/s
		lam := tc.sa * T * T / tc.sw
		rt := math.Sqrt(lam*lam + 8*lam)
		alpha := -(lam*lam + 8*lam - (lam+4)*rt) / 8
		beta := (lam*lam + 4*lam - lam*rt) / 4
		if math.Abs(k1-alpha) > 1e-9 || math.Abs(k2*T-beta) > 1e-9 {
			t.Errorf("T=%v σa=%v σw=%v: α=%.12g β=%.12g, want %.12g %.12g (λ=%v)", T, tc.sa, tc.sw, k1, k2*T, alpha, beta, lam)
		}
	}
}

// TestKalmanUpdateInformationForm checks one vector update against the
// information form (a textbook identity, derived from Bayes' rule for
// Gaussians): P⁺ = (P⁻¹ + HᵀR⁻¹H)⁻¹, x⁺ = P⁺·(P⁻¹x + HᵀR⁻¹z), and the NIS
// against yᵀ(HPHᵀ + R)⁻¹y, using gonum's general inverse as reference.
func TestKalmanUpdateInformationForm(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	const n, m = 4, 3
	for trial := range 20 {
		a := randDense(rng, n, n)
		p := mat.NewDense(n, n, nil)
		p.Mul(a, a.T())
		for i := range n {
			p.Set(i, i, p.At(i, i)+0.1)
		}
		b := randDense(rng, m, m)
		r := mat.NewDense(m, m, nil)
		r.Mul(b, b.T())
		for i := range m {
			r.Set(i, i, r.At(i, i)+0.1)
		}
		h := randDense(rng, m, n)
		x := randVec(rng, n)
		z := randVec(rng, m)

		k := newKalman(t, n)
		if err := k.Set(x.RawVector().Data, p.RawMatrix().Data); err != nil {
			t.Fatal(err)
		}
		nis, err := k.Update(z, h, r)
		if err != nil {
			t.Fatal(err)
		}

		var pi, ri, info, post mat.Dense
		must(t, pi.Inverse(p))
		must(t, ri.Inverse(r))
		var hri, tmp mat.Dense
		hri.Mul(h.T(), &ri)
		tmp.Mul(&hri, h)
		info.Add(&pi, &tmp)
		must(t, post.Inverse(&info))
		var v1, v2, xw mat.VecDense
		v1.MulVec(&pi, x)
		v2.MulVec(&hri, z)
		v1.AddVec(&v1, &v2)
		xw.MulVec(&post, &v1)

		var s, si mat.Dense
		var hp mat.Dense
		hp.Mul(h, p)
		s.Mul(&hp, h.T())
		s.Add(&s, r)
		must(t, si.Inverse(&s))
		var y, syy mat.VecDense
		y.MulVec(h, x)
		y.SubVec(z, &y)
		syy.MulVec(&si, &y)
		wantNIS := mat.Dot(&y, &syy)

		gotX, gotP := k.Mean(nil), k.Cov(nil)
		for i := range n {
			if d := math.Abs(gotX[i] - xw.AtVec(i)); d > 1e-9*(1+math.Abs(xw.AtVec(i))) {
				t.Fatalf("trial %d: x[%d]=%v, information form %v", trial, i, gotX[i], xw.AtVec(i))
			}
			for j := range n {
				if d := math.Abs(gotP[i*n+j] - post.At(i, j)); d > 1e-9*(1+math.Abs(post.At(i, j))) {
					t.Fatalf("trial %d: P[%d,%d]=%v, information form %v", trial, i, j, gotP[i*n+j], post.At(i, j))
				}
			}
		}
		if math.Abs(nis-wantNIS) > 1e-9*(1+wantNIS) {
			t.Fatalf("trial %d: NIS %v, want %v", trial, nis, wantNIS)
		}
	}
}

func TestKalmanErrors(t *testing.T) {
	k := newKalman(t, 2)
	_ = k.Set([]float64{1, 2}, []float64{1, 0, 0, 1})
	before := append(k.Mean(nil), k.Cov(nil)...)
	i2 := mat.NewDense(2, 2, []float64{1, 0, 0, 1})
	i3 := mat.NewDense(3, 3, nil)
	tests := []struct {
		name string
		err  error
		want error
	}{
		{"predict F wrong size", k.Predict(i3, i2), ErrDimension},
		{"predict Q wrong size", k.Predict(i2, i3), ErrDimension},
		{"predict fx wrong size", k.PredictNonlinear(mat.NewVecDense(3, nil), i2, i2), ErrDimension},
		{"update H wrong size", second(k.Update(mat.NewVecDense(1, nil), i2, mat.NewDense(1, 1, []float64{1}))), ErrDimension},
		{"update R wrong size", second(k.Update(mat.NewVecDense(1, nil), mat.NewDense(1, 2, nil), i2)), ErrDimension},
		{"update hx wrong size", second(k.UpdateNonlinear(mat.NewVecDense(1, nil), mat.NewVecDense(2, nil), mat.NewDense(1, 2, nil), mat.NewDense(1, 1, []float64{1}))), ErrDimension},
		{"update S not PD", second(k.Update(mat.NewVecDense(1, nil), mat.NewDense(1, 2, nil), mat.NewDense(1, 1, []float64{-1}))), ErrNumeric},
		{"predict non-finite", k.Predict(mat.NewDense(2, 2, []float64{math.Inf(1), 0, 0, 1}), i2), ErrNumeric},
		{"set wrong size", k.Set([]float64{1}, []float64{1}), ErrDimension},
		{"set NaN", k.Set([]float64{math.NaN(), 0}, []float64{1, 0, 0, 1}), ErrNumeric},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if !errors.Is(tc.err, tc.want) {
				t.Fatalf("error %v, want %v", tc.err, tc.want)
			}
		})
	}
	after := append(k.Mean(nil), k.Cov(nil)...)
	for i := range before {
		if math.Float64bits(before[i]) != math.Float64bits(after[i]) {
			t.Fatalf("state changed by failing calls: %v -> %v", before, after)
		}
	}
	if _, err := NewKalman(0); !errors.Is(err, ErrDimension) {
		t.Errorf("NewKalman(0): %v", err)
	}
}

func second(_ float64, err error) error { return err }

func must(t *testing.T, err error) {
	t.Helper()
	if err != nil {
		t.Fatal(err)
	}
}

func randDense(rng *rand.Rand, r, c int) *mat.Dense {
	d := make([]float64, r*c)
	for i := range d {
		d[i] = rng.NormFloat64()
	}
	return mat.NewDense(r, c, d)
}

func randVec(rng *rand.Rand, n int) *mat.VecDense {
	d := make([]float64, n)
	for i := range d {
		d[i] = rng.NormFloat64()
	}
	return mat.NewVecDense(n, d)
}
