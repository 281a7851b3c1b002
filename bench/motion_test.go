package bench

import (
	"errors"
	"testing"
)

func TestParseMotionSources(t *testing.T) {
	tests := []struct {
		in   string
		want MotionSources
		err  bool
	}{
		{"telemetry", MotionSources{}, false},
		{"video", MotionSources{NoTelemetry: true, Video: true}, false},
		{"telemetry+video", MotionSources{Video: true}, false},
		{" Video , TELEMETRY ", MotionSources{Video: true}, false},
		{"none", MotionSources{NoTelemetry: true}, false},
		{"", MotionSources{}, true},
		{"+", MotionSources{}, true},
		{"video+video", MotionSources{}, true},
		{"gps", MotionSources{}, true},
		{"telemetry+none", MotionSources{}, true},
	}
	for _, tc := range tests {
		t.Run(tc.in, func(t *testing.T) {
			got, err := ParseMotionSources(tc.in)
			if tc.err {
				if !errors.Is(err, ErrReplayInput) {
					t.Fatalf("ParseMotionSources(%q) = %+v, %v; want an error wrapping ErrReplayInput", tc.in, got, err)
				}
				return
			}
			if err != nil || got != tc.want {
				t.Fatalf("ParseMotionSources(%q) = %+v, %v; want %+v", tc.in, got, err, tc.want)
			}
		})
	}
}

// FuzzParseMotionSources: any string either fails with ErrReplayInput or
// parses to sources whose name parses back to the same sources.
func FuzzParseMotionSources(f *testing.F) {
	for _, s := range []string{"telemetry", "video", "telemetry+video", "none", "video,telemetry", "", "x+"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		m, err := ParseMotionSources(s)
		if err != nil {
			if !errors.Is(err, ErrReplayInput) {
				t.Fatalf("%q: %v does not wrap ErrReplayInput", s, err)
			}
			return
		}
		back, err := ParseMotionSources(m.String())
		if err != nil || back != m {
			t.Fatalf("%q -> %+v -> %q -> %+v, %v", s, m, m.String(), back, err)
		}
	})
}

func TestNearestCapture(t *testing.T) {
	c := []int64{0, 33_333, 66_667, 100_000}
	for _, tc := range []struct {
		t    int64
		want int
	}{
		{-5000, 0}, {0, 0}, {16_000, 0}, {17_000, 1}, {90_000, 3}, {100_000, 3}, {116_000, 3}, {117_000, -1},
	} {
		if got := nearestCapture(c, tc.t); got != tc.want {
			t.Errorf("nearestCapture(%d) = %d, want %d", tc.t, got, tc.want)
		}
	}
}
