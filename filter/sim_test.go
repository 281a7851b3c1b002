package filter

import (
	"math"
	"math/rand/v2"
	"testing"
)

// simSpec describes a simulated drive generated with the filter's own
// model: x_{k+1} = f(x_k, dt_k, a_k) + G(x_k)·ν_k, ν_k ~ N(0, diag(σa², σt²)),
// and samples z_k = h(x_k) + v_k, v_k ~ N(0, R) (noise-free if !noisy).
type simSpec struct {
	cfg       Config // with defaults filled in
	n         int    // number of samples
	dtUs      int64  // nominal sample period
	jitterUs  int64  // uniform ± jitter of the sample period
	x0        [5]float64
	accel     bool // samples carry an acceleration (a sinusoid), used as control
	steer     bool // samples carry a steering angle (bicycle only)
	noisy     bool
	startTime int64
}

// simulate returns the samples and the true states at the sample times.
func simulate(t testing.TB, rng *rand.Rand, sp simSpec) ([]Sample, [][5]float64) {
	t.Helper()
	c, err := sp.cfg.withDefaults()
	if err != nil {
		t.Fatal(err)
	}
	k := kinematics{model: c.Model, wheelbaseM: c.WheelbaseM}
	turnNoise := c.YawAccelNoiseRps2
	if c.Model == ModelBicycle {
		turnNoise = c.SteerRateNoiseRps
	}
	gauss := func(s float64) float64 {
		if !sp.noisy {
			return 0
		}
		return s * rng.NormFloat64()
	}
	samples := make([]Sample, 0, sp.n)
	truth := make([][5]float64, 0, sp.n)
	x := sp.x0
	tUs := sp.startTime
	for i := range sp.n {
		if i > 0 {
			prev := samples[i-1]
			dtUs := sp.dtUs
			if sp.jitterUs > 0 {
				dtUs += rng.Int64N(2*sp.jitterUs+1) - sp.jitterUs
			}
			tUs += dtUs
			dt := float64(dtUs) * 1e-6
			a, sa := 0.0, c.AccelNoiseMps2
			if prev.HasAccel {
				a, sa = prev.AccelMps2, c.AccelInputNoiseMps2
			}
			var xn [5]float64
			var fj [5][5]float64
			var g [5][2]float64
			k.transition(&x, dt, a, &xn, &fj, &g)
			na, nt := gauss(sa), gauss(turnNoise)
			for j := range 5 {
				xn[j] += g[j][0]*na + g[j][1]*nt
			}
			x = xn
		}
		s := Sample{TimeUs: tUs}
		s.SpeedMps = x[IdxSpeed] + gauss(c.SpeedNoiseMps)
		if c.Model == ModelBicycle {
			s.YawRateRps = k.yawRate(&x) + gauss(math.Hypot(c.YawRateNoiseRps, c.KinematicNoiseRps))
			if sp.steer {
				s.SteerRad, s.HasSteer = x[IdxTurn]+gauss(c.SteerNoiseRad), true
			}
		} else {
			s.YawRateRps = x[IdxTurn] + gauss(c.YawRateNoiseRps)
		}
		if sp.accel {
			s.AccelMps2, s.HasAccel = 1.5*math.Sin(float64(i)*0.05), true
		}
		samples = append(samples, s)
		truth = append(truth, x)
	}
	return samples, truth
}

func mustNew(t testing.TB, c Config) *Filter {
	t.Helper()
	f, err := New(c)
	if err != nil {
		t.Fatal(err)
	}
	return f
}

func mustAdd(t testing.TB, f *Filter, s ...Sample) {
	t.Helper()
	for _, x := range s {
		if err := f.Add(x); err != nil {
			t.Fatal(err)
		}
	}
}
