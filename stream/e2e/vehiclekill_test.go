package e2e

import (
	"context"
	"testing"
	"time"

	"stopgap/internal/display"
	"stopgap/stream/recording"
	"stopgap/stream/whip"
)

// TestVehicleKilledWithoutGoodbye kills a vehicle process with SIGKILL (no
// DELETE, no DTLS close) while a Go viewer watches the console, and checks
// that (1) from 300 ms after the kill the console gets no LIVE frame until a
// new vehicle connects, and it gets STALE frames: the loss of the feed is
// shown; (2) the ingest session ends on ICE consent expiry (RFC 7675,
// whip.ConsentExpiry, 30 s) within that time plus 3 s (one consent check
// interval and scheduling slack) and not before it minus 1 s; (3) after
// the session ended the relay sends no more frames (the console page shows
// NO SIGNAL once its meta messages stop); (4) a new vehicle then connects and
// its frames reach the viewer as LIVE.
func TestVehicleKilledWithoutGoodbye(t *testing.T) {
	if testing.Short() {
		t.Skip("waits for ICE consent expiry: about 45 s")
	}
	mode := requireEgress(t)
	dir := t.TempDir()
	drive := renderDrive(t, dir, 320, 180, 3)
	rec, err := recording.Open(drive)
	if err != nil {
		t.Fatal(err)
	}
	ro := startRelayOnly(t, rec, nil)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	v, err := dialViewer(ctx, ro.base, consoleToken)
	if err != nil {
		t.Fatal(err)
	}
	defer v.Close()

	vc := startChild(t, "vehicle", childDriveEnv+"="+drive, childBaseEnv+"="+ro.base)
	waitFor(t, "LIVE frames at the viewer", 30*time.Second, func() bool {
		m, _ := v.snapshot()
		return countState(m, time.Time{}, display.StateLive) > 30
	})
	killedAt := time.Now()
	vc.kill(t)
	waitFor(t, "the ingest session to end", whip.ConsentExpiry+10*time.Second, func() bool {
		return ro.relay.IngestStats().Active == 0 && !ro.relay.Stats().Active
	})
	endedAfter := time.Since(killedAt)
	time.Sleep(1500 * time.Millisecond)
	metas, _ := v.snapshot()
	var lastMeta time.Time
	if len(metas) > 0 {
		lastMeta = metas[len(metas)-1].at
	}

	_, stop := publishVehicle(t, rec, ro.base)
	defer stop()
	againAt := time.Now()
	waitFor(t, "LIVE frames from the new vehicle", 30*time.Second, func() bool {
		m, _ := v.snapshot()
		return countState(m, againAt, display.StateLive) > 30
	})
	reconnect := time.Since(againAt)

	after := killedAt.Add(300 * time.Millisecond)
	live, stale, pred := countState(metas, after, display.StateLive), countState(metas, after, display.StateStale), countState(metas, after, display.StatePredicted)
	t.Logf("egress %s: session ended %v after the kill (consent expiry %v); after kill+300 ms the viewer got %d LIVE, %d PREDICTED, %d STALE; last frame %v after the kill; new vehicle LIVE 30 frames %v after it started",
		mode, endedAfter.Round(time.Millisecond), whip.ConsentExpiry, live, pred, stale, lastMeta.Sub(killedAt).Round(time.Millisecond), reconnect.Round(time.Millisecond))
	if live > 0 {
		t.Errorf("%d LIVE frames later than 300 ms after the vehicle died", live)
	}
	if stale == 0 {
		t.Error("no STALE frame after the vehicle died: the console did not show the loss of the feed")
	}
	if endedAfter > whip.ConsentExpiry+3*time.Second || endedAfter < whip.ConsentExpiry-time.Second {
		t.Errorf("session ended %v after the kill, want consent expiry %v (-1 s, +3 s)", endedAfter, whip.ConsentExpiry)
	}
	if d := lastMeta.Sub(killedAt); d > endedAfter+200*time.Millisecond {
		t.Errorf("frames still sent %v after the kill, %v after the session ended", d, d-endedAfter)
	}
}

// countState counts the meta messages received after from with state s.
func countState(m []metaEvent, from time.Time, s display.State) int {
	n := 0
	for _, e := range m {
		if e.at.After(from) && e.meta.State == s {
			n++
		}
	}
	return n
}
