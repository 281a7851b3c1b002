package console

import (
	"math"
	"slices"
	"testing"
)

// TestStatusLateAfterMs: 3 tick periods, within [100, 300] ms; a period
// that is not given (0) or not usable gives the strictest limit.
func TestStatusLateAfterMs(t *testing.T) {
	cases := []struct {
		name     string
		periodMs float64
		want     float64
	}{
		{"30 fps", 1000.0 / 30, 100},
		{"25 fps", 40, 120},
		{"15 fps", 1000.0 / 15, 200},
		{"10 fps: the ceiling", 100, 300},
		{"5 fps: capped", 200, 300},
		{"60 fps: the floor", 1000.0 / 60, 100},
		{"240 fps: the floor", 1000.0 / 240, 100},
		{"not given", 0, 100},
		{"negative", -33, 100},
		{"NaN", math.NaN(), 100},
		{"+Inf", math.Inf(1), 100},
		{"huge", 1e12, 300},
	}
	for _, tc := range cases {
		if got := StatusLateAfterMs(tc.periodMs); math.Abs(got-tc.want) > 1e-9 {
			t.Errorf("%s: StatusLateAfterMs(%v) = %v, want %v", tc.name, tc.periodMs, got, tc.want)
		}
	}
	// A pause of 2 periods never reaches the limit for cameras of about
	// 7 fps or faster (2 periods < 300 ms), the no-flicker promise.
	for _, fps := range []float64{7, 10, 15, 24, 25, 30, 50, 60, 120, 240} {
		p := 1000 / fps
		if lim := StatusLateAfterMs(p); !(2*p < lim) {
			t.Errorf("%v fps: a pause of 2 periods (%.1f ms) reaches the limit %.1f ms", fps, 2*p, lim)
		}
	}
	// And the limit never exceeds the silence watchdog, which would make it pointless.
	if StatusLateMaxMs >= MetaSilenceMs {
		t.Errorf("StatusLateMaxMs %d is not below MetaSilenceMs %d", StatusLateMaxMs, MetaSilenceMs)
	}
}

// TestStatusLateBelowFreeze: the limit is never later than the W3C WebRTC
// statistics' freeze gap, max(3 x mean frame time, mean + 150 ms) (the
// definition of freezeCount in "Identifiers for WebRTC's Statistics API",
// RTCInboundRtpStreamStats), for any frame rate the relay accepts (up to
// 240 fps; below 1 fps checked too).
func TestStatusLateBelowFreeze(t *testing.T) {
	for fps := 0.5; fps <= 240; fps *= 1.1 {
		p := 1000 / fps
		freeze := max(3*p, p+150)
		if lim := StatusLateAfterMs(p); lim > freeze {
			t.Errorf("%.2f fps: STATE UNKNOWN after %.1f ms, later than the freeze gap %.1f ms", fps, lim, freeze)
		}
	}
}

func TestIsStall(t *testing.T) {
	var stalls []string
	for _, r := range UnknownReasons {
		if IsStall(r) {
			stalls = append(stalls, r)
		}
	}
	if want := []string{ReasonMetaSilent, ReasonVideoFrozen, ReasonStatusLate}; !slices.Equal(stalls, want) {
		t.Errorf("stall reasons %v, want %v", stalls, want)
	}
	if IsStall("") || IsStall("LIVE") {
		t.Error("IsStall accepts a word that is no reason")
	}
}
