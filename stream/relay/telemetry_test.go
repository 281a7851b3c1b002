package relay

import (
	"testing"
	"time"
)

// TestTelemetryTooLate: a sample is dropped when it arrives more than the
// filter's history window after it was taken, on the display clock.
func TestTelemetryTooLate(t *testing.T) {
	const lat, hist = 80_000, 2_000_000
	tests := []struct {
		name              string
		arrivalUs, timeUs int64
		want              bool
	}{
		{"on time", 1_080_000, 1_000_000, false},
		{"exactly the window late", 3_080_000, 1_000_000, false},
		{"one microsecond more", 3_080_001, 1_000_000, true},
		{"after a 3 s outage behind a reliable channel", 5_880_000, 1_000_000, true},
		{"early (clock offset above the nominal latency)", 1_000_000, 1_000_000, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if got := telemetryTooLate(tc.arrivalUs, tc.timeUs, lat, hist); got != tc.want {
				t.Errorf("telemetryTooLate(%d, %d) = %v, want %v", tc.arrivalUs, tc.timeUs, got, tc.want)
			}
		})
	}
}

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
