package bench

import (
	"context"
	"os"
	"path/filepath"
	"testing"

	"stopgap/filter"
)

// TestFitTurnNoiseDrives prints the likelihood of each candidate on the
// drives named in STOPGAP_FIT_DRIVES (colon separated); it is how the
// default noise was chosen and is skipped without drives.
func TestFitTurnNoiseDrives(t *testing.T) {
	env := os.Getenv("STOPGAP_FIT_DRIVES")
	if env == "" {
		t.Skip("set STOPGAP_FIT_DRIVES=dir1:dir2 to fit the noise on recorded drives")
	}
	drives := filepath.SplitList(env)
	var cands []filter.Config
	for _, q := range []float64{0.02, 0.03, 0.05, 0.07, 0.1, 0.15, 0.2, 0.3} {
		for _, g := range []float64{0.25, 0.5, 1, 2} {
			for _, w := range []int64{200_000, 300_000, 500_000} {
				cands = append(cands, filter.Config{Model: filter.ModelCTRV, WheelbaseM: 2.7, GapYawAccelNoiseRps2: q, TurnAdaptGain: g, TurnAdaptWindowUs: w})
			}
		}
	}
	fits, best, err := FitTurnNoise(context.Background(), drives, cands)
	if err != nil {
		t.Fatal(err)
	}
	for i, f := range fits {
		t.Logf("gap noise %.2f rad/s^2, gain %.2g, window %d ms: NLL %.4f over %d predictions %s", f.GapYawAccelNoiseRps2, f.TurnAdaptGain, f.TurnAdaptWindowUs/1000, f.NLL, f.Predictions, map[bool]string{true: "<- best"}[i == best])
	}
	// The base noise by the Brier score of the confidence, at the best
	// gain and window.
	for _, q := range []float64{0.03, 0.05, 0.07, 0.1, 0.15} {
		c := filter.Config{Model: filter.ModelCTRV, WheelbaseM: 2.7, GapYawAccelNoiseRps2: q,
			TurnAdaptGain: fits[best].TurnAdaptGain, TurnAdaptWindowUs: fits[best].TurnAdaptWindowUs}
		cal, err := CalibrateTruth(context.Background(), TruthCalibrationConfig{Drives: drives, Losses: heldOutLosses(20), Filter: c})
		if err != nil {
			t.Fatal(err)
		}
		t.Logf("gap noise %.2f rad/s^2: Brier %.5f, ECE %.4f over %d ticks", q, cal.Brier, cal.ECE, cal.Frames)
	}
}
