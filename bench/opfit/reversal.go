package opfit

import (
	"fmt"
	"math"
)

// Steering reversal defaults. The method is that of Markkula and Engström
// (2006), "A steering wheel reversal rate metric for assessing effects of
// visual and cognitive secondary task load" (ITS World Congress), which SAE
// J2944 (2015) standardises: low-pass the steering-wheel angle with a
// second-order Butterworth filter run forward and backward (zero phase),
// find its stationary points, and count a reversal each time the angle has
// moved at least a gap angle away from the last extreme in the opposite
// direction. The values below are those we recall from the paper (0.6 Hz
// filter, 2 degree gap for "small" reversals) and a typical passenger-car
// steering ratio: from memory, not checked against the texts.
const (
	DefaultReversalCutoffHz = 0.6
	DefaultReversalGapDeg   = 2.0
	DefaultSteeringRatio    = 16.0
)

// ReversalConfig configures ReversalCount. Zero fields take the defaults.
type ReversalConfig struct {
	// CutoffHz is the low-pass filter's -3 dB frequency (per pass).
	CutoffHz float64
	// GapDeg is the gap angle, degrees of STEERING-WHEEL angle.
	GapDeg float64
	// SteeringRatio converts a road-wheel angle (what controls.csv and the
	// telemetry carry, rad) to a steering-wheel angle: wheel = ratio ×
	// road wheel. Set 1 for a signal that is already the steering-wheel
	// angle.
	SteeringRatio float64
}

func (c ReversalConfig) withDefaults() ReversalConfig {
	if c.CutoffHz == 0 {
		c.CutoffHz = DefaultReversalCutoffHz
	}
	if c.GapDeg == 0 {
		c.GapDeg = DefaultReversalGapDeg
	}
	if c.SteeringRatio == 0 {
		c.SteeringRatio = DefaultSteeringRatio
	}
	return c
}

// Reversals is the result of ReversalCount.
type Reversals struct {
	// Up and Down count reversals to the left (angle increasing) and to the
	// right.
	Up, Down int
	// TimesUs holds the time of each counted reversal (the stationary point
	// where the gap was reached), in order.
	TimesUs []int64
}

// Total returns Up + Down.
func (r Reversals) Total() int { return r.Up + r.Down }

// ReversalCount counts steering reversals in the road-wheel angle signal
// steerRad sampled at equal steps of periodUs microseconds starting at t0Us:
//
//  1. θ = steerRad × SteeringRatio in degrees (steering-wheel angle);
//  2. θf = Butterworth low-pass, order 2, CutoffHz, applied forward then
//     backward (FiltFilt), so the -3 dB point of the pair is lower (gain
//     1/2 at CutoffHz) and the phase is zero;
//  3. stationary points: the first sample, each sample k where the sign of
//     θf[k+1] - θf[k] differs from that of θf[k] - θf[k-1] (flat runs are
//     skipped), and the last sample;
//  4. over the stationary points θ(l), l = 1.., upward: with k the index of
//     the lowest point since the last upward reversal, count a reversal when
//     θ(l) - θ(k) >= GapDeg and restart from l; downward the same with the
//     sign flipped. The total is the sum.
//
// The signal needs at least 3 samples.
func ReversalCount(steerRad []float64, t0Us, periodUs int64, cfg ReversalConfig) (Reversals, error) {
	cfg = cfg.withDefaults()
	if len(steerRad) < 3 || periodUs <= 0 {
		return Reversals{}, fmt.Errorf("%w: %d samples at %d us; need 3 or more at a period > 0", ErrTooLittleData, len(steerRad), periodUs)
	}
	if !(cfg.CutoffHz > 0) || !(cfg.GapDeg > 0) || !(cfg.SteeringRatio > 0) {
		return Reversals{}, fmt.Errorf("%w: reversal config %+v: every field must be > 0", ErrBadConfig, cfg)
	}
	fs := 1e6 / float64(periodUs)
	if cfg.CutoffHz >= fs/2 {
		return Reversals{}, fmt.Errorf("%w: cutoff %g Hz is not below the Nyquist frequency %g Hz", ErrBadConfig, cfg.CutoffHz, fs/2)
	}
	theta := make([]float64, len(steerRad))
	for i, v := range steerRad {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return Reversals{}, fmt.Errorf("%w: steering sample %d is %v", ErrBadData, i, v)
		}
		theta[i] = v * cfg.SteeringRatio * 180 / math.Pi
	}
	FiltFilt(NewButterworth2(cfg.CutoffHz, fs), theta)
	idx := stationary(theta)
	var r Reversals
	up, down := idx[0], idx[0]
	for _, l := range idx[1:] {
		if theta[l]-theta[up] >= cfg.GapDeg {
			r.Up++
			r.TimesUs = append(r.TimesUs, t0Us+int64(l)*periodUs)
			up = l
		} else if theta[l] < theta[up] {
			up = l
		}
		if theta[down]-theta[l] >= cfg.GapDeg {
			r.Down++
			r.TimesUs = append(r.TimesUs, t0Us+int64(l)*periodUs)
			down = l
		} else if theta[l] > theta[down] {
			down = l
		}
	}
	return r, nil
}

// stationary returns the indices of the stationary points of x (see
// ReversalCount, step 3).
func stationary(x []float64) []int {
	idx := []int{0}
	prev := 0.0 // sign of the last non-zero difference
	for k := 1; k < len(x); k++ {
		d := x[k] - x[k-1]
		if d == 0 {
			continue
		}
		s := math.Copysign(1, d)
		if prev != 0 && s != prev {
			idx = append(idx, k-1)
		}
		prev = s
	}
	if idx[len(idx)-1] != len(x)-1 {
		idx = append(idx, len(x)-1)
	}
	return idx
}

// Biquad is a second-order IIR filter section, direct form II transposed:
//
//	y[n] = B0 x[n] + B1 x[n-1] + B2 x[n-2] - A1 y[n-1] - A2 y[n-2]
type Biquad struct {
	B0, B1, B2, A1, A2 float64
}

// NewButterworth2 returns the second-order Butterworth low-pass with -3 dB
// frequency cutoffHz for sample rate fsHz, by the bilinear transform with
// frequency prewarping (the usual digital design, e.g. Oppenheim and
// Schafer, Discrete-Time Signal Processing, section 7.1):
//
//	K = tan(π fc / fs),  norm = 1 / (1 + √2 K + K²)
//	b = (K², 2K², K²) · norm,  a1 = 2 (K² - 1) · norm,  a2 = (1 - √2 K + K²) · norm
func NewButterworth2(cutoffHz, fsHz float64) Biquad {
	k := math.Tan(math.Pi * cutoffHz / fsHz)
	k2 := k * k
	norm := 1 / (1 + math.Sqrt2*k + k2)
	return Biquad{B0: k2 * norm, B1: 2 * k2 * norm, B2: k2 * norm, A1: 2 * (k2 - 1) * norm, A2: (1 - math.Sqrt2*k + k2) * norm}
}

// Gain returns |H(e^{jω})| at frequency fHz for sample rate fsHz.
func (q Biquad) Gain(fHz, fsHz float64) float64 {
	w := 2 * math.Pi * fHz / fsHz
	z1 := complex(math.Cos(w), -math.Sin(w)) // e^{-jω}
	z2 := z1 * z1
	num := complex(q.B0, 0) + complex(q.B1, 0)*z1 + complex(q.B2, 0)*z2
	den := 1 + complex(q.A1, 0)*z1 + complex(q.A2, 0)*z2
	return cmplxAbs(num / den)
}

func cmplxAbs(c complex128) float64 { return math.Hypot(real(c), imag(c)) }

// filter runs q over x in place, starting from the steady state for x[0]
// (as if x[0] had been applied forever), which avoids a start-up transient.
func (q Biquad) filter(x []float64) {
	if len(x) == 0 {
		return
	}
	// Steady state of the transposed direct form for a constant input u
	// with DC gain g = 1: z1 = u - B0 u, z2 = B2 u - A2 u.
	u := x[0]
	z1, z2 := u*(1-q.B0), u*(q.B2-q.A2)
	for i, v := range x {
		y := q.B0*v + z1
		z1 = q.B1*v - q.A1*y + z2
		z2 = q.B2*v - q.A2*y
		x[i] = y
	}
}

// FiltFilt runs q over x forward, then backward, in place: zero phase,
// squared magnitude response. Each pass starts from the steady state of its
// first sample.
func FiltFilt(q Biquad, x []float64) {
	q.filter(x)
	for i, j := 0, len(x)-1; i < j; i, j = i+1, j-1 {
		x[i], x[j] = x[j], x[i]
	}
	q.filter(x)
	for i, j := 0, len(x)-1; i < j; i, j = i+1, j-1 {
		x[i], x[j] = x[j], x[i]
	}
}
