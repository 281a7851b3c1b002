package bench

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"
)

// TestBootstrapMeanClosedForm checks BootstrapClusters against a closed
// form: the ideal bootstrap standard error of the sample mean is
// sqrt(Σ(x_i − x̄)²)/n (Efron and Tibshirani 1993, "An Introduction to the
// Bootstrap", section 6.2 and problem 2.1: the plug-in variance divided by
// n). With 4000 resamples the Monte Carlo error of the estimate is about
// 1/sqrt(2·4000) ≈ 1.1 %; we allow 5 %.
func TestBootstrapMeanClosedForm(t *testing.T) {
	x := []float64{2, 4, 4, 5, 7, 9, 10, 13, 1, 3, 8, 6}
	n := float64(len(x))
	mean := 0.0
	for _, v := range x {
		mean += v / n
	}
	ss := 0.0
	for _, v := range x {
		ss += (v - mean) * (v - mean)
	}
	want := math.Sqrt(ss) / n
	got := BootstrapClusters(len(x), 4000, 7, func(w []int) float64 {
		s := 0.0
		for i, k := range w {
			s += float64(k) * x[i]
		}
		return s / n
	})
	m, v := 0.0, 0.0
	for _, g := range got {
		m += g / float64(len(got))
	}
	for _, g := range got {
		v += (g - m) * (g - m) / float64(len(got)-1)
	}
	if se := math.Sqrt(v); math.Abs(se-want)/want > 0.05 {
		t.Fatalf("bootstrap SE %.4f, closed form %.4f", se, want)
	}
	if math.Abs(m-mean) > 0.1*want { // the mean of 4000 resamples is within 5 Monte Carlo errors
		t.Fatalf("bootstrap mean %.4f far from sample mean %.4f", m, mean)
	}
}

// knownDrive builds replay rows whose best cutoff is known: 400 one-tick
// gaps (every other tick missing) with confidences spread evenly over
// [0, 1); a prediction is harmful (3 dB worse than hold) exactly when its
// confidence is below 0.6. With a 5 % harm tolerance the lowest cutoff c
// with harm share (0.6 − c)/(1 − c) <= 0.05 is 0.579, so on a 0.05 grid the
// recommendation is 0.6.
func knownDrive(seed uint64) []TickRow {
	rng := rand.New(rand.NewPCG(seed, 1))
	var rows []TickRow
	for i := 0; i < 800; i++ {
		if i%2 == 0 {
			rows = append(rows, NewTickRow(i, int64(i)*33_000, TickLive, 0))
			continue
		}
		r := NewTickRow(i, int64(i)*33_000, TickStale, 33)
		r.Confidence = rng.Float64()
		r.Hold = Scores{PSNRdB: 20, SSIM: 0.6, MAE: 10}
		if r.Confidence < 0.6 {
			r.Warp = Scores{PSNRdB: 17, SSIM: 0.5, MAE: 14}
		} else {
			r.Warp = Scores{PSNRdB: 24, SSIM: 0.8, MAE: 6}
		}
		r.MisalignMrad = 20 * (1 - r.Confidence)
		rows = append(rows, r)
	}
	return rows
}

func TestTuneKnownCutoff(t *testing.T) {
	drives := [][]TickRow{knownDrive(1), knownDrive(2), knownDrive(3)}
	res, err := TuneTicks(drives, []float64{800, 800, 800}, TuneConfig{Tolerance: TuneTolerance{MaxHarmRate: 0.05}, Resamples: 300, Seed: 1})
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("recommended %v [%v, %v] over %d gaps", res.Recommended, res.CILow, res.CIHigh, res.Gaps)
	if !res.Enough || math.Abs(float64(res.Recommended)-0.6) > 0.05+1e-9 {
		t.Fatalf("recommended %v (%s), want 0.6 ± one grid step", res.Recommended, res.Reason)
	}
	if !(res.CILow <= res.Recommended && res.Recommended <= res.CIHigh) || res.CIHigh-res.CILow > 0.15 {
		t.Errorf("interval [%v, %v] does not hold %v or is too wide", res.CILow, res.CIHigh, res.Recommended)
	}
	// Coverage falls and the harm rate with it as the cutoff rises.
	for k := 1; k < len(res.Points); k++ {
		if res.Points[k].Coverage > res.Points[k-1].Coverage {
			t.Errorf("coverage rises from %v to %v at cutoff %v", res.Points[k-1].Coverage, res.Points[k].Coverage, res.Points[k].Cutoff)
		}
	}
	// A policy range above the known answer is respected.
	res, err = TuneTicks(drives, []float64{800, 800, 800}, TuneConfig{Tolerance: TuneTolerance{MaxHarmRate: 0.05}, MinCutoff: 0.7, Resamples: 50})
	if err != nil || float64(res.Recommended) != 0.7 {
		t.Fatalf("with min cutoff 0.7: %v %v", res.Recommended, err)
	}
	// Misalignment tolerance: mean of 20(1-c') over c' >= c is 10(1-c) <= 3 mrad from c = 0.7.
	res, err = TuneTicks(drives, []float64{800, 800, 800}, TuneConfig{Tolerance: TuneTolerance{MaxMisalignMrad: 3}, Resamples: 50})
	if err != nil || math.Abs(float64(res.Recommended)-0.7) > 0.05+1e-9 {
		t.Fatalf("misalignment tolerance: %v %v", res.Recommended, err)
	}
}

func TestTuneTooLittleData(t *testing.T) {
	rows := knownDrive(1)[:20] // 10 gaps
	res, err := TuneTicks([][]TickRow{rows}, []float64{800}, TuneConfig{Tolerance: TuneTolerance{MaxHarmRate: 0.05}})
	if err != nil {
		t.Fatal(err)
	}
	if res.Enough || !math.IsNaN(float64(res.Recommended)) || res.Reason == "" {
		t.Fatalf("10 gaps: %+v, want no recommendation with a reason", res)
	}
}

func TestTuneBadInput(t *testing.T) {
	for _, tc := range []struct {
		name string
		cfg  TuneConfig
	}{
		{"no tolerance", TuneConfig{}},
		{"two tolerances", TuneConfig{Tolerance: TuneTolerance{MaxHarmRate: 0.05, MinSSIM: 0.5}}},
		{"harm out of range", TuneConfig{Tolerance: TuneTolerance{MaxHarmRate: 1.5}}},
		{"ssim out of range", TuneConfig{Tolerance: TuneTolerance{MinSSIM: -0.1}}},
		{"range inverted", TuneConfig{Tolerance: TuneTolerance{MaxHarmRate: 0.05}, MinCutoff: 0.8, MaxCutoff: 0.5}},
		{"cutoffs not ascending", TuneConfig{Tolerance: TuneTolerance{MaxHarmRate: 0.05}, Cutoffs: []float64{0.5, 0.2}}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, err := TuneTicks([][]TickRow{knownDrive(1)}, []float64{800}, tc.cfg)
			if !errors.Is(err, ErrTuneInput) {
				t.Fatalf("err %v, want ErrTuneInput", err)
			}
		})
	}
}

// TestTuneCutoffsWithin: the sweep bounded by an administrator's limits
// keeps the grid points inside, adds the limits themselves, and refuses an
// invalid range.
func TestTuneCutoffsWithin(t *testing.T) {
	tests := []struct {
		lo, hi float64
		want   []float64
	}{
		{0.5, 1, []float64{0.5, 0.55, 0.6, 0.65, 0.7, 0.75, 0.8, 0.85, 0.9, 0.95, 1}},
		{0.52, 0.61, []float64{0.52, 0.55, 0.6, 0.61}},
		{0.7, 0.7, []float64{0.7}},
		{0.8, 0.7, nil},
		{-0.1, 1, nil},
	}
	for _, tc := range tests {
		got := TuneCutoffsWithin(tc.lo, tc.hi)
		if len(got) != len(tc.want) {
			t.Errorf("[%g, %g]: got %v, want %v", tc.lo, tc.hi, got, tc.want)
			continue
		}
		for i := range got {
			if math.Abs(got[i]-tc.want[i]) > 1e-12 {
				t.Errorf("[%g, %g]: got %v, want %v", tc.lo, tc.hi, got, tc.want)
				break
			}
		}
	}
}
