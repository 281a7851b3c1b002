package filter

import (
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// benchSamples returns 100 Hz bicycle telemetry with accel and steer.
func benchSamples(b *testing.B, n int) (Config, []Sample) {
	cfg := Config{Model: ModelBicycle, WheelbaseM: 2.7}
	rng := rand.New(rand.NewPCG(5, 6))
	s, _ := simulate(b, rng, simSpec{cfg: cfg, n: n, dtUs: 10_000, x0: [5]float64{0, 0, 0, 10, 0.02}, accel: true, steer: true, noisy: true})
	return cfg, s
}

// BenchmarkAdd measures Add for in-order 100 Hz telemetry in steady state
// (history full, 2 s = 200 samples).
func BenchmarkAdd(b *testing.B) {
	for _, model := range []Model{ModelCTRV, ModelBicycle} {
		b.Run(model.String(), func(b *testing.B) {
			cfg, samples := benchSamples(b, 400)
			cfg.Model = model
			f := mustNew(b, cfg)
			mustAdd(b, f, samples...)
			next := samples[len(samples)-1]
			b.ReportAllocs()
			b.ResetTimer()
			for b.Loop() {
				next.TimeUs += 10_000
				if err := f.Add(next); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkAddLate measures Add for a sample arriving 100 ms late at
// 100 Hz, which re-filters the 10 newer samples after it.
func BenchmarkAddLate(b *testing.B) {
	_, samples := benchSamples(b, 400)
	cfg := Config{Model: ModelBicycle, WheelbaseM: 2.7}
	f := mustNew(b, cfg)
	mustAdd(b, f, samples...)
	next := samples[len(samples)-1]
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		// Two in-order samples 10 ms apart, then one 100 ms late between
		// existing ones (5 ms offset so it is never a duplicate).
		next.TimeUs += 10_000
		late := next
		late.TimeUs -= 105_000
		next2 := next
		next2.TimeUs += 10_000
		next = next2
		if err := f.Add(next); err != nil {
			b.Fatal(err)
		}
		if err := f.Add(late); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkRelative measures Relative over a 500 ms video gap during which
// 100 Hz telemetry kept arriving (50 samples re-applied), and over a gap
// after the newest sample (pure prediction).
func BenchmarkRelative(b *testing.B) {
	cfg, samples := benchSamples(b, 400)
	f := mustNew(b, cfg)
	mustAdd(b, f, samples...)
	end := samples[len(samples)-1].TimeUs
	for _, tc := range []struct {
		name   string
		t0, t1 int64
	}{
		{"500ms_with_samples", end - 500_000, end},
		{"500ms_extrapolated", end, end + 500_000},
	} {
		b.Run(tc.name, func(b *testing.B) {
			b.ReportAllocs()
			for b.Loop() {
				if _, err := f.Relative(tc.t0, tc.t1); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkPredict measures Predict 50 ms after the newest sample.
func BenchmarkPredict(b *testing.B) {
	cfg, samples := benchSamples(b, 400)
	f := mustNew(b, cfg)
	mustAdd(b, f, samples...)
	end := samples[len(samples)-1].TimeUs
	b.ReportAllocs()
	for b.Loop() {
		if _, err := f.Predict(end + 50_000); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkKalmanUpdate measures one 5-state, 3-measurement Joseph update
// of the core.
func BenchmarkKalmanUpdate(b *testing.B) {
	k := newKalman(b, 5)
	p := make([]float64, 25)
	for i := range 5 {
		p[i*5+i] = 1
	}
	h := mat.NewDense(3, 5, []float64{0, 0, 0, 1, 0, 0, 0, 0, 0.3, 4, 0, 0, 0, 0, 1})
	r := mat.NewDense(3, 3, []float64{0.01, 0, 0, 0, 0.001, 0, 0, 0, 0.0001})
	z := mat.NewVecDense(3, []float64{1, 2, 3})
	b.ReportAllocs()
	for b.Loop() {
		_ = k.Set([]float64{0, 0, 0, 0, 0}, p)
		if _, err := k.Update(z, h, r); err != nil {
			b.Fatal(err)
		}
	}
}
