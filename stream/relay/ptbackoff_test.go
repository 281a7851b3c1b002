package relay

import (
	"fmt"
	"testing"
	"time"
)

// TestPassThroughBackoff walks the spacing of pass-through keyframe
// requests through short runs, a calm run and its end.
func TestPassThroughBackoff(t *testing.T) {
	const retry = 200 * time.Millisecond
	t0 := time.Unix(1000, 0)
	at := func(ms int) time.Time { return t0.Add(time.Duration(ms) * time.Millisecond) }

	var b passThroughBackoff
	last := at(0)
	// No run yet: one retry interval, urgency ignored.
	if b.due(at(100), last, retry, true) {
		t.Fatal("due 100 ms after a request with no calm run (urgent ignored)")
	}
	if !b.due(at(200), last, retry, false) {
		t.Fatal("not due one retry interval after the last request")
	}
	// Each request without a calm run doubles the spacing, up to the cap.
	want := []time.Duration{400, 800, 1600, 3200, 3200}
	for i, w := range want {
		b.sent(retry)
		last = at((i + 1) * 10_000) // well apart: only the spacing counts
		w *= time.Millisecond
		if b.due(last.Add(w-time.Millisecond), last, retry, true) || !b.due(last.Add(w), last, retry, false) {
			t.Fatalf("request %d: want spacing %v", i+2, w)
		}
		// A short run in between changes nothing.
		b.forwarded(true, last.Add(10*time.Millisecond))
		b.forwarded(true, last.Add(500*time.Millisecond))
		b.forwarded(false, time.Time{})
	}
	// A run that lasts ptCalm: its end is urgent, and the spacing is back
	// to one retry interval.
	last = at(100_000)
	b.forwarded(true, at(100_100))
	b.forwarded(true, at(100_100).Add(ptCalm))
	b.forwarded(false, time.Time{})
	now := at(100_100).Add(ptCalm + 33*time.Millisecond)
	if !b.due(now, now.Add(-time.Millisecond), retry, true) {
		t.Fatal("the end of a calm run is not urgent")
	}
	if b.due(now, now.Add(-time.Millisecond), retry, false) {
		t.Fatal("due at once after a calm run without urgency")
	}
	b.sent(retry)
	last = now
	if !b.due(last.Add(retry), last, retry, false) {
		t.Fatal("after the first request that follows a calm run, the next waits one retry interval")
	}
	// The calm run is used up: the next request doubles again, and an
	// urgent wish is not honoured.
	b.sent(retry)
	last = last.Add(retry)
	if b.due(last.Add(retry), last, retry, true) || !b.due(last.Add(2*retry), last, retry, false) {
		t.Fatal("after a calm run used up: want spacing 2 retries, urgency ignored")
	}
}

// TestPassThroughRequestsSpaced drives the ingest's keyframe requests with
// the expiry timer's 20 ms steps while pass-through waits for a keyframe:
// after a one-frame run the requests are spaced 400, 800, 1600 and then
// 3200 ms apart (every 200 ms before the spacing: 50 in 10 s); after a run
// of more than ptCalm its end asks at once.
func TestPassThroughRequestsSpaced(t *testing.T) {
	nowUs := captureUs(0)
	r, p, done := pipelineOnFakeVehicle(t, Config{Camera: testCamera(), FPS: testFPS, LatencyMs: 50, FrameQueue: 64,
		Now: func() time.Time { return time.UnixMicro(nowUs) }})
	defer done()
	v := p.sess.(*fakeVehicle)
	requests := func() int { v.mu.Lock(); defer v.mu.Unlock(); return len(v.keyReqs) }
	push := framePusher(t, p)
	tickTimer := func(d time.Duration) (at []int64) {
		t.Helper()
		start := nowUs
		for end := nowUs + d.Microseconds(); nowUs < end; nowUs += 20_000 {
			n := requests()
			p.in.mu.Lock()
			p.in.timerRequestsLocked(time.UnixMicro(nowUs), false)
			p.in.mu.Unlock()
			if requests() > n {
				at = append(at, (nowUs-start)/1000)
			}
		}
		return at
	}

	ev := push(0, true)
	if !ev.forwarded {
		t.Fatal("the first keyframe did not pass through")
	}
	// The display loop ends the one-frame run with a frame of its own.
	r.gate.BeginOwn()
	r.gate.EndOwn()
	got := tickTimer(10 * time.Second)
	want := []int64{0, 400, 1200, 2800, 6000, 9200}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Fatalf("pass-through requests at %v ms, want %v", got, want)
	}
	if n := r.met.keyframeRequests[keyPassThrough].Load(); n != uint64(len(want)) {
		t.Errorf("metrics count %d pass-through requests, want %d", n, len(want))
	}

	// A run of 40 frames (1.3 s): when it ends, the next request goes out
	// at once, then one retry interval later.
	for i := 1; i <= 40; i++ {
		nowUs += 33_333
		if ev := push(i, i == 1); !ev.forwarded {
			t.Fatalf("frame %d did not pass through", i)
		}
	}
	r.gate.BeginOwn()
	r.gate.EndOwn()
	got = tickTimer(time.Second)
	want = []int64{0, 200, 600}
	if fmt.Sprint(got) != fmt.Sprint(want) {
		t.Fatalf("after a calm run: requests at %v ms, want %v", got, want)
	}
}
