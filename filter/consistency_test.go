package filter

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
	"gonum.org/v1/gonum/stat/distuv"
)

// TestConsistencyNEESNIS is the Monte Carlo consistency test of
// Bar-Shalom, Li, Kirubarajan, "Estimation with Applications to Tracking
// and Navigation", Wiley 2001, sec. 5.4: with truth and measurements drawn
// from the filter's own model and noise,
//
//   - the normalised estimation error squared ε_k = e_kᵀ P_k⁻¹ e_k averaged
//     over N runs, times N, is χ² with N·n degrees of freedom, so the
//     average lies in [χ²⁻¹(0.025; N·n)/N, χ²⁻¹(0.975; N·n)/N] with 95%
//     probability (checked at a mid and the final time);
//   - the normalised innovation squared, averaged over N runs and K steps
//     (innovations are white, so the terms are independent), times N·K, is
//     χ² with N·K·m degrees of freedom (checked against its 95% interval).
//
// The seed is fixed, so the test is deterministic; it fails for a filter
// whose covariance is too small or too large by more than a few percent.
func TestConsistencyNEESNIS(t *testing.T) {
	const (
		runs  = 100
		steps = 300 // 3 s at 100 Hz
		// The pose covariance starts at zero (the track origin is exact),
		// so P is singular at first; NEES is evaluated from this step on.
		firstNEES = 20
	)
	tests := []struct {
		name string
		spec simSpec
	}{
		{"ctrv", simSpec{cfg: Config{Model: ModelCTRV}, x0: [5]float64{0, 0, 0, 12, 0.1}}},
		{"ctrv accel", simSpec{cfg: Config{Model: ModelCTRV}, x0: [5]float64{0, 0, 0, 8, -0.2}, accel: true}},
		{"bicycle steer", simSpec{cfg: Config{Model: ModelBicycle, WheelbaseM: 2.7}, x0: [5]float64{0, 0, 0, 10, 0.05}, steer: true}},
	}
	for ti, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(2001, uint64(ti)))
			checkAt := []int{steps / 2, steps - 1}
			neesSum := make([]float64, steps)
			nisSum, nisDof := 0.0, 0
			for range runs {
				sp := tc.spec
				sp.n, sp.dtUs, sp.jitterUs, sp.noisy = steps, 10_000, 2_000, true
				samples, truth := simulate(t, rng, sp)
				f := mustNew(t, sp.cfg)
				for k, s := range samples {
					mustAdd(t, f, s)
					if k == 0 {
						continue
					}
					e := f.hist.last()
					nisSum += e.nis
					nisDof += e.m
					if e.m == 0 {
						t.Fatal("update skipped")
					}
					if k >= firstNEES {
						neesSum[k] += nees(t, truth[k], e.x, e.p)
					}
				}
			}
			for _, k := range checkAt {
				n := float64(StateDim)
				lo := distuv.ChiSquared{K: runs * n}.Quantile(0.025) / runs
				hi := distuv.ChiSquared{K: runs * n}.Quantile(0.975) / runs
				avg := neesSum[k] / runs
				t.Logf("step %d: mean NEES %.3f, 95%% interval [%.3f, %.3f] (n=%d)", k, avg, lo, hi, StateDim)
				if avg < lo || avg > hi {
					t.Errorf("step %d: mean NEES %.3f outside [%.3f, %.3f]", k, avg, lo, hi)
				}
			}
			inside := 0
			for k := firstNEES; k < steps; k++ {
				lo := distuv.ChiSquared{K: runs * StateDim}.Quantile(0.025) / runs
				hi := distuv.ChiSquared{K: runs * StateDim}.Quantile(0.975) / runs
				if avg := neesSum[k] / runs; avg >= lo && avg <= hi {
					inside++
				}
			}
			t.Logf("mean NEES inside the 95%% interval at %d of %d steps", inside, steps-firstNEES)
			dof := float64(nisDof)
			terms := float64(runs * (steps - 1))
			lo := distuv.ChiSquared{K: dof}.Quantile(0.025) / terms
			hi := distuv.ChiSquared{K: dof}.Quantile(0.975) / terms
			avg := nisSum / terms
			t.Logf("mean NIS %.4f, 95%% interval [%.4f, %.4f] (m=%.0f)", avg, lo, hi, dof/terms)
			if avg < lo || avg > hi {
				t.Errorf("mean NIS %.4f outside [%.4f, %.4f]", avg, lo, hi)
			}
		})
	}
}

// nees returns eᵀP⁻¹e for e = truth − estimate (yaw difference wrapped).
func nees(t *testing.T, truth, est [StateDim]float64, p [StateDim * StateDim]float64) float64 {
	t.Helper()
	e := make([]float64, StateDim)
	for i := range StateDim {
		e[i] = truth[i] - est[i]
	}
	e[IdxYaw] = math.Remainder(e[IdxYaw], 2*math.Pi)
	sym := mat.NewSymDense(StateDim, p[:])
	var ch mat.Cholesky
	if !ch.Factorize(sym) {
		t.Fatalf("posterior covariance not positive definite: %v", p)
	}
	ev := mat.NewVecDense(StateDim, e)
	var u mat.VecDense
	if err := ch.SolveVecTo(&u, ev); err != nil {
		t.Fatalf("NEES solve: %v", err)
	}
	return mat.Dot(ev, &u)
}
