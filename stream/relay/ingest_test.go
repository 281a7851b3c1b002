package relay

import (
	"testing"
	"time"

	"stopgap/stream/whip"
)

// TestKeyframeRetryClock: the retry interval counts from the last PLI that
// went out. A request the session refused for its rate limit sent nothing
// and must not postpone the next attempt; any other failure counts as an
// attempt (it would fail the same way at once).
func TestKeyframeRetryClock(t *testing.T) {
	clock := &fakeClock{}
	r := testRelay(t, clock, "")
	v := newFakeVehicle(t, clock, 1, nil)
	in := &frameIngest{p: &pipeline{r: r, cfg: r.cfg, sess: v, log: quietLogger()}}
	t0 := time.UnixMicro(1_000_000)

	in.requestKeyframeLocked(t0, "loss")
	if !in.lastKeyReq.Equal(t0) || len(v.keyReqs) != 1 {
		t.Fatalf("sent: lastKeyReq %v, requests %d; want %v, 1", in.lastKeyReq, len(v.keyReqs), t0)
	}
	v.keyErr = whip.ErrKeyframeRateLimited
	in.requestKeyframeLocked(t0.Add(50*time.Millisecond), "loss")
	if !in.lastKeyReq.Equal(t0) {
		t.Errorf("a rate-limited request moved lastKeyReq to %v, want %v", in.lastKeyReq, t0)
	}
	v.keyErr = whip.ErrNoTrack
	t1 := t0.Add(60 * time.Millisecond)
	in.requestKeyframeLocked(t1, "retry")
	if !in.lastKeyReq.Equal(t1) {
		t.Errorf("a failed request left lastKeyReq at %v, want %v", in.lastKeyReq, t1)
	}
}
