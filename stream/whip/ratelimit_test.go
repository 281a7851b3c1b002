package whip

import (
	"fmt"
	"testing"
	"time"
)

func TestRateLimiter(t *testing.T) {
	t0 := time.Unix(100, 0)
	type step struct {
		key      string
		at       time.Duration
		wantOK   bool
		wantWait time.Duration
	}
	tests := []struct {
		name  string
		rate  float64
		burst int
		steps []step
	}{
		{"burst then refuse", 1, 2, []step{
			{"a", 0, true, 0}, {"a", 0, true, 0}, {"a", 0, false, time.Second},
			// Half a token refilled after 500 ms: still refused, 500 ms to go.
			{"a", 500 * time.Millisecond, false, 500 * time.Millisecond},
			{"a", time.Second, true, 0},
		}},
		{"keys independent", 1, 1, []step{
			{"a", 0, true, 0}, {"b", 0, true, 0}, {"a", 0, false, time.Second},
		}},
		{"refill capped at burst", 10, 1, []step{
			{"a", 0, true, 0}, {"a", time.Hour, true, 0}, {"a", time.Hour, false, 100 * time.Millisecond},
		}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			l := newRateLimiter(tc.rate, tc.burst, 100)
			for i, s := range tc.steps {
				ok, wait := l.allow(s.key, t0.Add(s.at))
				if ok != s.wantOK || wait != s.wantWait {
					t.Fatalf("step %d: allow(%s, +%v) = %v, %v; want %v, %v", i, s.key, s.at, ok, wait, s.wantOK, s.wantWait)
				}
			}
		})
	}
}

func TestRateLimiterBoundedKeys(t *testing.T) {
	l := newRateLimiter(1, 1, 16)
	t0 := time.Unix(0, 0)
	for i := 0; i < 1000; i++ {
		l.allow(fmt.Sprint("10.0.0.", i), t0)
	}
	if n := len(l.buckets); n > 16 {
		t.Fatalf("%d buckets kept, want <= 16", n)
	}
}
