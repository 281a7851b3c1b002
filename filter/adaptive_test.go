package filter

import (
	"math"
	"testing"
)

// TestGapTurnAccel: with telemetry whose yaw rate grows at a constant
// a = 0.8 rad/s² (noise-free, 100 Hz, constant speed), the heading change
// over a gap of τ = 0.3 s after the last sample is, in closed form,
// ω(t0) τ + a τ²/2; with TurnAccelOff it is the constant-rate ω(t0) τ.
// The gap's heading variance grows with |â| (adaptive noise).
func TestGapTurnAccel(t *testing.T) {
	const a, w0, tau = 0.8, 0.1, 0.3
	feed := func(cfg Config) *Filter {
		f := mustNew(t, cfg)
		for i := range 101 {
			ts := float64(i) * 0.01
			mustAdd(t, f, Sample{TimeUs: int64(i) * 10_000, SpeedMps: 8, YawRateRps: w0 + a*ts})
		}
		return f
	}
	t0 := int64(1_000_000)
	wt0 := w0 + a*1.0
	for _, tc := range []struct {
		name string
		cfg  Config
		want float64
	}{
		{"yaw acceleration", Config{Model: ModelCTRV}, wt0*tau + a*tau*tau/2},
		{"constant turn rate", Config{Model: ModelCTRV, TurnAccelOff: true}, wt0 * tau},
	} {
		t.Run(tc.name, func(t *testing.T) {
			f := feed(tc.cfg)
			m, err := f.Relative(t0, t0+int64(tau*1e6))
			if err != nil {
				t.Fatal(err)
			}
			// The filter's yaw-rate estimate lags the ramp a little.
			if math.Abs(m.DyawRad-tc.want) > 0.004 {
				t.Errorf("dyaw %.5f rad, want %.5f ± 0.004", m.DyawRad, tc.want)
			}
		})
	}
	// The trend estimate itself: â = 0.8, ĵ = 0 for a linear ramp.
	f := feed(Config{Model: ModelCTRV})
	ah, jh, ok := f.turnTrend(f.hist.len() - 1)
	if !ok || math.Abs(ah-a) > 1e-6 || jh > 1e-6 {
		t.Errorf("trend â %.6f ĵ %.6f, want %g and 0", ah, jh, a)
	}
	// Too short a history: the trend is unknown.
	short := mustNew(t, Config{Model: ModelCTRV})
	for i := range 5 {
		mustAdd(t, short, Sample{TimeUs: int64(i) * 10_000, SpeedMps: 8, YawRateRps: wt0})
	}
	if _, _, ok := short.turnTrend(short.hist.len() - 1); ok {
		t.Error("40 ms of history: the 200 ms trend must be unknown")
	}
	// Adaptive noise: the ramp's gap variance exceeds a steady drive's.
	steady := mustNew(t, Config{Model: ModelCTRV})
	for i := range 101 {
		mustAdd(t, steady, Sample{TimeUs: int64(i) * 10_000, SpeedMps: 8, YawRateRps: wt0})
	}
	ms, _ := steady.Relative(t0, t0+300_000)
	mr, _ := f.Relative(t0, t0+300_000)
	if !(mr.Cov[2][2] > 2*ms.Cov[2][2]) {
		t.Errorf("gap heading variance %.3g on the ramp, %.3g steady: want the ramp's larger", mr.Cov[2][2], ms.Cov[2][2])
	}
}
