package relay

import "testing"

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
