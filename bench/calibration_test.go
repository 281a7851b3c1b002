package bench

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"
)

// TestCalibrateWorked checks ECE and Brier against hand-computed values:
// ten forecasts of 0.8 of which five came true give ECE |0.8 − 0.5| = 0.3
// and Brier (5·0.2² + 5·0.8²)/10 = 0.34 (Brier 1950, the definition).
// Forecasts drawn from a calibrated source (outcome ~ Bernoulli(p)) give a
// small ECE.
func TestCalibrateWorked(t *testing.T) {
	conf := make([]float64, 10)
	good := make([]bool, 10)
	for i := range conf {
		conf[i], good[i] = 0.8, i%2 == 0
	}
	c := Calibrate(conf, good, 10)
	if math.Abs(float64(c.ECE)-0.3) > 1e-12 || math.Abs(float64(c.Brier)-0.34) > 1e-12 || c.Frames != 10 || c.Bins[8].Frames != 10 {
		t.Fatalf("got ECE %v Brier %v frames %d bins %+v", c.ECE, c.Brier, c.Frames, c.Bins)
	}
	rng := rand.New(rand.NewPCG(3, 4))
	conf, good = conf[:0], good[:0]
	for range 20000 {
		p := rng.Float64()
		conf = append(conf, p)
		good = append(good, rng.Float64() < p)
	}
	if c := Calibrate(conf, good, 0); c.ECE > 0.02 {
		t.Fatalf("calibrated source: ECE %v, want < 0.02", c.ECE)
	}
	// NaN confidences are skipped; a confidence of exactly 1 is in the last bin.
	c = Calibrate([]float64{math.NaN(), 1}, []bool{true, true}, 4)
	if c.Frames != 1 || c.Bins[3].Frames != 1 || c.ECE != 0 {
		t.Fatalf("NaN/edge: %+v", c)
	}
}

// TestTelemetryOwnChannel: samples on their own channel arrive with the
// given latency and are lost independently at the loss rate (binomial
// share within 4 standard errors); the fate-shared default refuses a loss
// rate.
func TestTelemetryOwnChannel(t *testing.T) {
	const n, rate = 20000, 0.3
	times := make([]int64, n)
	for i := range times {
		times[i] = int64(i) * 10_000
	}
	arr := TelemetryLink{Own: true, LossRate: rate, Seed: 9}.ownChannelArrivals(times, 150_000)
	lost := 0
	for i, a := range arr {
		switch {
		case a == NeverArrivesUs:
			lost++
		case a != times[i]+150_000:
			t.Fatalf("sample %d arrives at %d, want %d", i, a, times[i]+150_000)
		}
	}
	se := math.Sqrt(rate * (1 - rate) / n)
	if got := float64(lost) / n; math.Abs(got-rate) > 4*se {
		t.Fatalf("lost share %v, want %v ± %v", got, rate, 4*se)
	}
	for _, bad := range []TelemetryLink{{LossRate: 0.1}, {Own: true, LossRate: 1}, {Own: true, LossRate: math.NaN()}} {
		if err := bad.Validate(); !errors.Is(err, ErrReplayInput) {
			t.Errorf("%+v: %v, want ErrReplayInput", bad, err)
		}
	}
}
