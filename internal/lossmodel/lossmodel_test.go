package lossmodel

import (
	"encoding/json"
	"errors"
	"fmt"
	"math"
	"slices"
	"testing"
)

// frameTimes returns n capture times with a fixed period starting at t0.
func frameTimes(n int, t0, periodUs int64) []int64 {
	ts := make([]int64, n)
	for i := range ts {
		ts[i] = t0 + int64(i)*periodUs
	}
	return ts
}

// TestGilbertElliottStatistics checks the long-run loss rate and the mean
// burst length against the parameters.
//
// Tolerances (5 standard errors, a false alarm about once in 1.7 million
// runs for a normal statistic):
//   - Loss rate. The loss indicator is L_t = f(S_t) + e_t with S_t the
//     two-state chain, f = k + (h-k)*[S_t = Bad] and e_t independent
//     given the state. For a two-state chain the lag-j autocorrelation is
//     lambda^j with lambda = 1 - p_GB - p_BG, so
//     Var(mean L) ~ [ (h-k)^2 pi(1-pi) (1+lambda)/(1-lambda)
//   - pi h(1-h) + (1-pi) k(1-k) ] / N  (pi = stationary share of Bad).
//   - Burst length (simple Gilbert only, k=0, h=1, where bursts are Bad
//     runs): geometric on {1, 2, ...} with parameter p_BG, mean 1/p_BG,
//     variance (1-p_BG)/p_BG^2; standard error over M observed bursts is
//     sqrt((1-p_BG)/M)/p_BG.
func TestGilbertElliottStatistics(t *testing.T) {
	const n = 200_000
	tests := []struct {
		name     string
		cfg      Config
		periodUs int64
	}{
		{"10% 100 ms at 30 fps", Config{Model: GilbertElliott, LossRate: 0.10, BurstMs: 100, Seed: 1}, 33_333},
		{"30% 50 ms at 30 fps", Config{Model: GilbertElliott, LossRate: 0.30, BurstMs: 50, Seed: 2}, 33_333},
		{"5% 500 ms at 25 fps", Config{Model: GilbertElliott, LossRate: 0.05, BurstMs: 500, Seed: 3}, 40_000},
		{"2% bursts shorter than a frame", Config{Model: GilbertElliott, LossRate: 0.02, BurstMs: 10, Seed: 4}, 33_333},
		{"general k=0.01 h=0.8", Config{Model: GilbertElliott, LossRate: 0.15, BurstMs: 200,
			GoodLossProb: 0.01, BadDeliverProb: 0.2, Seed: 5}, 33_333},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			caps := frameTimes(n, 1_000_000, tt.periodUs)
			res, err := tt.cfg.Simulate(nil, caps)
			if err != nil {
				t.Fatal(err)
			}
			if res.PeriodUs != tt.periodUs {
				t.Fatalf("PeriodUs = %d, want %d", res.PeriodUs, tt.periodUs)
			}
			k, h := tt.cfg.GoodLossProb, 1-tt.cfg.BadDeliverProb
			pi := (tt.cfg.LossRate - k) / (h - k)
			lambda := 1 - res.PGoodBad - res.PBadGood
			varMean := ((h-k)*(h-k)*pi*(1-pi)*(1+lambda)/(1-lambda) + pi*h*(1-h) + (1-pi)*k*(1-k)) / n
			rate := float64(res.Lost) / n
			tol := 5 * math.Sqrt(varMean)
			t.Logf("loss rate %.5f, want %.3f +- %.5f", rate, tt.cfg.LossRate, tol)
			if math.Abs(rate-tt.cfg.LossRate) > tol {
				t.Errorf("loss rate %.5f, want %.3f +- %.5f (5 standard errors)", rate, tt.cfg.LossRate, tol)
			}
			if k != 0 || h != 1 {
				return
			}
			// Mean burst: runs of consecutive lost frames.
			var runs, lostInRuns int
			for i, a := range res.ArrivalUs {
				if a != NeverArrivesUs {
					continue
				}
				lostInRuns++
				if i == 0 || res.ArrivalUs[i-1] != NeverArrivesUs {
					runs++
				}
			}
			p := res.PBadGood
			meanFrames := float64(lostInRuns) / float64(runs)
			seFrames := math.Sqrt((1-p)/float64(runs)) / p
			// Expected burst duration: BurstMs, or one period when
			// BurstMs is shorter (p_BG clamped to 1).
			wantMs := math.Max(tt.cfg.BurstMs, float64(tt.periodUs)/1000)
			gotMs := meanFrames * float64(tt.periodUs) / 1000
			tolMs := 5*seFrames*float64(tt.periodUs)/1000 + 1e-9
			t.Logf("mean burst %.2f ms over %d bursts, want %.2f +- %.2f ms", gotMs, runs, wantMs, tolMs)
			if math.Abs(gotMs-wantMs) > tolMs {
				t.Errorf("mean burst %.2f ms over %d bursts, want %.2f +- %.2f ms", gotMs, runs, wantMs, tolMs)
			}
		})
	}
}

// TestTransitionsWorkedValues checks the documented formulas with values
// worked by hand: T = 33.333 ms, BurstMs = 100 -> p_BG = 1/3;
// LossRate 0.1 -> p_GB = (1/3)(0.1/0.9) = 0.037037.
func TestTransitionsWorkedValues(t *testing.T) {
	tests := []struct {
		name         string
		cfg          Config
		periodUs     int64
		wantGB, want float64
	}{
		{"simple", Config{Model: GilbertElliott, LossRate: 0.1, BurstMs: 100}, 100_000 / 3, 1.0 / 27, 1.0 / 3},
		{"clamped", Config{Model: GilbertElliott, LossRate: 0.2, BurstMs: 10}, 40_000, 0.25, 1},
		// pi_B = (0.15-0.01)/(0.8-0.01) = 0.177215; p_BG = 0.2;
		// p_GB = 0.2 * 0.177215/0.822785 = 0.043077
		{"general", Config{Model: GilbertElliott, LossRate: 0.15, BurstMs: 200, GoodLossProb: 0.01, BadDeliverProb: 0.2}, 40_000,
			0.2 * (0.14 / 0.79) / (1 - 0.14/0.79), 0.2},
		{"none", Config{Model: None}, 40_000, 0, 0},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			gb, bg, err := tt.cfg.Transitions(tt.periodUs)
			if err != nil {
				t.Fatal(err)
			}
			if math.Abs(gb-tt.wantGB) > 1e-5 || math.Abs(bg-tt.want) > 1e-5 {
				t.Errorf("p_GB, p_BG = %.6f, %.6f; want %.6f, %.6f", gb, bg, tt.wantGB, tt.want)
			}
		})
	}
}

func TestSimulateDeterministic(t *testing.T) {
	caps := frameTimes(5000, 0, 33_333)
	cfg := Config{Model: GilbertElliott, LossRate: 0.2, BurstMs: 150, JitterMs: 20, ExtraDelayMs: 40, Seed: 42}
	a, err := cfg.Simulate(nil, caps)
	if err != nil {
		t.Fatal(err)
	}
	first := slices.Clone(a.ArrivalUs)
	b, err := cfg.Simulate(a.ArrivalUs, caps) // reuses the buffer
	if err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(first, b.ArrivalUs) || a.Lost != b.Lost {
		t.Error("same seed gave different arrivals")
	}
	other := cfg
	other.Seed = 43
	c, err := other.Simulate(nil, caps)
	if err != nil {
		t.Fatal(err)
	}
	if slices.Equal(first, c.ArrivalUs) {
		t.Error("different seeds gave identical arrivals")
	}
	t.Run("delay settings do not change the loss pattern", func(t *testing.T) {
		d := cfg
		d.JitterMs, d.ExtraDelayMs = 0, 0
		r, err := d.Simulate(nil, caps)
		if err != nil {
			t.Fatal(err)
		}
		for i := range caps {
			if (r.ArrivalUs[i] == NeverArrivesUs) != (first[i] == NeverArrivesUs) {
				t.Fatalf("frame %d lost in one run and not the other", i)
			}
		}
	})
}

// TestSimulateDelays checks the bounds and the mean of the uniform jitter:
// mean J/2 with standard error J/sqrt(12 N) (5 standard errors allowed).
func TestSimulateDelays(t *testing.T) {
	const n = 20_000
	caps := frameTimes(n, 500, 20_000)
	cfg := Config{Model: None, ExtraDelayMs: 80, JitterMs: 30, Seed: 9}
	r, err := cfg.Simulate(nil, caps)
	if err != nil {
		t.Fatal(err)
	}
	if r.Lost != 0 || r.BaseDelayUs != 80_000 {
		t.Fatalf("Lost = %d, BaseDelayUs = %d; want 0, 80000", r.Lost, r.BaseDelayUs)
	}
	var sum float64
	for i, a := range r.ArrivalUs {
		j := a - caps[i] - r.BaseDelayUs
		if j < 0 || j >= 30_000 {
			t.Fatalf("frame %d jitter %d us outside [0, 30000)", i, j)
		}
		sum += float64(j)
	}
	mean := sum / n / 1000
	tol := 5 * 30 / math.Sqrt(12*n)
	if math.Abs(mean-15) > tol {
		t.Errorf("mean jitter %.3f ms, want 15 +- %.3f", mean, tol)
	}
}

func TestConfigErrors(t *testing.T) {
	ge := Config{Model: GilbertElliott, LossRate: 0.1, BurstMs: 100}
	mod := func(f func(*Config)) Config { c := ge; f(&c); return c }
	tests := []struct {
		name  string
		cfg   Config
		field string
	}{
		{"zero value", Config{}, "Model"},
		{"unknown model", Config{Model: 7}, "Model"},
		{"loss rate 1", mod(func(c *Config) { c.LossRate = 1 }), "LossRate"},
		{"negative loss", mod(func(c *Config) { c.LossRate = -0.1 }), "LossRate"},
		{"NaN loss", mod(func(c *Config) { c.LossRate = math.NaN() }), "LossRate"},
		{"zero burst", mod(func(c *Config) { c.BurstMs = 0 }), "BurstMs"},
		{"Inf burst", mod(func(c *Config) { c.BurstMs = math.Inf(1) }), "BurstMs"},
		{"negative jitter", mod(func(c *Config) { c.JitterMs = -1 }), "JitterMs"},
		{"negative delay", mod(func(c *Config) { c.ExtraDelayMs = -5 }), "ExtraDelayMs"},
		{"negative period", mod(func(c *Config) { c.FramePeriodMs = -5 }), "FramePeriodMs"},
		{"huge delay", mod(func(c *Config) { c.ExtraDelayMs = 1e300 }), "ExtraDelayMs"},
		{"huge jitter", mod(func(c *Config) { c.JitterMs = 4e6 }), "JitterMs"},
		{"good loss above rate", mod(func(c *Config) { c.GoodLossProb = 0.2 }), "GoodLossProb"},
		{"bad state delivers too much", mod(func(c *Config) { c.BadDeliverProb = 0.95 }), "BadDeliverProb"},
		{"loss with model none", Config{Model: None, LossRate: 0.1}, "LossRate"},
		{"rate too high for burst", mod(func(c *Config) { c.LossRate = 0.9; c.BurstMs = 40; c.FramePeriodMs = 40 }), "LossRate"},
	}
	caps := frameTimes(10, 0, 40_000)
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			_, err := tt.cfg.Simulate(nil, caps)
			if !errors.Is(err, ErrConfig) {
				t.Fatalf("err = %v, want ErrConfig", err)
			}
			var pe *ParamError
			if !errors.As(err, &pe) || pe.Field != tt.field {
				t.Errorf("err = %v, want a ParamError for %s", err, tt.field)
			}
		})
	}
	t.Run("capture times not increasing", func(t *testing.T) {
		_, err := ge.Simulate(nil, []int64{0, 40_000, 40_000, 80_000})
		if !errors.Is(err, ErrCaptureTimes) {
			t.Errorf("err = %v, want ErrCaptureTimes", err)
		}
	})
	t.Run("capture time near the int64 limit", func(t *testing.T) {
		_, err := ge.Simulate(nil, []int64{0, math.MaxInt64 - 10})
		if !errors.Is(err, ErrCaptureTimes) {
			t.Errorf("err = %v, want ErrCaptureTimes", err)
		}
	})
	t.Run("zero period", func(t *testing.T) {
		if _, _, err := ge.Transitions(0); !errors.Is(err, ErrConfig) {
			t.Errorf("err = %v, want ErrConfig", err)
		}
	})
}

func TestSimulateEdgeCases(t *testing.T) {
	ge := Config{Model: GilbertElliott, LossRate: 0.5, BurstMs: 100, Seed: 3}
	for _, caps := range [][]int64{nil, {123}} {
		r, err := ge.Simulate(nil, caps)
		if err != nil || len(r.ArrivalUs) != len(caps) {
			t.Errorf("%d frames: %v, %d arrivals", len(caps), err, len(r.ArrivalUs))
		}
	}
	zero := Config{Model: GilbertElliott, LossRate: 0, BurstMs: 100}
	r, err := zero.Simulate(nil, frameTimes(1000, 0, 10_000))
	if err != nil || r.Lost != 0 {
		t.Errorf("LossRate 0: lost %d, err %v", r.Lost, err)
	}
	// Irregular frame times: the period is the median interval.
	r, err = ge.Simulate(nil, []int64{0, 30_000, 60_000, 100_000}) // intervals 30, 30, 40 ms
	if err != nil || r.PeriodUs != 30_000 {
		t.Errorf("median period = %d (%v), want 30000", r.PeriodUs, err)
	}
}

func TestModelText(t *testing.T) {
	for _, m := range []Model{None, GilbertElliott} {
		got, err := ParseModel(m.String())
		if err != nil || got != m {
			t.Errorf("ParseModel(%q) = %v, %v", m.String(), got, err)
		}
	}
	if Invalid.String() != "invalid" || Model(-3).String() != "invalid" {
		t.Error("invalid models must print as invalid")
	}
	if _, err := ParseModel("invalid"); !errors.Is(err, ErrConfig) {
		t.Errorf("ParseModel(invalid) err = %v", err)
	}
	cfg := Config{Model: GilbertElliott, LossRate: 0.1, BurstMs: 80, Seed: 7}
	raw, err := json.Marshal(cfg)
	if err != nil {
		t.Fatal(err)
	}
	var back Config
	if err := json.Unmarshal(raw, &back); err != nil || back != cfg {
		t.Errorf("JSON round trip: %s -> %+v, %v", raw, back, err)
	}
	if err := json.Unmarshal([]byte(`{"model":"bursty"}`), &back); !errors.Is(err, ErrConfig) {
		t.Errorf("unknown model in JSON: err = %v", err)
	}
}

// FuzzConfig checks that no setting makes Simulate panic and that
// accepted settings give one arrival per frame, each within
// [capture + D, capture + D + J] where D = round(ExtraDelayMs·1000) and
// J = ceil(JitterMs·1000) are recomputed here from the settings; that Lost
// counts the lost frames and None loses none; and that a frame's
// fate does not depend on the frames after it (the first half of the
// frames, simulated alone, gives the same arrivals), as Simulate's separate
// random streams promise.
func FuzzConfig(f *testing.F) {
	f.Add(2, 0.1, 100.0, 0.0, 0.0, 0.0, 20.0, 5.0, uint64(1))
	f.Add(2, 0.9, 1.0, 0.0, 0.0, 33.0, 0.0, 0.0, uint64(2))
	f.Add(1, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, uint64(0))
	f.Add(2, 0.5, 1e-300, 0.4, 0.1, 1e300, 1e300, 1e300, uint64(3))
	f.Add(1, 0.0, 0.0, 0.0, 0.0, 0.0, 1e300, 0.0, uint64(4))
	f.Add(1, 0.0, 0.0, 0.0, 0.0, 0.0, 3_600_000.0, 3_600_000.0, uint64(5))
	f.Fuzz(func(t *testing.T, model int, rate, burst, k, bd, period, delay, jitter float64, seed uint64) {
		cfg := Config{Model: Model(model), LossRate: rate, BurstMs: burst, GoodLossProb: k,
			BadDeliverProb: bd, FramePeriodMs: period, ExtraDelayMs: delay, JitterMs: jitter, Seed: seed}
		caps := frameTimes(64, 0, 33_333)
		r, err := cfg.Simulate(nil, caps)
		if err != nil {
			if !errors.Is(err, ErrConfig) {
				t.Fatalf("error %v does not wrap ErrConfig", err)
			}
			return
		}
		if len(r.ArrivalUs) != len(caps) {
			t.Fatalf("%d arrivals for %d frames", len(r.ArrivalUs), len(caps))
		}
		base := int64(math.Round(cfg.ExtraDelayMs * 1000))
		jit := int64(math.Ceil(cfg.JitterMs * 1000))
		if r.BaseDelayUs != base {
			t.Fatalf("base delay %d us, want round(%v ms) = %d us", r.BaseDelayUs, cfg.ExtraDelayMs, base)
		}
		lost := 0
		for i, a := range r.ArrivalUs {
			if a == NeverArrivesUs {
				lost++
				continue
			}
			if a < caps[i]+base || a > caps[i]+base+jit {
				t.Fatalf("frame %d captured at %d arrives at %d, outside [capture + %d, capture + %d] (%+v)", i, caps[i], a, base, base+jit, cfg)
			}
		}
		if lost != r.Lost || (cfg.Model == None && lost != 0) {
			t.Fatalf("%d frames lost, Lost = %d, model %v", lost, r.Lost, cfg.Model)
		}
		half, err := cfg.Simulate(nil, caps[:len(caps)/2])
		if err != nil {
			t.Fatalf("the first %d frames alone: %v", len(caps)/2, err)
		}
		for i, a := range half.ArrivalUs {
			if a != r.ArrivalUs[i] {
				t.Fatalf("frame %d: arrival %d with %d frames, %d with %d (%+v)", i, r.ArrivalUs[i], len(caps), a, len(caps)/2, cfg)
			}
		}
	})
}

// ExampleConfig simulates a 30 fps link losing 10% of frames in
// bursts of 100 ms on average, 60-80 ms late.
func ExampleConfig() {
	cfg := Config{Model: GilbertElliott, LossRate: 0.1, BurstMs: 100,
		ExtraDelayMs: 60, JitterMs: 20, Seed: 1}
	caps := make([]int64, 30*60) // one minute
	for i := range caps {
		caps[i] = int64(i) * 1_000_000 / 30
	}
	r, err := cfg.Simulate(nil, caps)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("period %d us, p_GB %.4f, p_BG %.4f, base delay %d us\n", r.PeriodUs, r.PGoodBad, r.PBadGood, r.BaseDelayUs)
	// Output: period 33333 us, p_GB 0.0370, p_BG 0.3333, base delay 60000 us
}

// BenchmarkSimulate measures one hour of 30 fps frames through the
// Gilbert-Elliott link with jitter, reusing the destination slice.
func BenchmarkSimulate(b *testing.B) {
	caps := frameTimes(30*3600, 0, 33_333)
	cfg := Config{Model: GilbertElliott, LossRate: 0.1, BurstMs: 100, JitterMs: 10, Seed: 1}
	dst := make([]int64, len(caps))
	b.ReportAllocs()
	for b.Loop() {
		if _, err := cfg.Simulate(dst, caps); err != nil {
			b.Fatal(err)
		}
	}
}
