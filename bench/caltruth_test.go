package bench

import (
	"context"
	"os"
	"path/filepath"
	"testing"

	"stopgap/internal/lossmodel"
)

// TestCalibrateTruthDrives prints the calibration over the drives named in
// STOPGAP_CAL_DRIVES (colon separated) and 20 loss seeds; skipped without.
func TestCalibrateTruthDrives(t *testing.T) {
	env := os.Getenv("STOPGAP_CAL_DRIVES")
	if env == "" {
		t.Skip("set STOPGAP_CAL_DRIVES=dir1:dir2 to measure the calibration on recorded drives")
	}
	cal, err := CalibrateTruth(context.Background(), TruthCalibrationConfig{Drives: filepath.SplitList(env), Losses: heldOutLosses(20)})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("ECE %.4f Brier %.4f over %d ticks; confidence %.3f observed %.3f", cal.ECE, cal.Brier, cal.Frames, cal.ConfMean, cal.GoodShare)
	for _, b := range cal.Bins {
		t.Logf("  [%.1f, %.1f): %5d ticks, confidence %.3f, observed %.3f", b.Lo, b.Hi, b.Frames, b.ConfMean, b.Observed)
	}
}

// heldOutLosses returns n Gilbert-Elliott links at the headline setting
// (10 % loss, 200 ms bursts) with seeds 101..100+n.
func heldOutLosses(n int) []lossmodel.Config {
	out := make([]lossmodel.Config, n)
	for i := range out {
		out[i] = lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.1, BurstMs: 200, Seed: uint64(101 + i)}
	}
	return out
}
