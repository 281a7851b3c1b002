package relay

import (
	"testing"
	"time"
)

// TestNoPacketsMs: the console is told about a silent link only after
// console.NoPacketsAfterMs without a packet.
func TestNoPacketsMs(t *testing.T) {
	t0 := time.Unix(1000, 0)
	tests := []struct {
		name string
		now  time.Time
		last time.Time
		want float64
	}{
		{"no packet yet", t0, time.Time{}, 0},
		{"packets flowing", t0.Add(40 * time.Millisecond), t0, 0},
		{"just below", t0.Add(249 * time.Millisecond), t0, 0},
		{"silent", t0.Add(1200 * time.Millisecond), t0, 1200},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := noPacketsMs(tc.now, tc.last); got != tc.want {
				t.Errorf("noPacketsMs = %v, want %v", got, tc.want)
			}
		})
	}
}
