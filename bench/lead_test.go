package bench

import (
	"context"
	"errors"
	"path/filepath"
	"testing"

	"stopgap/bench/simdrive"
)

// TestReplayLead: on a small simulated drive with 120 ms of extra delay the
// lead moves LIVE frames ahead and brings them closer to the frame captured
// when they were shown than the plain frames (PSNR); with recorded arrivals
// it is refused.
func TestReplayLead(t *testing.T) {
	drive := smallDrive(t, simdrive.Config{Width: 320, Height: 180, DurationS: 3, Seed: 2})
	cfg := baseReplay(drive, filepath.Join(t.TempDir(), "report"))
	cfg.Loss.ExtraDelayMs = 120
	cfg.Lead = true
	sum, err := Replay(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	l := sum.Lead
	if l == nil {
		t.Fatal("no lead summary")
	}
	t.Logf("%+v", *l)
	if l.Ticks < sum.LiveTicks*3/4 || l.Moved < l.Ticks/2 {
		t.Fatalf("%d of %d LIVE ticks scored, %d moved", l.Ticks, sum.LiveTicks, l.Moved)
	}
	if !(l.AgeMsMean >= 120) || !(l.LeadPSNRdBMean > l.PlainPSNRdBMean+0.5) {
		t.Errorf("age %.0f ms, lead %.2f dB vs plain %.2f dB: want the lead closer to the present by 0.5 dB", float64(l.AgeMsMean), float64(l.LeadPSNRdBMean), float64(l.PlainPSNRdBMean))
	}
	cfg.ArrivalsFile = filepath.Join(drive, "arrivals.csv")
	cfg.Out = filepath.Join(t.TempDir(), "report2")
	if _, err := Replay(context.Background(), cfg); !errors.Is(err, ErrReplayInput) {
		t.Errorf("lead with recorded arrivals: %v, want ErrReplayInput", err)
	}
}
