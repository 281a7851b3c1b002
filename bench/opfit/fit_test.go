package opfit

import (
	"math"
	"math/rand/v2"
	"strings"
	"testing"
)

// TestRecommendKnownMinimum: gap costs drawn around a cost curve with its
// minimum at 0.6 (independent of the fit: 10 (c - 0.6)² + 1 + 0.02 per tick, noise 0.3) give
// 0.6, with an interval that contains it.
func TestRecommendKnownMinimum(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	var gaps []GapCost
	for _, c := range []float64{0.2, 0.4, 0.6, 0.8, 1} {
		for range 60 {
			ticks := 1 + rng.IntN(30)
			cost := 10*(c-0.6)*(c-0.6) + 1 + 0.02*float64(ticks) + 0.3*rng.NormFloat64()
			gaps = append(gaps, GapCost{Cutoff: c, CostRadS: cost, Ticks: ticks})
		}
	}
	rec := Recommend(gaps, FitConfig{Seed: 1})
	if !rec.OK || rec.Cutoff != 0.6 || rec.CILo > 0.6 || rec.CIHi < 0.6 {
		t.Errorf("got %s", rec)
	}
}

// TestRecommendTooLittleData: too few gaps, or a single cutoff tried,
// recommends nothing and says so.
func TestRecommendTooLittleData(t *testing.T) {
	few := []GapCost{{Cutoff: 0.5, CostRadS: 1, Ticks: 3}, {Cutoff: 0.7, CostRadS: 2, Ticks: 3}}
	var one []GapCost
	for range 100 {
		one = append(one, GapCost{Cutoff: 0.5, CostRadS: 1, Ticks: 3})
	}
	for name, gaps := range map[string][]GapCost{"few gaps": few, "one cutoff": one, "none": nil} {
		rec := Recommend(gaps, FitConfig{})
		if rec.OK || !math.IsNaN(rec.Cutoff) || !strings.Contains(rec.Reason, "too little data") {
			t.Errorf("%s: %+v; want no recommendation, saying too little data", name, rec)
		}
		if !strings.Contains(rec.String(), "no recommendation") {
			t.Errorf("%s: summary %q does not say there is no recommendation", name, rec.String())
		}
	}
	// Two cutoffs that cannot be told apart: too uncertain.
	rng := rand.New(rand.NewPCG(3, 4))
	var flat []GapCost
	for _, c := range []float64{0.2, 0.9} {
		for range 40 {
			flat = append(flat, GapCost{Cutoff: c, CostRadS: 1 + rng.NormFloat64(), Ticks: 4})
		}
	}
	if rec := Recommend(flat, FitConfig{Seed: 5}); rec.OK || !strings.Contains(rec.Reason, "too uncertain") {
		t.Errorf("indistinguishable cutoffs: %s", rec)
	}
}

// TestSamplesAttribution: a control sample is attributed to the tick on
// screen ReactionMs earlier, each gap is its own unit, and the deviation is
// measured against the follower on the true pose (on a straight path with
// the vehicle on it, the follower commands 0, so the deviation is |steer|).
func TestSamplesAttribution(t *testing.T) {
	var path Path
	for i := 0; i <= 400; i++ {
		path.XM, path.YM = append(path.XM, float64(i)*0.25), append(path.YM, 0)
	}
	shown := []Shown{ShownLive, ShownPredicted, ShownStale, ShownLive, ShownPredicted, ShownLive}
	var s Session
	for i, sh := range shown {
		s.Ticks = append(s.Ticks, Tick{DisplayUs: int64(i) * 100_000, Shown: sh, Confidence: 0.1 * float64(i)})
	}
	for i := range 6 {
		s.Controls = append(s.Controls, Control{TUs: 250_000 + int64(i)*100_000 + 50_000, SteerRad: -0.01 * float64(i)})
	}
	s.Path = path
	s.Truth = func(tUs int64) (Pose, bool) { return Pose{XM: 10 * float64(tUs) / 1e6}, true }
	got, err := Samples([]Session{s}, AttributionConfig{ReactionMs: 250, Follower: PurePursuit{LookaheadM: 5, WheelbaseM: 2.7}})
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 6 {
		t.Fatalf("%d samples, want 6", len(got))
	}
	wantUnit := []int{-1, 1, 1, -1, 2, -1}
	for i, g := range got {
		if g.Shown != shown[i] || g.Unit != wantUnit[i] || math.Abs(g.DeviationRad-0.01*float64(i)) > 1e-12 || g.Confidence != 0.1*float64(i) {
			t.Errorf("sample %d: %+v, want state %s unit %d deviation %g", i, g, shown[i], wantUnit[i], 0.01*float64(i))
		}
	}
}

// TestGapCostsWindow: a gap shown from 100 to 300 ms, reaction 250 ms,
// recovery 1000 ms: its window is [350, 1550) ms, so a constant steering
// deviation of 0.01 rad costs 0.01 rad × 1.19 s (samples every 10 ms, the
// last at 1540 ms). A gap still open at the end of the drive is dropped.
func TestGapCostsWindow(t *testing.T) {
	var path Path
	for i := 0; i <= 400; i++ {
		path.XM, path.YM = append(path.XM, float64(i)*0.25), append(path.YM, 0)
	}
	s := Session{Path: path, Truth: func(tUs int64) (Pose, bool) { return Pose{XM: 10 * float64(tUs) / 1e6}, true }}
	for i := 0; i < 40; i++ {
		sh := ShownLive
		if i == 1 || i == 2 || i >= 38 {
			sh = ShownPredicted
		}
		s.Ticks = append(s.Ticks, Tick{DisplayUs: int64(i) * 100_000, Shown: sh, Cutoff: 0.7})
	}
	for tUs := int64(0); tUs < 4_000_000; tUs += 10_000 {
		s.Controls = append(s.Controls, Control{TUs: tUs, SteerRad: 0.01})
	}
	got, err := GapCosts([]Session{s}, AttributionConfig{ReactionMs: 250, RecoveryMs: 1000, Follower: PurePursuit{LookaheadM: 5, WheelbaseM: 2.7}})
	if err != nil {
		t.Fatal(err)
	}
	if len(got) != 1 {
		t.Fatalf("%d gaps, want 1 (the open one dropped): %+v", len(got), got)
	}
	if g := got[0]; math.Abs(g.CostRadS-0.0119) > 1e-9 || g.Cutoff != 0.7 || g.Ticks != 2 || math.Abs(g.WindowS-1.2) > 1e-9 {
		t.Errorf("got %+v, want cost 0.0119 rad·s over a 1.2 s window, 2 ticks, cutoff 0.7", g)
	}
}
