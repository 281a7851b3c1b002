package bench

import (
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"stopgap/bench/simdrive"
	"stopgap/filter"
)

// motionTable formats rows for a log.
func motionTable(rows []MotionRow) string {
	var b strings.Builder
	fmt.Fprintf(&b, "%-16s %-20s %-8s %9s %9s %8s %10s %9s\n", "source", "telemetry", "model", "hold dB", "shown dB", "gain dB", "predicted", "harm")
	for _, r := range rows {
		link := "lost with the video"
		if r.Telemetry.Own {
			link = "own channel"
		}
		fmt.Fprintf(&b, "%-16s %-20s %-8s %9.2f %9.2f %8.2f %10d %8.1f%%\n", r.Source, link, r.Model, r.HoldPSNRdB, r.ShownPSNRdB, r.GainDB, r.Predicted, 100*r.HarmRate)
	}
	return b.String()
}

func TestMotionSourcesScratch(t *testing.T) {
	if os.Getenv("SCRATCH") == "" {
		t.Skip()
	}
	w, h := 320, 180
	if os.Getenv("SCRATCH") == "full" {
		w, h = 1280, 720
	}
	drive := smallDrive(t, simdrive.Config{Width: w, Height: h})
	cfg := baseReplay(drive, filepath.Join(t.TempDir(), "r"))
	cfg.Filter = filter.Config{WheelbaseM: simdrive.DefaultWheelbaseM}
	rows, err := CompareMotionSources(context.Background(), cfg, MotionSources(), TelemetryLinks())
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("\n%s", motionTable(rows))
	t.Logf("%+v missing %d", rows[len(rows)-1].Commands, rows[0].Missing)
}
