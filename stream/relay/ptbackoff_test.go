package relay

import (
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
		last = at(int(time.Duration(i+1) * 10 * time.Second / time.Millisecond))
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
