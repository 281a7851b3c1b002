package relay

import (
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/stream/rtpvp8"
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

	in.requestKeyframeLocked(t0, keyLoss)
	if !in.lastKeyReq.Equal(t0) || len(v.keyReqs) != 1 {
		t.Fatalf("sent: lastKeyReq %v, requests %d; want %v, 1", in.lastKeyReq, len(v.keyReqs), t0)
	}
	v.keyErr = whip.ErrKeyframeRateLimited
	in.requestKeyframeLocked(t0.Add(50*time.Millisecond), keyLoss)
	if !in.lastKeyReq.Equal(t0) {
		t.Errorf("a rate-limited request moved lastKeyReq to %v, want %v", in.lastKeyReq, t0)
	}
	v.keyErr = whip.ErrNoTrack
	t1 := t0.Add(60 * time.Millisecond)
	in.requestKeyframeLocked(t1, keyRetry)
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

// TestNoRepeatWhileKeyframeArrives: after the link came back, the timer
// repeats the keyframe request every linkBackRetry, but not while a
// keyframe that began arriving after the request is still being
// assembled: that is the answer on its way, and a repeat would make the
// sender encode and pace out a second one behind it.
func TestNoRepeatWhileKeyframeArrives(t *testing.T) {
	t0 := time.UnixMicro(2_000_000)
	due := t0.Add(linkBackRetry(DefaultKeyframeRetry) + 10*time.Millisecond)
	for _, tc := range []struct {
		name     string
		keyStart bool // the first two packets of a keyframe arrived after the request
		want     int  // requests the timer sends at due
	}{
		{"nothing arriving: repeat", false, 1},
		{"keyframe arriving: wait", true, 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			clock := &fakeClock{}
			r := testRelay(t, clock, "")
			v := newFakeVehicle(t, clock, 1, nil)
			in, err := newIngest(&pipeline{r: r, cfg: r.cfg, sess: v, log: quietLogger()})
			if err != nil {
				t.Fatal(err)
			}
			defer in.close()
			in.linkBack, in.lastKeyReq = true, t0
			if tc.keyStart {
				for i, data := range [][]byte{{0x10, 0, 0, 0x9d, 0x01, 0x2a, 64, 0, 48, 0}, {1, 2, 3, 4}} {
					d := rtpvp8.Descriptor{Start: i == 0}
					buf := make([]byte, d.MarshalSize())
					if _, err := d.MarshalTo(buf); err != nil {
						t.Fatal(err)
					}
					pkt := &rtp.Packet{Header: rtp.Header{Version: 2, SequenceNumber: uint16(100 + i), Timestamp: 9000, PayloadType: 96},
						Payload: append(buf, data...)}
					if err := in.asm.Push(pkt, t0.Add(40*time.Millisecond)); err != nil {
						t.Fatal(err)
					}
				}
			}
			in.timerRequestsLocked(due, false)
			if len(v.keyReqs) != tc.want {
				t.Errorf("requests at %v after the last one: %d, want %d", due.Sub(t0), len(v.keyReqs), tc.want)
			}
		})
	}
}
