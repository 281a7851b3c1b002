package livedemo

import (
	"testing"

	"stopgap/predictor"
)

// TestTickStatus: the status line never gives a picture age for a tick
// without a picture.
func TestTickStatus(t *testing.T) {
	tests := []struct {
		st    predictor.State
		ageMs float64
		want  string
	}{
		{predictor.StateInvalid, 0, "no tick yet"},
		{predictor.StateNoPicture, 0, "NO_PICTURE, no picture yet"},
		{predictor.StateLive, 0, "LIVE, picture age 0 ms"},
		{predictor.StateStale, 912.4, "STALE, picture age 912 ms"},
	}
	for _, tc := range tests {
		if got := tickStatus(tc.st, tc.ageMs); got != tc.want {
			t.Errorf("tickStatus(%v, %v) = %q, want %q", tc.st, tc.ageMs, got, tc.want)
		}
	}
}
