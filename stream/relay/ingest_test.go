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

// TestBackFromTelemetry: during a video silence, the link counts as back
// when the sender's telemetry resumes after a silence of its own of at least
// the keyframe retry interval; telemetry that kept flowing while only the
// video stopped does not count, nor does the first look.
func TestBackFromTelemetry(t *testing.T) {
	clock := &fakeClock{}
	r := testRelay(t, clock, "")
	v := newFakeVehicle(t, clock, 1, nil)
	p := &pipeline{r: r, cfg: r.cfg, sess: v, log: quietLogger()}
	in := &frameIngest{p: p}
	t0 := time.UnixMicro(5_000_000)
	retry := r.cfg.KeyframeRetry
	steps := []struct {
		last time.Time
		want bool
		why  string
	}{
		{t0, false, "first look: nothing to compare with"},
		{t0.Add(20 * time.Millisecond), false, "telemetry every 20 ms: never stopped"},
		{t0.Add(40 * time.Millisecond), false, "still flowing"},
		{t0.Add(40 * time.Millisecond), false, "nothing new"},
		{t0.Add(40*time.Millisecond + retry - time.Millisecond), false, "a pause just under the retry interval"},
		{t0.Add(3 * time.Second), true, "back after 3 s of nothing"},
		{t0.Add(3*time.Second + 20*time.Millisecond), false, "flowing again"},
	}
	for i, s := range steps {
		p.lastTelNs.Store(s.last.UnixNano())
		if got := in.backFromTelemetry(); got != s.want {
			t.Errorf("step %d (%s): back %v, want %v", i, s.why, got, s.want)
		}
	}
	// No telemetry at all: never back this way.
	quiet := &frameIngest{p: &pipeline{r: r, cfg: r.cfg, sess: v, log: quietLogger()}}
	for i := 0; i < 3; i++ {
		if quiet.backFromTelemetry() {
			t.Fatal("a session without telemetry reported the link back")
		}
	}
}
