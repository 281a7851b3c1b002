package filter

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// snapshot returns every number that defines the filter state, as bits.
func snapshot(f *Filter) []uint64 {
	f.mu.Lock()
	defer f.mu.Unlock()
	var out []uint64
	put := func(e *entry) {
		out = append(out, uint64(e.s.TimeUs), math.Float64bits(e.s.SpeedMps), math.Float64bits(e.s.YawRateRps),
			math.Float64bits(e.s.AccelMps2), math.Float64bits(e.s.SteerRad), math.Float64bits(e.nis), uint64(e.m),
			uint64(e.s.Source), math.Float64bits(e.s.SpeedStdMps), math.Float64bits(e.s.YawRateStdRps))
		for _, v := range e.x {
			out = append(out, math.Float64bits(v))
		}
		for _, v := range e.p {
			out = append(out, math.Float64bits(v))
		}
	}
	out = append(out, uint64(f.hist.len()))
	for i := range f.hist.len() {
		put(f.hist.at(i))
	}
	if f.hasBas {
		out = append(out, 1)
		put(&f.base)
	}
	return out
}

func stateBits(s State) []uint64 {
	var out []uint64
	for _, v := range s.Vec {
		out = append(out, math.Float64bits(v))
	}
	for i := range s.Cov {
		for _, v := range s.Cov[i] {
			out = append(out, math.Float64bits(v))
		}
	}
	return out
}

func TestConfigValidation(t *testing.T) {
	tests := []struct {
		name string
		cfg  Config
		ok   bool
	}{
		{"ctrv defaults", Config{Model: ModelCTRV}, true},
		{"bicycle", Config{Model: ModelBicycle, WheelbaseM: 2.7}, true},
		{"no model", Config{}, false},
		{"bicycle without wheelbase", Config{Model: ModelBicycle}, false},
		{"tiny wheelbase", Config{Model: ModelCTRV, WheelbaseM: 0.01}, false},
		{"negative noise", Config{Model: ModelCTRV, SpeedNoiseMps: -1}, false},
		{"NaN noise", Config{Model: ModelCTRV, YawRateNoiseRps: math.NaN()}, false},
		{"Inf noise", Config{Model: ModelCTRV, AccelNoiseMps2: math.Inf(1)}, false},
		{"negative history", Config{Model: ModelCTRV, HistoryUs: -1}, false},
		{"huge gap", Config{Model: ModelCTRV, MaxGapUs: 1 << 40}, false},
		{"negative cap", Config{Model: ModelCTRV, MaxHistorySamples: -5}, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			f, err := New(tc.cfg)
			if tc.ok != (err == nil) {
				t.Fatalf("New: %v", err)
			}
			if err != nil && !errors.Is(err, ErrConfig) {
				t.Fatalf("error %v does not wrap ErrConfig", err)
			}
			if err == nil {
				c := f.Config()
				if c.HistoryUs != DefaultHistoryUs || c.SpeedNoiseMps != DefaultSpeedNoiseMps || c.MaxGapUs != DefaultMaxGapUs {
					t.Fatalf("defaults not applied: %+v", c)
				}
			}
		})
	}
}

func TestReasonAndErrors(t *testing.T) {
	for r := ReasonInvalid; r <= numReasons; r++ {
		if r.String() == "" {
			t.Errorf("reason %d has an empty name", r)
		}
		e := &RejectError{Reason: r}
		if (r > ReasonInvalid && r < numReasons) != (errors.Unwrap(e) != nil) {
			t.Errorf("reason %v unwraps to %v", r, errors.Unwrap(e))
		}
	}
}

// TestRejectLeavesStateUnchanged feeds invalid, impossible, too old and
// duplicate samples to a filter with history and checks each is rejected
// with the right reason, counted, and leaves the state bit-identical.
func TestRejectLeavesStateUnchanged(t *testing.T) {
	for _, model := range []Model{ModelCTRV, ModelBicycle} {
		t.Run(model.String(), func(t *testing.T) {
			cfg := Config{Model: model, WheelbaseM: 2.8, HistoryUs: 500_000}
			rng := rand.New(rand.NewPCG(7, 8))
			samples, _ := simulate(t, rng, simSpec{cfg: cfg, n: 120, dtUs: 10_000, x0: [5]float64{0, 0, 0, 10, 0.1}, accel: true, steer: true, noisy: true, startTime: 1_000_000})
			f := mustNew(t, cfg)
			mustAdd(t, f, samples...)
			newest := samples[len(samples)-1].TimeUs
			good := samples[len(samples)-1]
			good.TimeUs -= 5_000 // a valid late time
			with := func(mod func(*Sample)) Sample { s := good; mod(&s); return s }
			nan, inf := math.NaN(), math.Inf(1)
			tests := []struct {
				name string
				s    Sample
				want Reason
			}{
				{"NaN speed", with(func(s *Sample) { s.SpeedMps = nan }), ReasonNotFinite},
				{"+Inf yaw rate", with(func(s *Sample) { s.YawRateRps = inf }), ReasonNotFinite},
				{"-Inf steer", with(func(s *Sample) { s.SteerRad = -inf }), ReasonNotFinite},
				{"NaN unused accel", with(func(s *Sample) { s.AccelMps2, s.HasAccel = nan, false }), ReasonNotFinite},
				{"speed 121", with(func(s *Sample) { s.SpeedMps = 121 }), ReasonOutOfRange},
				{"yaw rate -6.5", with(func(s *Sample) { s.YawRateRps = -6.5 }), ReasonOutOfRange},
				{"accel 31", with(func(s *Sample) { s.AccelMps2 = 31 }), ReasonOutOfRange},
				{"steer 1.3", with(func(s *Sample) { s.SteerRad = -1.3 }), ReasonOutOfRange},
				{"too old", with(func(s *Sample) { s.TimeUs = newest - 500_001 }), ReasonTooOld},
				{"far past", with(func(s *Sample) { s.TimeUs = -1_000_000_000_000 }), ReasonTooOld},
				{"corrupt time", with(func(s *Sample) { s.TimeUs = math.MinInt64 }), ReasonOutOfRange},
				{"before checkpoint", with(func(s *Sample) { s.TimeUs = samples[0].TimeUs }), ReasonTooOld},
				{"duplicate newest", samples[len(samples)-1], ReasonDuplicate},
				{"duplicate late", samples[len(samples)-20], ReasonDuplicate},
			}
			for _, tc := range tests {
				t.Run(tc.name, func(t *testing.T) {
					before := snapshot(f)
					counts := f.Rejected()
					pNow, _ := f.Predict(newest + 100_000)
					pPast, _ := f.Predict(newest - 300_000)
					err := f.Add(tc.s)
					var re *RejectError
					if !errors.As(err, &re) || re.Reason != tc.want || !errors.Is(err, tc.want.Err()) {
						t.Fatalf("Add: %v, want a *RejectError with reason %v", err, tc.want)
					}
					if got := f.Rejected(); got.Of(tc.want) != counts.Of(tc.want)+1 || got.Total() != counts.Total()+1 {
						t.Fatalf("counts %+v -> %+v", counts, got)
					}
					if !slices.Equal(before, snapshot(f)) {
						t.Fatal("rejected sample changed the state")
					}
					qNow, _ := f.Predict(newest + 100_000)
					qPast, _ := f.Predict(newest - 300_000)
					if !slices.Equal(stateBits(pNow), stateBits(qNow)) || !slices.Equal(stateBits(pPast), stateBits(qPast)) {
						t.Fatal("rejected sample changed a prediction")
					}
				})
			}
		})
	}
}

// shuffleArrivals returns the samples in a random arrival order where each
// sample is delayed by up to maxDelayUs, plus some exact re-sends.
func shuffleArrivals(rng *rand.Rand, in []Sample, maxDelayUs int64) (out []Sample, resends int) {
	type arr struct {
		at int64
		s  Sample
	}
	var a []arr
	for _, s := range in {
		a = append(a, arr{s.TimeUs + rng.Int64N(maxDelayUs), s})
		if rng.IntN(20) == 0 {
			a = append(a, arr{s.TimeUs + rng.Int64N(maxDelayUs), s})
			resends++
		}
	}
	slices.SortStableFunc(a, func(x, y arr) int { return int(x.at - y.at) })
	for _, x := range a {
		out = append(out, x.s)
	}
	return out, resends
}

// TestOutOfOrderMatchesInOrder checks that samples arriving shuffled within
// the history give the same estimates as the same samples in order.
func TestOutOfOrderMatchesInOrder(t *testing.T) {
	tests := []struct {
		name string
		cfg  Config
		spec simSpec
	}{
		{"ctrv", Config{Model: ModelCTRV}, simSpec{}},
		{"ctrv accel steer", Config{Model: ModelCTRV, WheelbaseM: 2.7}, simSpec{accel: true, steer: true}},
		{"bicycle steer", Config{Model: ModelBicycle, WheelbaseM: 2.7}, simSpec{steer: true}},
		{"bicycle accel no steer", Config{Model: ModelBicycle, WheelbaseM: 2.7}, simSpec{accel: true}},
	}
	for i, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			rng := rand.New(rand.NewPCG(uint64(i), 99))
			sp := tc.spec
			sp.cfg, sp.n, sp.dtUs, sp.jitterUs, sp.noisy = tc.cfg, 400, 10_000, 3_000, true
			sp.x0 = [5]float64{0, 0, 0, 12, 0.05}
			sp.startTime = 5_000_000
			samples, _ := simulate(t, rng, sp)
			// Two different samples at one time, as a second source would send.
			extra := samples[300]
			extra.SpeedMps += 0.2
			samples = slices.Insert(samples, 301, extra)

			inOrder := mustNew(t, tc.cfg)
			mustAdd(t, inOrder, samples...)
			arrivals, resends := shuffleArrivals(rng, samples, 600_000)
			shuffled := mustNew(t, tc.cfg)
			for _, s := range arrivals {
				if err := shuffled.Add(s); err != nil && !errors.Is(err, ErrDuplicate) {
					t.Fatalf("Add(%+v): %v", s, err)
				}
			}
			if got := shuffled.Rejected(); got.Duplicate != uint64(resends) || got.Total() != uint64(resends) {
				t.Fatalf("rejections %+v, want %d duplicates", got, resends)
			}
			end := samples[len(samples)-1].TimeUs
			for _, tq := range []int64{end + 250_000, end, end - 1_000_000, samples[301].TimeUs} {
				a, errA := inOrder.Predict(tq)
				b, errB := shuffled.Predict(tq)
				if errA != nil || errB != nil {
					t.Fatalf("Predict(%d): %v, %v", tq, errA, errB)
				}
				for k := range StateDim {
					if d := math.Abs(a.Vec[k] - b.Vec[k]); d > 1e-9 {
						t.Errorf("Predict(%d).Vec[%d]: in order %.12g, shuffled %.12g", tq, k, a.Vec[k], b.Vec[k])
					}
					for j := range StateDim {
						if d := math.Abs(a.Cov[k][j] - b.Cov[k][j]); d > 1e-9 {
							t.Errorf("Predict(%d).Cov[%d][%d]: in order %.12g, shuffled %.12g", tq, k, j, a.Cov[k][j], b.Cov[k][j])
						}
					}
				}
			}
			ma, _ := inOrder.Relative(end-500_000, end+100_000)
			mb, _ := shuffled.Relative(end-500_000, end+100_000)
			if math.Abs(ma.DxM-mb.DxM) > 1e-9 || math.Abs(ma.DyM-mb.DyM) > 1e-9 || math.Abs(ma.DyawRad-mb.DyawRad) > 1e-9 {
				t.Errorf("Relative: in order %+v, shuffled %+v", ma, mb)
			}
		})
	}
}

// TestSameTimeOrderIndependent: two different samples with one TimeUs are
// both used, and the result does not depend on which arrived first.
func TestSameTimeOrderIndependent(t *testing.T) {
	a := Sample{TimeUs: 10_000, SpeedMps: 10, YawRateRps: 0.1}
	b := Sample{TimeUs: 10_000, SpeedMps: 10.4, YawRateRps: 0.1}
	start := Sample{TimeUs: 0, SpeedMps: 10, YawRateRps: 0.1}
	f1 := mustNew(t, Config{Model: ModelCTRV})
	f2 := mustNew(t, Config{Model: ModelCTRV})
	mustAdd(t, f1, start, a, b)
	mustAdd(t, f2, start, b, a)
	s1, _ := f1.Predict(10_000)
	s2, _ := f2.Predict(10_000)
	if !slices.Equal(stateBits(s1), stateBits(s2)) {
		t.Fatalf("order changed the estimate: %v vs %v", s1.Vec, s2.Vec)
	}
	f3 := mustNew(t, Config{Model: ModelCTRV})
	mustAdd(t, f3, start, a)
	s3, _ := f3.Predict(10_000)
	if !(s1.Vec[IdxSpeed] > s3.Vec[IdxSpeed]+0.01) || !(s1.Cov[IdxSpeed][IdxSpeed] < s3.Cov[IdxSpeed][IdxSpeed]) {
		t.Fatalf("second same-time sample not used: speed %v vs %v", s1.Vec[IdxSpeed], s3.Vec[IdxSpeed])
	}
}

// TestPredictPastEqualsPosterior: Predict at a sample time returns that
// sample's posterior, and between samples it is the posterior before
// predicted forward (continuity at the sample time from the left).
func TestPredictPastEqualsPosterior(t *testing.T) {
	cfg := Config{Model: ModelCTRV}
	rng := rand.New(rand.NewPCG(3, 4))
	samples, _ := simulate(t, rng, simSpec{cfg: cfg, n: 50, dtUs: 20_000, x0: [5]float64{0, 0, 0, 8, 0.2}, noisy: true})
	f := mustNew(t, cfg)
	mustAdd(t, f, samples...)
	for i := 1; i < len(samples); i += 7 {
		got, err := f.Predict(samples[i].TimeUs)
		if err != nil {
			t.Fatal(err)
		}
		e := f.hist.at(i)
		for k := range StateDim {
			if got.Vec[k] != e.x[k] {
				t.Fatalf("sample %d: Vec[%d] = %v, posterior %v", i, k, got.Vec[k], e.x[k])
			}
		}
	}
	// Between two samples, position moves continuously toward the next.
	a, _ := f.Predict(samples[10].TimeUs)
	mid, _ := f.Predict(samples[10].TimeUs + 10_000)
	if d := math.Hypot(mid.Vec[0]-a.Vec[0], mid.Vec[1]-a.Vec[1]); math.Abs(d-a.Vec[IdxSpeed]*0.01) > 1e-6 {
		t.Fatalf("10 ms prediction moved %v m at %v m/s", d, a.Vec[IdxSpeed])
	}
}

func TestPredictErrors(t *testing.T) {
	f := mustNew(t, Config{Model: ModelCTRV, HistoryUs: 100_000, MaxGapUs: 1_000_000})
	if _, err := f.Predict(0); !errors.Is(err, ErrNoData) {
		t.Fatalf("empty filter: %v", err)
	}
	if _, err := f.Relative(0, 1); !errors.Is(err, ErrNoData) {
		t.Fatalf("empty filter Relative: %v", err)
	}
	for i := range 50 {
		mustAdd(t, f, Sample{TimeUs: int64(i) * 10_000, SpeedMps: 5})
	}
	tests := []struct {
		name string
		err  error
		want error
	}{
		{"beyond horizon", second2(f.Predict(490_000 + 1_000_001)), ErrHorizon},
		{"far future", second2(f.Predict(math.MaxInt64)), ErrHorizon},
		{"before checkpoint", second2(f.Predict(0)), ErrTooOld},
		{"far past", second2(f.Predict(math.MinInt64)), ErrTooOld},
		{"relative reversed", second3(f.Relative(400_000, 300_000)), ErrTimeOrder},
		{"relative too old", second3(f.Relative(0, 400_000)), ErrTooOld},
		{"relative beyond horizon", second3(f.Relative(400_000, 2_000_000)), ErrHorizon},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if !errors.Is(tc.err, tc.want) {
				t.Fatalf("got %v, want %v", tc.err, tc.want)
			}
		})
	}
	// At the horizon and at the checkpoint it still works.
	if _, err := f.Predict(490_000 + 1_000_000); err != nil {
		t.Errorf("at horizon: %v", err)
	}
	if _, err := f.Predict(490_000 - 100_000); err != nil {
		t.Errorf("at history edge: %v", err)
	}
}

func second2(_ State, err error) error  { return err }
func second3(_ Motion, err error) error { return err }

// TestFirstSampleBeforeTrackStart: before anything was evicted, a sample
// older than the first one re-initialises the track from it.
func TestFirstSampleBeforeTrackStart(t *testing.T) {
	f := mustNew(t, Config{Model: ModelCTRV})
	mustAdd(t, f, Sample{TimeUs: 100_000, SpeedMps: 10}, Sample{TimeUs: 50_000, SpeedMps: 10})
	s, err := f.Predict(50_000)
	if err != nil {
		t.Fatal(err)
	}
	if s.Vec[IdxX] != 0 || s.Cov[IdxX][IdxX] != 0 {
		t.Fatalf("track should start at the earliest sample: %v", s.Vec)
	}
	s, _ = f.Predict(100_000)
	if math.Abs(s.Vec[IdxX]-0.5) > 1e-12 {
		t.Fatalf("x at 100 ms = %v, want 0.5", s.Vec[IdxX])
	}
}

// TestLongGapRestarts: a sample more than MaxGapUs after the newest one
// starts a new track at zero pose.
func TestLongGapRestarts(t *testing.T) {
	f := mustNew(t, Config{Model: ModelCTRV, MaxGapUs: 1_000_000})
	mustAdd(t, f, Sample{TimeUs: 0, SpeedMps: 10}, Sample{TimeUs: 100_000, SpeedMps: 10})
	mustAdd(t, f, Sample{TimeUs: 1_100_001, SpeedMps: 3})
	s, err := f.Predict(1_100_001)
	if err != nil {
		t.Fatal(err)
	}
	if s.Vec[IdxX] != 0 || s.Vec[IdxSpeed] != 3 {
		t.Fatalf("not restarted: %v", s.Vec)
	}
	if _, err := f.Predict(100_000); !errors.Is(err, ErrTooOld) {
		t.Fatalf("old track still visible: %v", err)
	}
	// A gap of exactly MaxGapUs continues the track.
	mustAdd(t, f, Sample{TimeUs: 2_100_001, SpeedMps: 3})
	if s, _ := f.Predict(2_100_001); math.Abs(s.Vec[IdxX]-3) > 1e-9 {
		t.Fatalf("track did not continue: %v", s.Vec)
	}
	f.Reset()
	if _, err := f.Predict(2_100_001); !errors.Is(err, ErrNoData) {
		t.Fatalf("after Reset: %v", err)
	}
}

// TestHistoryCap: with MaxHistorySamples reached, samples not newer than the
// checkpoint are too old even within HistoryUs.
func TestHistoryCap(t *testing.T) {
	f := mustNew(t, Config{Model: ModelCTRV, MaxHistorySamples: 10})
	for i := range 30 {
		mustAdd(t, f, Sample{TimeUs: int64(i) * 1000, SpeedMps: 5})
	}
	if f.hist.len() != 10 {
		t.Fatalf("history holds %d, cap 10", f.hist.len())
	}
	err := f.Add(Sample{TimeUs: 15_500, SpeedMps: 5})
	if !errors.Is(err, ErrTooOld) {
		t.Fatalf("sample before the checkpoint: %v", err)
	}
	mustAdd(t, f, Sample{TimeUs: 25_500, SpeedMps: 5})
}

// TestAccelControl: a measured acceleration is applied as a control input,
// so speed changes by a·t in prediction (exact for constant a).
func TestAccelControl(t *testing.T) {
	for _, model := range []Model{ModelCTRV, ModelBicycle} {
		f := mustNew(t, Config{Model: model, WheelbaseM: 2.5})
		mustAdd(t, f, Sample{TimeUs: 0, SpeedMps: 10, AccelMps2: -2, HasAccel: true})
		s, _ := f.Predict(1_000_000)
		if math.Abs(s.Vec[IdxSpeed]-8) > 1e-12 || math.Abs(s.Vec[IdxX]-9) > 1e-12 {
			t.Errorf("%v: after 1 s at -2 m/s²: speed %v (want 8), x %v (want 9)", model, s.Vec[IdxSpeed], s.Vec[IdxX])
		}
	}
}

// TestISOAxes: a positive yaw rate turns left (y > 0) and a positive steer
// angle too (ISO 8855).
func TestISOAxes(t *testing.T) {
	f := mustNew(t, Config{Model: ModelCTRV})
	mustAdd(t, f, Sample{TimeUs: 0, SpeedMps: 10, YawRateRps: 0.2})
	s, _ := f.Predict(1_000_000)
	if !(s.Vec[IdxY] > 0.5 && s.Vec[IdxYaw] > 0.19) {
		t.Errorf("CTRV left turn went to %v", s.Vec)
	}
	b := mustNew(t, Config{Model: ModelBicycle, WheelbaseM: 2.5})
	mustAdd(t, b, Sample{TimeUs: 0, SpeedMps: 10, YawRateRps: 0.2, SteerRad: 0.05, HasSteer: true})
	s, _ = b.Predict(1_000_000)
	if !(s.Vec[IdxY] > 0.5 && s.Vec[IdxYaw] > 0.19 && s.YawRateRps > 0) {
		t.Errorf("bicycle left turn went to %v", s.Vec)
	}
}

// TestBicycleGeometry: with steer 0 the bicycle drives a straight line, and
// with constant steer δ the rear-axle centre drives a circle of radius
// R = L/tan(δ) centred at (0, R) in the start frame (left for δ > 0), with
// yaw = distance/R (kinematic bicycle geometry, e.g. Rajamani, "Vehicle
// Dynamics and Control", 2nd ed. 2012, sec. 2.2).
func TestBicycleGeometry(t *testing.T) {
	const L, v = 2.9, 7.0
	t.Run("straight", func(t *testing.T) {
		f := mustNew(t, Config{Model: ModelBicycle, WheelbaseM: L})
		for i := range 101 {
			mustAdd(t, f, Sample{TimeUs: int64(i) * 10_000, SpeedMps: v, HasSteer: true})
		}
		s, _ := f.Predict(2_000_000)
		if math.Abs(s.Vec[IdxX]-2*v) > 1e-9 || s.Vec[IdxY] != 0 || s.Vec[IdxYaw] != 0 || s.YawRateRps != 0 {
			t.Fatalf("steer 0: %v", s.Vec)
		}
	})
	for _, delta := range []float64{0.3, -0.3, 0.02, 1.0} {
		t.Run(fmt.Sprintf("circle δ=%v", delta), func(t *testing.T) {
			f := mustNew(t, Config{Model: ModelBicycle, WheelbaseM: L})
			yr := v * math.Tan(delta) / L
			for i := range 51 {
				mustAdd(t, f, Sample{TimeUs: int64(i) * 20_000, SpeedMps: v, YawRateRps: yr, SteerRad: delta, HasSteer: true})
			}
			r := L / math.Tan(delta)
			for _, tq := range []int64{300_000, 1_000_000, 1_700_000} {
				s, _ := f.Predict(tq)
				dist := v * float64(tq) * 1e-6
				if got := math.Hypot(s.Vec[IdxX], s.Vec[IdxY]-r); math.Abs(got-math.Abs(r)) > 1e-9*math.Abs(r) {
					t.Errorf("t=%d: distance from centre %v, radius %v", tq, got, math.Abs(r))
				}
				if want := math.Remainder(dist/r, 2*math.Pi); math.Abs(s.Vec[IdxYaw]-want) > 1e-9 {
					t.Errorf("t=%d: yaw %v, want %v", tq, s.Vec[IdxYaw], want)
				}
				if math.Abs(s.YawRateRps-yr) > 1e-12 {
					t.Errorf("yaw rate %v, want %v", s.YawRateRps, yr)
				}
			}
		})
	}
}

// TestCTRVSteerPseudoMeasurement: with a wheelbase, a steering angle pulls
// the CTRV yaw-rate estimate toward v·tan(δ)/L; without, it is ignored.
func TestCTRVSteerPseudoMeasurement(t *testing.T) {
	feed := func(wheelbase float64) float64 {
		f := mustNew(t, Config{Model: ModelCTRV, WheelbaseM: wheelbase})
		for i := range 20 {
			// Gyro says 0.1 rad/s; steer says 10·tan(0.081)/2.7 ≈ 0.3 rad/s.
			mustAdd(t, f, Sample{TimeUs: int64(i) * 10_000, SpeedMps: 10, YawRateRps: 0.1, SteerRad: 0.081, HasSteer: true})
		}
		s, _ := f.Predict(190_000)
		return s.YawRateRps
	}
	if got := feed(0); math.Abs(got-0.1) > 1e-12 {
		t.Errorf("without wheelbase yaw rate %v, want 0.1", got)
	}
	if got := feed(2.7); !(got > 0.101 && got < 0.2) {
		t.Errorf("with wheelbase yaw rate %v, want slightly above 0.1 (gyro dominates)", got)
	}
}

// TestRelativeStartsAtZeroAndGrows: uncertainty is zero at the gap start
// and grows with the gap.
func TestRelativeStartsAtZeroAndGrows(t *testing.T) {
	cfg := Config{Model: ModelBicycle, WheelbaseM: 2.7}
	rng := rand.New(rand.NewPCG(11, 12))
	samples, _ := simulate(t, rng, simSpec{cfg: cfg, n: 100, dtUs: 10_000, x0: [5]float64{0, 0, 0, 10, 0.02}, steer: true, noisy: true})
	f := mustNew(t, cfg)
	mustAdd(t, f, samples...)
	t0 := samples[len(samples)-1].TimeUs
	m, err := f.Relative(t0, t0)
	if err != nil {
		t.Fatal(err)
	}
	if m.DxM != 0 || m.DyM != 0 || m.DyawRad != 0 || m.Cov != [3][3]float64{} {
		t.Fatalf("zero-length gap: %+v", m)
	}
	prev := 0.0
	for _, gap := range []int64{10_000, 50_000, 100_000, 300_000, 1_000_000} {
		m, err := f.Relative(t0, t0+gap)
		if err != nil {
			t.Fatal(err)
		}
		tr := m.Cov[0][0] + m.Cov[1][1] + m.Cov[2][2]
		if !(tr > prev) {
			t.Errorf("gap %d us: trace %v not above %v", gap, tr, prev)
		}
		prev = tr
		if math.Abs(m.DxM-10*float64(gap)*1e-6) > 0.05*10*float64(gap)*1e-6+0.01 {
			t.Errorf("gap %d us: dx %v at ~10 m/s", gap, m.DxM)
		}
	}
	// Starting inside the history: uncertainty at t0 is zero too.
	m, _ = f.Relative(t0-400_000, t0-400_000)
	if m.Cov != [3][3]float64{} {
		t.Fatalf("past zero-length gap has covariance %v", m.Cov)
	}
}

// TestRelativeMatchesPoses: on noise-free data the measurements agree with
// the prediction, so Relative equals the pose at t1 from Predict expressed
// in the frame of the pose at t0 (rigid-motion composition).
func TestRelativeMatchesPoses(t *testing.T) {
	cfg := Config{Model: ModelCTRV, WheelbaseM: 2.7}
	rng := rand.New(rand.NewPCG(1, 1))
	samples, _ := simulate(t, rng, simSpec{cfg: cfg, n: 200, dtUs: 10_000, x0: [5]float64{0, 0, 0, 12, 0.3}, noisy: false})
	f := mustNew(t, cfg)
	mustAdd(t, f, samples...)
	for _, iv := range [][2]int64{{1_000_000, 1_500_000}, {1_234_567, 1_990_000}, {1_990_000, 2_400_000}} {
		m, err := f.Relative(iv[0], iv[1])
		if err != nil {
			t.Fatal(err)
		}
		a, _ := f.Predict(iv[0])
		b, _ := f.Predict(iv[1])
		dx, dy := b.Vec[0]-a.Vec[0], b.Vec[1]-a.Vec[1]
		sn, c := math.Sincos(a.Vec[2])
		wantX, wantY := c*dx+sn*dy, -sn*dx+c*dy
		wantYaw := math.Remainder(b.Vec[2]-a.Vec[2], 2*math.Pi)
		if math.Abs(m.DxM-wantX) > 1e-9 || math.Abs(m.DyM-wantY) > 1e-9 || math.Abs(m.DyawRad-wantYaw) > 1e-12 {
			t.Errorf("%v: Relative (%v, %v, %v), from poses (%v, %v, %v)", iv, m.DxM, m.DyM, m.DyawRad, wantX, wantY, wantYaw)
		}
		if math.Abs(m.YawRateRps-0.3) > 1e-12 || math.Abs(m.SpeedMps-12) > 1e-12 {
			t.Errorf("%v: speed %v yaw rate %v", iv, m.SpeedMps, m.YawRateRps)
		}
	}
}

// TestRelativeCovarianceLinearised: with negligible process noise and no
// samples in the gap, Cov(dx, dy, dyaw) = J·P·Jᵀ where P is the covariance
// of (v, ω) at t0 and J = ∂(dx, dy, dyaw)/∂(v, ω) of the closed-form CTRV
// motion from the zero pose (ctrvReference, by central differences).
func TestRelativeCovarianceLinearised(t *testing.T) {
	cfg := Config{Model: ModelCTRV, AccelNoiseMps2: 1e-9, YawAccelNoiseRps2: 1e-9, SpeedNoiseMps: 0.5, YawRateNoiseRps: 0.05, TurnAdaptOff: true}
	f := mustNew(t, cfg)
	mustAdd(t, f, Sample{TimeUs: 0, SpeedMps: 9, YawRateRps: 0.4}, Sample{TimeUs: 10_000, SpeedMps: 9.1, YawRateRps: 0.41})
	st, _ := f.Predict(10_000)
	const T = 0.7
	m, err := f.Relative(10_000, 10_000+700_000)
	if err != nil {
		t.Fatal(err)
	}
	v, w := st.Vec[IdxSpeed], st.Vec[IdxTurn]
	var J [3][2]float64
	for j, h := range []float64{1e-6, 1e-7} {
		p, q := [5]float64{0, 0, 0, v, w}, [5]float64{0, 0, 0, v, w}
		p[3+j] += h
		q[3+j] -= h
		fp, fq := ctrvReference(p, T), ctrvReference(q, T)
		for i := range 3 {
			J[i][j] = (fp[i] - fq[i]) / (2 * h)
		}
	}
	P := [2][2]float64{{st.Cov[3][3], st.Cov[3][4]}, {st.Cov[4][3], st.Cov[4][4]}}
	for i := range 3 {
		for k := range 3 {
			want := 0.0
			for a := range 2 {
				for b := range 2 {
					want += J[i][a] * P[a][b] * J[k][b]
				}
			}
			if math.Abs(m.Cov[i][k]-want) > 1e-6*math.Abs(want)+1e-12 {
				t.Errorf("Cov[%d][%d] = %.10g, J P Jᵀ = %.10g", i, k, m.Cov[i][k], want)
			}
		}
	}
	ref := ctrvReference([5]float64{0, 0, 0, v, w}, T)
	if math.Abs(m.DxM-ref[0]) > 1e-12 || math.Abs(m.DyM-ref[1]) > 1e-12 {
		t.Errorf("motion (%v, %v), closed form (%v, %v)", m.DxM, m.DyM, ref[0], ref[1])
	}
}

// TestConcurrentUse exercises Add from one goroutine while another calls
// Predict, Relative and Rejected (meaningful under -race).
func TestConcurrentUse(t *testing.T) {
	f := mustNew(t, Config{Model: ModelCTRV})
	mustAdd(t, f, Sample{TimeUs: 0, SpeedMps: 5})
	done := make(chan struct{})
	go func() {
		defer close(done)
		for i := 1; i <= 300; i++ {
			_ = f.Add(Sample{TimeUs: int64(i) * 10_000, SpeedMps: 5, YawRateRps: 0.01})
		}
	}()
	for i := 0; i < 300; i++ {
		if _, err := f.Predict(int64(i) * 10_000); err != nil && !errors.Is(err, ErrHorizon) && !errors.Is(err, ErrTooOld) {
			t.Error(err)
		}
		if _, err := f.Relative(int64(i)*5_000, int64(i)*10_000); err != nil && !errors.Is(err, ErrHorizon) && !errors.Is(err, ErrTooOld) {
			t.Error(err)
		}
		_ = f.Rejected()
	}
	<-done
}
