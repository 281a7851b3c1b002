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
	fits, best, err := FitTurnNoise(context.Background(), drives, filter.Config{}, []float64{0.02, 0.05, 0.1, 0.15, 0.2, 0.3, 0.5, 1})
	if err != nil {
		t.Fatal(err)
	}
	for i, f := range fits {
		t.Logf("yaw accel noise %.3f rad/s^2: NLL %.4f over %d predictions %s", f.GapYawAccelNoiseRps2, f.NLL, f.Predictions, map[bool]string{true: "<- best"}[i == best])
	}
}
