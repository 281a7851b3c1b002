package cadence

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"
)

// browserStamps returns n capture times of a sender running at periodUs
// from phaseUs, rounded to whole milliseconds as browsers stamp them (steps
// of 33 and 34 ms at 30 fps).
func browserStamps(n int, phaseUs, periodUs float64) []int64 {
	out := make([]int64, n)
	for i := range out {
		out[i] = int64(math.Round((phaseUs+float64(i)*periodUs)/1000)) * 1000
	}
	return out
}

// TestGridFollowsSender: every frame of a steady sender maps to the next
// tick and stays near its tick's time, whatever the first frame's phase and
// with a sender clock 0.3% off the nominal rate. A grid anchored once at the
// first frame with the nominal period (the rule this package replaces)
// drifts half a period off within 170 frames and maps frames to the wrong
// tick; the test checks that the fixed grid fails here, so it can fail.
func TestGridFollowsSender(t *testing.T) {
	const nominal = 1e6 / 30.0
	for _, tc := range []struct {
		name     string
		periodUs float64
	}{
		{"nominal rate", nominal},
		{"sender 0.3% slow", nominal * 1.003},
		{"sender 0.3% fast", nominal * 0.997},
	} {
		for _, phase := range []float64{0, 8_000, 16_400, 16_900, 33_000} {
			g, err := New(nominal)
			if err != nil {
				t.Fatal(err)
			}
			stamps := browserStamps(2000, 1e9+phase, tc.periodUs)
			fixedWrong := 0
			for i, c := range stamps {
				k := g.Observe(c)
				if k != i {
					t.Fatalf("%s, phase %v: frame %d mapped to tick %d", tc.name, phase, i, k)
				}
				if i > 30 {
					if d := math.Abs(float64(c - g.CaptureUs(k))); d > 1500 {
						t.Fatalf("%s, phase %v: frame %d is %.0f us off its tick", tc.name, phase, i, d)
					}
				}
				if int(math.Round(float64(c-stamps[0])/nominal)) != i {
					fixedWrong++
				}
			}
			if tc.periodUs != nominal && fixedWrong == 0 {
				t.Errorf("%s: the fixed grid mapped every frame right; the case does not test drift", tc.name)
			}
			if st := g.Stats(); st.RateChanges != 0 || st.PhaseSteps != 0 {
				t.Errorf("%s, phase %v: %+v, want no re-lock", tc.name, phase, st)
			}
		}
	}
}

// TestGridRateChange: a sender that halves its rate (30 -> 15 fps) and
// later restores it. After RateFrames frames at the new rate, every frame
// gets the next tick (no tick without a frame, so no LIVE/PREDICTED
// alternation).
func TestGridRateChange(t *testing.T) {
	const nominal = 1e6 / 30.0
	g, _ := New(nominal)
	var stamps []int64
	stamps = append(stamps, browserStamps(60, 0, nominal)...)
	t15 := float64(stamps[59]) + 2*nominal
	stamps = append(stamps, browserStamps(60, t15, 2*nominal)...)
	t30 := float64(stamps[119]) + nominal
	stamps = append(stamps, browserStamps(60, t30, nominal)...)
	var ticks []int
	check := func(from, to int, wantPeriod float64) {
		t.Helper()
		for len(ticks) < to {
			ticks = append(ticks, g.Observe(stamps[len(ticks)]))
		}
		for i := max(from, 1); i < to; i++ {
			if ticks[i] != ticks[i-1]+1 {
				t.Errorf("frame %d: tick %d after %d, want the next tick", i, ticks[i], ticks[i-1])
			}
		}
		if math.Abs(g.PeriodUs()-wantPeriod) > 0.02*wantPeriod {
			t.Errorf("period %.0f us after frame %d, want %.0f", g.PeriodUs(), to-1, wantPeriod)
		}
	}
	check(0, 60, nominal)
	check(60+RateFrames, 120, 2*nominal)
	skipped := 0
	for i := 60; i < 60+RateFrames; i++ {
		skipped += ticks[i] - ticks[i-1] - 1
	}
	if skipped > RateFrames {
		t.Errorf("%d ticks without a frame while the slower rate was confirmed, want at most %d", skipped, RateFrames)
	}
	check(120+RateFrames, 180, nominal)
	if st := g.Stats(); st.RateChanges != 2 {
		t.Errorf("%+v, want 2 rate changes", st)
	}
}

// TestGridLossIsNotARateChange: frames lost at random (10%) and a 3 s
// outage leave the grid on the sender's cadence: each frame still maps to
// its own index.
func TestGridLossIsNotARateChange(t *testing.T) {
	const nominal = 1e6 / 30.0
	g, _ := New(nominal)
	rng := rand.New(rand.NewPCG(1, 2))
	stamps := browserStamps(900, 5e6, nominal*1.001)
	for i, c := range stamps {
		if i > 0 && (rng.Float64() < 0.1 || (i >= 300 && i < 390)) {
			continue
		}
		if k := g.Observe(c); k != i {
			t.Fatalf("frame %d mapped to tick %d", i, k)
		}
	}
	if st := g.Stats(); st.RateChanges != 0 {
		t.Errorf("%+v, want no rate change", st)
	}
}

// TestGridPhaseStep: a sender that slips by 150 ms (not a whole number of
// periods) is followed after two frames; frames after it land on
// consecutive ticks.
func TestGridPhaseStep(t *testing.T) {
	const nominal = 1e6 / 30.0
	g, _ := New(nominal)
	stamps := append(browserStamps(100, 0, nominal), browserStamps(100, 99*nominal+150_000, nominal)...)
	var ticks []int
	for _, c := range stamps {
		ticks = append(ticks, g.Observe(c))
	}
	for i := 103; i < len(ticks); i++ {
		if ticks[i] != ticks[i-1]+1 {
			t.Fatalf("frame %d: tick %d after %d", i, ticks[i], ticks[i-1])
		}
	}
	if st := g.Stats(); st.PhaseSteps != 1 {
		t.Errorf("%+v, want one phase step", st)
	}
}

// TestGridOldFrameChangesNothing: a frame older than the newest observed is
// mapped to its tick and does not move the grid.
func TestGridOldFrameChangesNothing(t *testing.T) {
	g, _ := New(1e6 / 30.0)
	for _, c := range browserStamps(10, 0, 1e6/30.0) {
		g.Observe(c)
	}
	before := *g
	if k := g.Observe(100_000); k != 3 {
		t.Errorf("old frame mapped to tick %d, want 3", k)
	}
	if g.anchorUs != before.anchorUs || g.periodUs != before.periodUs {
		t.Errorf("an old frame moved the grid")
	}
}

func TestNewRejectsBadPeriod(t *testing.T) {
	for _, p := range []float64{0, -1, math.NaN(), math.Inf(1)} {
		if _, err := New(p); !errors.Is(err, ErrBadPeriod) {
			t.Errorf("New(%v): %v, want ErrBadPeriod", p, err)
		}
	}
}

// TestGridCaptureJitter: capture times jittered by up to ±4 ms (a browser's
// fake camera on a loaded host) still map to consecutive ticks, and the
// period stays within 0.5% of the sender's after the loop settled.
func TestGridCaptureJitter(t *testing.T) {
	const nominal = 1e6 / 30.0
	g, _ := New(nominal)
	rng := rand.New(rand.NewPCG(3, 4))
	worst := 0.0
	for i := 0; i < 3000; i++ {
		c := int64(float64(i)*nominal + (rng.Float64()*2-1)*4000)
		if k := g.Observe(c); k != i {
			t.Fatalf("frame %d mapped to tick %d", i, k)
		}
		if i > 100 {
			worst = max(worst, math.Abs(g.PeriodUs()-nominal)/nominal)
		}
	}
	if worst > 0.005 {
		t.Errorf("period off by up to %.2f%% under jitter, want <= 0.5%%", 100*worst)
	}
	t.Logf("worst period error under ±4 ms jitter: %.3f%%", 100*worst)
}
