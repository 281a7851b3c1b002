package filter

import (
	"errors"
	"fmt"
	"math"
	"testing"
)

// ctrvReference is the CTRV transition written out independently from
// Schubert, Richter, Wanielik, "Comparison and evaluation of advanced
// motion models for vehicle tracking", FUSION 2008, CTRV state transition:
//
//	x' = x + v/ω·(sin(ψ + ωT) − sin ψ)
//	y' = y + v/ω·(−cos(ψ + ωT) + cos ψ)
//	ψ' = ψ + ωT,  v' = v,  ω' = ω
//
// and for ω = 0 the straight line x' = x + vT·cos ψ, y' = y + vT·sin ψ.
func ctrvReference(x [5]float64, T float64) [5]float64 {
	px, py, psi, v, w := x[0], x[1], x[2], x[3], x[4]
	if w == 0 {
		return [5]float64{px + v*T*math.Cos(psi), py + v*T*math.Sin(psi), psi, v, w}
	}
	return [5]float64{
		px + v/w*(math.Sin(psi+w*T)-math.Sin(psi)),
		py + v/w*(-math.Cos(psi+w*T)+math.Cos(psi)),
		psi + w*T, v, w,
	}
}

func step(k *kinematics, x [5]float64, dt, a float64) ([5]float64, [5][5]float64, [5][2]float64) {
	var xn [5]float64
	var fj [5][5]float64
	var g [5][2]float64
	k.transition(&x, dt, a, &xn, &fj, &g)
	return xn, fj, g
}

func TestCTRVTransitionClosedForm(t *testing.T) {
	k := &kinematics{model: ModelCTRV}
	tests := []struct {
		name string
		x    [5]float64
		dt   float64
	}{
		{"left turn", [5]float64{1, 2, 0.3, 10, 0.5}, 0.1},
		{"right turn long step", [5]float64{-5, 3, -2, 15, -1}, 2},
		{"fast spin", [5]float64{0, 0, 3, 2, 5.9}, 1},
		{"reverse", [5]float64{0, 0, 1, -3, 0.4}, 0.5},
		{"slow turn", [5]float64{0, 0, 0.7, 20, 1e-3}, 0.1},
		{"straight", [5]float64{3, 4, 1, 12, 0}, 1},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, _, _ := step(k, tc.x, tc.dt, 0)
			want := ctrvReference(tc.x, tc.dt)
			for i := range 5 {
				// The reference loses ~eps·v/ω to cancellation for small ω.
				tol := 1e-12 * (1 + math.Abs(tc.x[3]/math.Max(math.Abs(tc.x[4]), 1e-3)))
				if math.Abs(got[i]-want[i]) > tol {
					t.Errorf("x'[%d] = %.15g, closed form %.15g", i, got[i], want[i])
				}
			}
		})
	}
}

// TestCTRVNearZeroTurnRate checks the ω → 0 limit: at ω = 0 the transition
// is the straight line, it is continuous as ω → 0 from both sides, and it is
// continuous across the switch to the Taylor series of sinc (|ωT/2| = 1e-2).
func TestCTRVNearZeroTurnRate(t *testing.T) {
	k := &kinematics{model: ModelCTRV}
	const v, psi, dt = 20.0, 0.4, 0.1
	line := ctrvReference([5]float64{0, 0, psi, v, 0}, dt)
	got0, _, _ := step(k, [5]float64{0, 0, psi, v, 0}, dt, 0)
	for i := range 5 {
		if got0[i] != line[i] && math.Abs(got0[i]-line[i]) > 1e-15*v*dt {
			t.Errorf("ω=0: x'[%d] = %.17g, straight line %.17g", i, got0[i], line[i])
		}
	}
	for _, w := range []float64{1e-15, -1e-15, 1e-9, -1e-9, 1e-6, -1e-6} {
		got, _, _ := step(k, [5]float64{0, 0, psi, v, w}, dt, 0)
		// Deviation from the line is second order: |Δ| ≈ v·dt·|ω·dt|/2.
		bound := v*dt*math.Abs(w*dt)/2*1.01 + 1e-14
		for i := range 2 {
			if d := math.Abs(got[i] - line[i]); d > bound {
				t.Errorf("ω=%g: x'[%d] off the straight line by %g > %g", w, i, d, bound)
			}
		}
	}
	// Across the series switch: θ/2 = ω·dt/2 = 1e-2 at ω = 0.2.
	wSwitch := 2 * sincSeriesBelow / dt
	for _, side := range []float64{1, -1} {
		w := side * wSwitch
		lo, _, _ := step(k, [5]float64{0, 0, psi, v, w * (1 - 1e-12)}, dt, 0)
		hi, _, _ := step(k, [5]float64{0, 0, psi, v, w * (1 + 1e-12)}, dt, 0)
		ref := ctrvReference([5]float64{0, 0, psi, v, w}, dt)
		for i := range 3 {
			if d := math.Abs(lo[i] - hi[i]); d > 1e-13 {
				t.Errorf("series switch ω=%g: x'[%d] jumps by %g", w, i, d)
			}
			if d := math.Abs(lo[i] - ref[i]); d > 1e-12 {
				t.Errorf("series switch ω=%g: x'[%d] = %.15g, closed form %.15g", w, i, lo[i], ref[i])
			}
		}
	}
	for _, u := range []float64{0.99 * sincSeriesBelow, sincSeriesBelow, 1.01 * sincSeriesBelow} {
		if d := math.Abs(sinc(u) - math.Sin(u)/u); d > 1e-16 {
			t.Errorf("sinc(%g) off by %g", u, d)
		}
		if d := math.Abs(dsinc(u) - (u*math.Cos(u)-math.Sin(u))/(u*u)); d > 1e-12 {
			t.Errorf("dsinc(%g) off by %g", u, d)
		}
	}
}

// TestBicycleTransitionIsCTRV checks that the bicycle transition is the CTRV
// transition with ω = v·tan(δ)/L (kinematic bicycle at the rear axle:
// ẋ = v cos ψ, ẏ = v sin ψ, ψ̇ = v tan δ / L).
func TestBicycleTransitionIsCTRV(t *testing.T) {
	const L = 2.7
	kb := &kinematics{model: ModelBicycle, wheelbaseM: L}
	for _, x := range [][5]float64{{1, 2, 0.3, 10, 0.05}, {0, 0, -1, 5, -0.4}, {0, 0, 0, 8, 0}} {
		got, _, _ := step(kb, x, 0.5, 0)
		want := ctrvReference([5]float64{x[0], x[1], x[2], x[3], x[3] * math.Tan(x[4]) / L}, 0.5)
		for i := range 3 {
			if math.Abs(got[i]-want[i]) > 1e-11 {
				t.Errorf("x=%v: x'[%d] = %.15g, want %.15g", x, i, got[i], want[i])
			}
		}
		if got[4] != x[4] || got[3] != x[3] {
			t.Errorf("x=%v: speed/steer changed: %v", x, got)
		}
	}
}

// TestTransitionAccelControl checks the acceleration control against a
// fine numerical integration of ẋ = v cos ψ, ẏ = v sin ψ, ψ̇ = ω(v),
// v̇ = a (midpoint rule, 100000 substeps). The chord form with the mean
// speed has a leading position error of |a·ω|·dt³/12 for CTRV (derived:
// exact lateral offset ω(v·dt²/2 + a·dt³/3) against ω(v·dt²/2 + a·dt³/4)),
// while for the bicycle it is exact (the path has constant curvature
// tan(δ)/L, so it is an arc of length v_m·dt).
func TestTransitionAccelControl(t *testing.T) {
	for _, k := range []*kinematics{{model: ModelCTRV}, {model: ModelBicycle, wheelbaseM: 2.5}} {
		for _, dt := range []float64{0.01, 0.05, 0.5} {
			x := [5]float64{0, 0, 0.2, 8, 0.3}
			const a = 3.0
			got, _, _ := step(k, x, dt, a)
			px, py, psi, v := 0.0, 0.0, 0.2, 8.0
			const n = 100000
			h := dt / n
			for range n {
				vm := v + a*h/2
				w := x[4]
				if k.model == ModelBicycle {
					w = vm * math.Tan(x[4]) / k.wheelbaseM
				}
				pm := psi + w*h/2
				px += vm * math.Cos(pm) * h
				py += vm * math.Sin(pm) * h
				psi += w * h
				v += a * h
			}
			want := [4]float64{px, py, psi, v}
			posTol := 1.05*a*x[4]*dt*dt*dt/12 + 1e-9
			if k.model == ModelBicycle {
				// Exact: constant curvature, so the path is a circular arc
				// of length v_m·dt whatever the speed profile.
				posTol = 1e-9
			}
			for i, tol := range [4]float64{posTol, posTol, 1e-10, 1e-9} {
				if math.Abs(got[i]-want[i]) > tol {
					t.Errorf("%v dt=%v: x'[%d] = %.12g, integrated %.12g (tolerance %g)", k.model, dt, i, got[i], want[i], tol)
				}
			}
		}
	}
}

// TestTransitionJacobian compares the analytic Jacobian with central finite
// differences (step 1e-6, truncation error ~1e-12 times the third
// derivative).
func TestTransitionJacobian(t *testing.T) {
	models := []*kinematics{{model: ModelCTRV}, {model: ModelBicycle, wheelbaseM: 2.9}}
	states := [][5]float64{
		{1, -2, 0.7, 12, 0.4},
		{0, 0, -2.5, -4, -0.9},
		{0, 0, 0.1, 20, 0},    // straight
		{0, 0, 0.1, 20, 1e-7}, // near zero turn
		{0, 0, 3.1, 0, 0.2},   // standing
	}
	for _, k := range models {
		for _, x := range states {
			for _, dt := range []float64{0.01, 0.4, 0.2} {
				for _, a := range []float64{0, -4} {
					name := fmt.Sprintf("%v/x=%v/dt=%v/a=%v", k.model, x, dt, a)
					t.Run(name, func(t *testing.T) {
						_, fj, _ := step(k, x, dt, a)
						const h = 1e-6
						for j := range 5 {
							xp, xm := x, x
							xp[j] += h
							xm[j] -= h
							fp, _, _ := step(k, xp, dt, a)
							fm, _, _ := step(k, xm, dt, a)
							for i := range 5 {
								num := (fp[i] - fm[i]) / (2 * h)
								if d := math.Abs(num - fj[i][j]); d > 1e-7*(1+math.Abs(num)) {
									t.Errorf("F[%d][%d] = %.10g, finite difference %.10g", i, j, fj[i][j], num)
								}
							}
						}
					})
				}
			}
		}
	}
}

// TestMeasurementJacobian compares H with central finite differences of h.
func TestMeasurementJacobian(t *testing.T) {
	n := &measNoise{speed: 0.1, yawRate: 0.01, steer: 0.01, kinematic: 0.05}
	for _, k := range []*kinematics{{model: ModelCTRV, wheelbaseM: 2.7}, {model: ModelBicycle, wheelbaseM: 2.7}} {
		s := &Sample{SpeedMps: 9, YawRateRps: 0.2, SteerRad: 0.05, HasSteer: true}
		x := [5]float64{1, 2, 0.5, 9.5, 0.06}
		var m measurement
		k.measure(s, &x, n, &m)
		if m.m != 3 {
			t.Fatalf("%v: %d measurements, want 3", k.model, m.m)
		}
		const h = 1e-6
		for j := range 5 {
			xp, xm := x, x
			xp[j] += h
			xm[j] -= h
			var mp, mm measurement
			k.measure(s, &xp, n, &mp)
			k.measure(s, &xm, n, &mm)
			for i := range m.m {
				num := (mp.hx[i] - mm.hx[i]) / (2 * h)
				if math.Abs(num-m.h[i][j]) > 1e-7*(1+math.Abs(num)) {
					t.Errorf("%v: H[%d][%d] = %v, finite difference %v", k.model, i, j, m.h[i][j], num)
				}
			}
		}
	}
}

func TestModelString(t *testing.T) {
	tests := []struct {
		in      string
		want    Model
		wantErr bool
	}{
		{"ctrv", ModelCTRV, false},
		{" CTRV ", ModelCTRV, false},
		{"bicycle", ModelBicycle, false},
		{"invalid", ModelInvalid, true},
		{"", ModelInvalid, true},
		{"ctra", ModelInvalid, true},
	}
	for _, tc := range tests {
		t.Run(tc.in, func(t *testing.T) {
			got, err := ParseModel(tc.in)
			if got != tc.want || (err != nil) != tc.wantErr {
				t.Fatalf("ParseModel(%q) = %v, %v", tc.in, got, err)
			}
			if err != nil && !errors.Is(err, ErrUnknownModel) {
				t.Fatalf("error %v does not wrap ErrUnknownModel", err)
			}
			if err == nil {
				if back, _ := ParseModel(got.String()); back != got {
					t.Fatalf("round trip %v -> %q -> %v", got, got.String(), back)
				}
			}
		})
	}
	if ModelInvalid.String() != "invalid" || Model(9).String() != "invalid" {
		t.Error("invalid models should print as \"invalid\"")
	}
}
