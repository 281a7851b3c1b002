package simdrive

import (
	"math"
	"testing"

	"stopgap/filter"
)

// TestFitActuatorRecoversDrive: filter.FitActuator, run on a default drive's
// commands and noisy telemetry (no frames rendered), recovers the delay
// within 10 ms and each lag within 15 % of the values the drive used. The
// tolerances are ours: a grid of 1 ms and 1 ms of lag, with gyro noise,
// tyre slip and the operator's corrections as the only excitation.
func TestFitActuatorRecoversDrive(t *testing.T) {
	for _, tc := range []struct {
		name string
		cfg  Config
	}{
		{"default", Config{}},
		{"slow link, quick steering", Config{Seed: 4, CommandDelayMs: 250, SteerLagS: 0.08, SpeedLagS: 0.9}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			cfg, err := tc.cfg.withDefaults()
			if err != nil {
				t.Fatal(err)
			}
			tr := newDriveTrajectory(cfg)
			cmds := make([]filter.Command, 0, len(tr.act.cmds))
			for _, c := range tr.act.cmds {
				cmds = append(cmds, filter.Command{TimeUs: c.TimeUs, SteerRad: c.SteerRad, SpeedMps: c.SpeedMps, HasSpeed: true})
			}
			var samples []filter.Sample
			for _, r := range telemetryRows(cfg, tr) {
				samples = append(samples, filter.Sample{TimeUs: r.TimeUs, SpeedMps: r.SpeedMps, YawRateRps: r.YawRateRps,
					SteerRad: r.SteerRad, HasSteer: r.HasSteer})
			}
			fit, err := filter.FitActuator(cmds, samples, cfg.WheelbaseM)
			if err != nil {
				t.Fatal(err)
			}
			got := fit.Actuator
			t.Logf("delay %d us (true %.0f), steer lag %.3f s (true %.3f), speed lag %.3f s (true %.3f); residual RMS %.4f rad/s, %.4f m/s over %d samples",
				got.DelayUs, cfg.CommandDelayMs*1000, got.SteerLagS, cfg.SteerLagS, got.SpeedLagS, cfg.SpeedLagS, fit.SteerRMSRps, fit.SpeedRMSMps, fit.Samples)
			if d := math.Abs(float64(got.DelayUs) - cfg.CommandDelayMs*1000); d > 10_000 {
				t.Errorf("delay %d us, want %.0f ± 10000", got.DelayUs, cfg.CommandDelayMs*1000)
			}
			if r := got.SteerLagS / cfg.SteerLagS; r < 0.85 || r > 1.15 {
				t.Errorf("steer lag %.3f s, want %.3f ± 15 %%", got.SteerLagS, cfg.SteerLagS)
			}
			if r := got.SpeedLagS / cfg.SpeedLagS; r < 0.85 || r > 1.15 {
				t.Errorf("speed lag %.3f s, want %.3f ± 15 %%", got.SpeedLagS, cfg.SpeedLagS)
			}
		})
	}
}
