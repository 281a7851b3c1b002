package opfit

import (
	"math"
	"sync"
	"testing"

	"stopgap/bench/simdrive"
	"stopgap/predictor"
)

// simLink is the link of the simulated drives: 100 ms latency, 15% of
// frames lost in bursts of 500 ms on average.
func simLink(cutoff float64, seed uint64) SimConfig {
	return SimConfig{LatencyMs: 100, LossRate: 0.15, BurstMs: 500, Seed: seed,
		Policy: predictor.Policy{CutoffConfidence: cutoff, MaxAgeMs: 1500}}
}

// trueOptimum sweeps the cutoff over drives with seeds
// 1..seeds and returns the cutoff with the least mean simulated error, the
// errors by cutoff and the grid.
func trueOptimum(t *testing.T, co *Course, op SimOperator, seeds int) (best float64, errs, grid []float64) {
	t.Helper()
	grid = []float64{0, 0.05, 0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0.7, 0.8, 0.9, 0.95, 1}
	errs = make([]float64, len(grid))
	var wg sync.WaitGroup
	var mu sync.Mutex
	var firstErr error
	for i, c := range grid {
		wg.Add(1)
		go func() {
			defer wg.Done()
			sum := 0.0
			for s := 1; s <= seeds; s++ {
				r, err := co.Simulate(op, simLink(c, uint64(s)))
				if err != nil {
					mu.Lock()
					firstErr = err
					mu.Unlock()
					return
				}
				sum += r.MeanDeviationRad
			}
			errs[i] = sum / float64(seeds)
		}()
	}
	wg.Wait()
	if firstErr != nil {
		t.Fatal(firstErr)
	}
	bi := 0
	for i := range errs {
		if errs[i] < errs[bi] {
			bi = i
		}
	}
	return grid[bi], errs, grid
}

// fitLadder is the ladder of cutoffs the fit's sessions are driven at.
var fitLadder = []float64{0.05, 0.2, 0.4, 0.6, 0.8, 0.95, 1}

// fitOperator drives perLevel sessions at each cutoff of fitLadder, with
// seeds the sweep does not use (the same seeds at every cutoff: common
// random numbers, which the fit does not rely on but which make the
// comparison sharper), fits the recommendation, and describes the ticks of
// the sessions at the lowest and highest cutoff.
func fitOperator(t *testing.T, co *Course, op SimOperator, perLevel int) (Recommendation, Description) {
	t.Helper()
	n := perLevel * len(fitLadder)
	sessions := make([]Session, n)
	var wg sync.WaitGroup
	errs := make([]error, n)
	for i := range sessions {
		wg.Add(1)
		go func() {
			defer wg.Done()
			r, err := co.Simulate(op, simLink(fitLadder[i%len(fitLadder)], uint64(1000+i/len(fitLadder))))
			sessions[i], errs[i] = r.Session, err
		}()
	}
	wg.Wait()
	for _, err := range errs {
		if err != nil {
			t.Fatal(err)
		}
	}
	ac := AttributionConfig{Follower: PurePursuit{LookaheadM: 10, WheelbaseM: simWheelbaseM}}
	gaps, err := GapCosts(sessions, ac)
	if err != nil {
		t.Fatal(err)
	}
	var ends []Session
	for i, s := range sessions {
		if c := fitLadder[i%len(fitLadder)]; c == fitLadder[0] || c == 1 {
			ends = append(ends, s)
		}
	}
	samples, err := Samples(ends, ac)
	if err != nil {
		t.Fatal(err)
	}
	// 42 sessions of a minute per operator keep the test to seconds; their
	// intervals are wider than the default DefaultMaxCIWidth allows, so the
	// test accepts up to 0.8 and prints them.
	return Recommend(gaps, FitConfig{Seed: 7, MaxCIWidth: 0.8}), Describe(samples, FitConfig{})
}

// TestSimulatedOperatorsFit: two simulated operators who differ only in how
// much a predicted picture misleads them get clearly different
// recommendations, each within fitTolerance of the cutoff that minimises
// its own simulated error (found by sweeping the cutoff in closed loop).
func TestSimulatedOperatorsFit(t *testing.T) {
	if testing.Short() {
		t.Skip("closed-loop drives: a few seconds")
	}
	// The tolerance is on the cutoff: the confidence of a gap's ticks falls
	// in steps of 0.1 to 0.2 per frame here, so the simulated error is flat
	// between steps, and the sweep and the fit try cutoffs about 0.1 to 0.2
	// apart.
	const fitTolerance = 0.2
	co, err := NewCourse(simdrive.Config{DurationS: 60})
	if err != nil {
		t.Fatal(err)
	}
	ops := []SimOperator{
		{Name: "steady", DelayMs: 200, NoiseRad: 0.003, Misled: 0, LookaheadM: 10},
		{Name: "easily misled", DelayMs: 250, NoiseRad: 0.003, Misled: 2, LookaheadM: 10},
	}
	fitted := make([]float64, len(ops))
	for i, op := range ops {
		best, errs, grid := trueOptimum(t, co, op, 4)
		rec, desc := fitOperator(t, co, op, 6)
		t.Logf("%s (misled %.1f): true optimum cutoff %.2f; fitted %.2f [%.2f, %.2f]\n%s%s", op.Name, op.Misled, best, rec.Cutoff, rec.CILo, rec.CIHi, rec, desc)
		for j := range grid {
			t.Logf("  cutoff %.2f: simulated error %.2f mrad", grid[j], 1e3*errs[j])
		}
		if !rec.OK {
			t.Fatalf("%s: no recommendation: %s", op.Name, rec.Reason)
		}
		if math.Abs(rec.Cutoff-best) > fitTolerance {
			t.Errorf("%s: fitted %.2f, true optimum %.2f: off by more than %.2f", op.Name, rec.Cutoff, best, fitTolerance)
		}
		fitted[i] = rec.Cutoff
	}
	if fitted[1]-fitted[0] < 0.3 {
		t.Errorf("fitted cutoffs %.2f (steady) and %.2f (easily misled) are not clearly apart (want 0.3 or more, misled higher)", fitted[0], fitted[1])
	}
}
