package e2e

import (
	"os"
	"testing"
	"time"

	"stopgap/internal/lossmodel"
	"stopgap/stream/simvehicle"
)

// acceptEnv gates the long acceptance runs: set STOPGAP_ACCEPT=1 to run them
// (each takes tens of seconds; they report figures rather than gate CI).
const acceptEnv = "STOPGAP_ACCEPT"

func requireAccept(t *testing.T) {
	t.Helper()
	if os.Getenv(acceptEnv) == "" {
		t.Skipf("acceptance run: set %s=1 to run it", acceptEnv)
	}
}

// TestAcceptRandomLoss runs the pion-sender rig at 640x360 with 5% random
// packet loss (Gilbert-Elliott with 1 ms bursts: nearly independent losses,
// retransmissions included) for 10 s and reports the share of LIVE ticks,
// NACK repairs and keyframe requests. The target with a browser
// sender is at least 90% LIVE; this pion-sender run must reach it too.
func TestAcceptRandomLoss(t *testing.T) {
	requireAccept(t)
	r := startRig(t, rigOptions{width: 640, height: 360, driveS: 6, cacheFrames: true, bitrateBps: 1_500_000,
		link: simvehicle.LinkConfig{Loss: lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.05,
			BurstMs: 1, Seed: 7}}})
	waitFor(t, "LIVE ticks", 15*time.Second, func() bool { return r.relay.Stats().TicksLive > 30 })
	s0, l0 := r.relay.Stats(), r.veh.Stats().Link
	time.Sleep(10 * time.Second)
	s1, l1 := r.relay.Stats(), r.veh.Stats().Link
	live := s1.TicksLive - s0.TicksLive
	total := live + (s1.TicksPredicted - s0.TicksPredicted) + (s1.TicksStale - s0.TicksStale)
	share := float64(live) / float64(max(total, 1))
	t.Logf("5%% loss, 10 s: %d of %d ticks LIVE (%.1f%%); %d PREDICTED, %d STALE; packets on the wire %d, lost %d (%.1f%%); keyframe requests %d; losses %d; late frames %d; repair %+v",
		live, total, 100*share, s1.TicksPredicted-s0.TicksPredicted, s1.TicksStale-s0.TicksStale,
		l1.PacketsWire-l0.PacketsWire, l1.PacketsLost-l0.PacketsLost,
		100*float64(l1.PacketsLost-l0.PacketsLost)/float64(max(l1.PacketsWire-l0.PacketsWire, 1)),
		s1.KeyframeRequests-s0.KeyframeRequests, s1.Losses-s0.Losses, s1.LateFrames-s0.LateFrames, s1.Repair)
	if share < 0.90 {
		t.Errorf("LIVE share %.1f%% < 90%%", 100*share)
	}
}
