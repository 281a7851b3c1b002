package filter

import (
	"encoding/binary"
	"errors"
	"math"
	"slices"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// fuzzChunk is the size of one encoded sample in FuzzAdd's input:
// mode byte, int64 time, four float64 values, flags byte.
const fuzzChunk = 1 + 8 + 4*8 + 1

// Mode bits of a fuzz chunk.
const (
	fuzzRelTime = 1 << iota // time = newest + int16(time)·100 µs
	fuzzFold                // fold finite values into the valid range
)

func encodeFuzz(mode byte, t int64, v, w, a, d float64, flags byte) []byte {
	b := make([]byte, fuzzChunk)
	b[0] = mode
	binary.LittleEndian.PutUint64(b[1:], uint64(t))
	for i, x := range []float64{v, w, a, d} {
		binary.LittleEndian.PutUint64(b[9+8*i:], math.Float64bits(x))
	}
	b[fuzzChunk-1] = flags
	return b
}

// fold maps a finite x into [-lim, lim] so that most fuzzed samples are
// accepted and reach the filtering code.
func fold(x, lim float64) float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return x
	}
	return math.Mod(x, lim)
}

// FuzzAdd feeds arbitrary samples (any float64 bits, any int64 time, or
// times near the newest sample, telemetry, video or an unknown source) to a filter that already holds 400 ms of
// telemetry, and checks after every Add: no panic; a rejection is a
// counted *RejectError that leaves the state bit-identical; the estimate is
// finite; the covariances from Predict and Relative are symmetric positive
// semi-definite.
func FuzzAdd(f *testing.F) {
	nan, inf := math.NaN(), math.Inf(1)
	f.Add(uint8(0), slices.Concat(
		encodeFuzz(fuzzRelTime, 100, 10, 0.1, 0.5, 0.02, 3),
		encodeFuzz(fuzzRelTime, -300, 10.2, 0.12, 0, 0, 0),
		encodeFuzz(fuzzRelTime, -300, 10.2, 0.12, 0, 0, 0)))
	f.Add(uint8(1), slices.Concat(
		encodeFuzz(fuzzRelTime, 50, nan, 0, 0, 0, 0),
		encodeFuzz(fuzzRelTime, 50, 0, inf, 0, 0, 0),
		encodeFuzz(fuzzRelTime, 50, 0, 0, -inf, 0, 1),
		encodeFuzz(fuzzRelTime, 50, 130, 0, 0, 0, 0)))
	f.Add(uint8(2), slices.Concat(
		encodeFuzz(0, math.MaxInt64, 5, 1, 0, 0.3, 2),
		encodeFuzz(0, math.MinInt64, 5, 1, 0, 0.3, 2),
		encodeFuzz(fuzzRelTime, -32768, 5, 1, 0, 0.3, 2)))
	f.Add(uint8(3), slices.Concat(
		encodeFuzz(fuzzRelTime|fuzzFold, 1, 1e300, -1e300, 7, -9, 3),
		encodeFuzz(fuzzRelTime|fuzzFold, 1, 0.001, 5.99, 0, 1.2, 3),
		encodeFuzz(fuzzRelTime|fuzzFold, 20000, 119, -5.99, -29, -1.19, 3)))
	f.Add(uint8(0), slices.Concat(
		encodeFuzz(fuzzRelTime, 30, 9.5, 0.2, 0.3, 0.02, 4),
		encodeFuzz(fuzzRelTime, 60, 9.5, 0.2, 0, 0.02, 4),
		encodeFuzz(fuzzRelTime, 90, 9.5, 0.2, nan, 0.02, 4),
		encodeFuzz(fuzzRelTime, 120, 9.5, 0.2, 0.3, 0.02, 5),
		encodeFuzz(fuzzRelTime, 150, 9.5, 0.2, 0.3, 0.02, 0x2c)))
	f.Fuzz(fuzzBody)
}

func fuzzBody(t *testing.T, model uint8, data []byte) {
	{
		cfg := Config{Model: ModelCTRV}
		switch model % 3 {
		case 1:
			cfg = Config{Model: ModelBicycle, WheelbaseM: 2.7}
		case 2:
			cfg = Config{Model: ModelCTRV, WheelbaseM: 2.7}
		}
		fl := mustNew(t, cfg)
		for i := range 40 {
			mustAdd(t, fl, Sample{TimeUs: 1_000_000 + int64(i)*10_000, SpeedMps: 10, YawRateRps: 0.05,
				AccelMps2: 0.2, HasAccel: true, SteerRad: 0.0126, HasSteer: true})
		}
		// At most 64 samples per input: long inputs only repeat the same
		// paths and make each execution slow (a late sample re-filters the
		// whole history).
		for n := 0; len(data) >= fuzzChunk && n < 64; n++ {
			c := data[:fuzzChunk]
			data = data[fuzzChunk:]
			var s Sample
			tRaw := int64(binary.LittleEndian.Uint64(c[1:]))
			s.TimeUs = tRaw
			if c[0]&fuzzRelTime != 0 && fl.hist.len() > 0 {
				s.TimeUs = fl.hist.last().s.TimeUs + int64(int16(tRaw))*100
			}
			vals := [4]float64{}
			for i := range vals {
				vals[i] = math.Float64frombits(binary.LittleEndian.Uint64(c[9+8*i:]))
			}
			if c[0]&fuzzFold != 0 {
				vals[0] = fold(vals[0], MaxSpeedMps)
				vals[1] = fold(vals[1], MaxYawRateRps)
				vals[2] = fold(vals[2], MaxAccelMps2)
				vals[3] = fold(vals[3], MaxSteerRad)
			}
			s.SpeedMps, s.YawRateRps, s.AccelMps2, s.SteerRad = vals[0], vals[1], vals[2], vals[3]
			s.HasAccel, s.HasSteer = c[fuzzChunk-1]&1 != 0, c[fuzzChunk-1]&2 != 0
			if c[fuzzChunk-1]&4 != 0 { // a video sample: accel and steer carry its noise
				s.Source = SourceVideo
				s.SpeedStdMps, s.YawRateStdRps = math.Abs(vals[2]), math.Abs(vals[3])
			}
			if c[fuzzChunk-1]&8 != 0 { // an unknown source
				s.Source = Source(c[fuzzChunk-1] >> 4)
			}

			before := snapshot(fl)
			counts := fl.Rejected()
			err := fl.Add(s)
			if err != nil {
				var re *RejectError
				if !errors.As(err, &re) {
					t.Fatalf("Add(%+v): %v is not a *RejectError", s, err)
				}
				if fl.Rejected().Total() != counts.Total()+1 || fl.Rejected().Of(re.Reason) != counts.Of(re.Reason)+1 {
					t.Fatalf("rejection not counted: %+v -> %+v", counts, fl.Rejected())
				}
				if !slices.Equal(before, snapshot(fl)) {
					t.Fatalf("rejected %+v changed the state", s)
				}
			}
			checkInvariants(t, fl)
		}
	}
}

func checkInvariants(t *testing.T, fl *Filter) {
	t.Helper()
	if fl.hist.len() == 0 {
		t.Fatal("history empty after Add")
	}
	newest := fl.hist.last().s.TimeUs
	for _, tq := range []int64{newest, newest + 300_000, newest - 50_000} {
		st, err := fl.Predict(tq)
		if err != nil {
			if errors.Is(err, ErrTooOld) {
				continue
			}
			t.Fatalf("Predict(%d): %v", tq, err)
		}
		for i, v := range st.Vec {
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("Predict(%d).Vec[%d] = %v", tq, i, v)
			}
		}
		if math.IsNaN(st.YawRateRps) || math.IsInf(st.YawRateRps, 0) {
			t.Fatalf("Predict(%d).YawRateRps = %v", tq, st.YawRateRps)
		}
		c := make([]float64, 0, 25)
		for i := range StateDim {
			c = append(c, st.Cov[i][:]...)
		}
		checkSymPSD(t, "Predict covariance", StateDim, c)
	}
	m, err := fl.Relative(newest-100_000, newest+200_000)
	if err != nil {
		if errors.Is(err, ErrTooOld) {
			return
		}
		t.Fatalf("Relative: %v", err)
	}
	for _, v := range []float64{m.DxM, m.DyM, m.DyawRad, m.SpeedMps, m.YawRateRps} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			t.Fatalf("Relative: non-finite %+v", m)
		}
	}
	c := make([]float64, 0, 9)
	for i := range 3 {
		c = append(c, m.Cov[i][:]...)
	}
	checkSymPSD(t, "Relative covariance", 3, c)
}

// checkSymPSD checks exact symmetry and positive semi-definiteness up to
// rounding: C + τI must have a Cholesky factorisation for τ = 1e-9 times
// the largest magnitude (C + τI is positive definite iff every eigenvalue
// of C exceeds −τ).
func checkSymPSD(t *testing.T, what string, n int, c []float64) {
	t.Helper()
	scale := 0.0
	for i := range n {
		for j := range n {
			v := c[i*n+j]
			if math.IsNaN(v) || math.IsInf(v, 0) {
				t.Fatalf("%s has non-finite entry: %v", what, c)
			}
			if v != c[j*n+i] {
				t.Fatalf("%s not symmetric at (%d,%d): %v vs %v", what, i, j, v, c[j*n+i])
			}
			if v != 0 && math.Abs(v) < flushBelow {
				t.Fatalf("%s has a tiny entry %v that should have been flushed", what, v)
			}
			scale = math.Max(scale, math.Abs(v))
		}
	}
	tau := 1e-9*scale + 1e-300
	shifted := mat.NewSymDense(n, nil)
	for i := range n {
		for j := i; j < n; j++ {
			v := c[i*n+j]
			if i == j {
				v += tau
			}
			shifted.SetSym(i, j, v)
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(shifted) {
		t.Fatalf("%s not positive semi-definite (within %g): %v", what, tau, c)
	}
}
