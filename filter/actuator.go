package filter

import (
	"fmt"
	"math"
)

// ActuatorFit is what FitActuator estimated from a drive.
type ActuatorFit struct {
	// Actuator holds the estimated DelayUs, SteerLagS and SpeedLagS (the
	// noise fields and MaxCommands are left zero: defaults).
	Actuator Actuator
	// SteerRMSRps is the RMS of measured minus modelled yaw rate, and
	// SpeedRMSMps that of speed, at the estimate.
	SteerRMSRps, SpeedRMSMps float64
	// Samples is the number of telemetry samples each residual used.
	Samples int
}

// Search ranges of FitActuator: a design choice covering remote driving
// over cellular or radio links and road-vehicle actuators.
const (
	fitMaxDelayUs = 500_000
	fitMaxLagS    = 1.5
	fitWarmupUs   = 2_000_000 // skipped after the first command: the initial state decays
)

// fitLevels are the grid steps of FitActuator's search, coarse to fine;
// each level searches ± one step of the level before around its best point.
var fitLevels = [...]struct {
	delayUs int64
	lagS    float64
}{{20_000, 0.05}, {4_000, 0.01}, {1_000, 0.001}}

// FitActuator estimates the uplink delay and the two actuator lags of
// Actuator from a drive: the commands sent (cmds, in send order) and the
// telemetry measured (samples, in time order, both on the vehicle clock).
//
// For a candidate delay D and lags τ_δ, τ_v it runs the model of Actuator
// open loop from the first sample: the road-wheel angle δ̂ (started from
// the sample's steer, or atan(ω·L/v)) and the speed v̂ (started from the
// sample's speed) follow the delayed commands through the lags. The
// residuals are the measured yaw rate minus v·tan(δ̂)/L (v the measured
// speed) and the measured speed minus v̂, over the samples from
// fitWarmupUs after the first command takes effect. The delay is common to
// both channels: for each D the best τ_δ and τ_v are found, and D
// minimises log SSE_ω(D) + log SSE_v(D), the joint likelihood with an
// unknown noise variance per channel. The search is a grid (20 ms by
// 0.05 s over 0-500 ms and 0-1.5 s) refined twice around its best point
// (fitLevels, down to 1 ms by 0.001 s).
//
// Delay and lag are told apart only by fast command changes (for a slow
// sinusoid both are a phase shift): a drive with corrections by the
// operator is needed. It fails if cmds or samples are empty, a command
// has no speed, or fewer than 100 samples fall after the warm-up.
func FitActuator(cmds []Command, samples []Sample, wheelbaseM float64) (ActuatorFit, error) {
	if !(wheelbaseM >= 0.1) {
		return ActuatorFit{}, fmt.Errorf("%w: wheelbase %v m; give the vehicle's wheelbase (>= 0.1 m)", ErrConfig, wheelbaseM)
	}
	if len(cmds) == 0 || len(samples) == 0 {
		return ActuatorFit{}, fmt.Errorf("%w: %d commands and %d telemetry samples; the fit needs both", ErrNoData, len(cmds), len(samples))
	}
	for i, c := range cmds {
		if !c.HasSpeed {
			return ActuatorFit{}, fmt.Errorf("%w: command %d (t_us=%d) has no commanded speed; the speed lag needs one", ErrNoData, i, c.TimeUs)
		}
	}
	fit := actuatorFitter{cmds: cmds, samples: samples, l: wheelbaseM,
		fromUs: cmds[0].TimeUs + fitMaxDelayUs + fitWarmupUs}
	if n := fit.count(); n < 100 {
		return ActuatorFit{}, fmt.Errorf("%w: %d telemetry samples after the warm-up of %d us; record a longer drive", ErrNoData, n, fitMaxDelayUs+fitWarmupUs)
	}
	l0 := fitLevels[0]
	d, ts, tv := fit.search(0, fitMaxDelayUs, l0.delayUs, [2]float64{0, fitMaxLagS}, [2]float64{0, fitMaxLagS}, l0.lagS)
	for i := 1; i < len(fitLevels); i++ {
		prev, l := fitLevels[i-1], fitLevels[i]
		around := func(tau float64) [2]float64 {
			return [2]float64{math.Max(0, tau-prev.lagS), math.Min(fitMaxLagS, tau+prev.lagS)}
		}
		d, ts, tv = fit.search(max(0, d-prev.delayUs), min(fitMaxDelayUs, d+prev.delayUs), l.delayUs, around(ts), around(tv), l.lagS)
	}
	es, n := fit.sse(d, ts, false)
	ev, _ := fit.sse(d, tv, true)
	return ActuatorFit{
		Actuator:    Actuator{DelayUs: d, SteerLagS: ts, SpeedLagS: tv},
		SteerRMSRps: math.Sqrt(es / float64(n)), SpeedRMSMps: math.Sqrt(ev / float64(n)), Samples: n,
	}, nil
}

type actuatorFitter struct {
	cmds    []Command
	samples []Sample
	l       float64
	fromUs  int64
}

func (a *actuatorFitter) count() int {
	n := 0
	for i := range a.samples {
		if a.samples[i].TimeUs >= a.fromUs {
			n++
		}
	}
	return n
}

// search returns the delay and lags minimising the joint cost on the grid
// of delays lo..hi by step and lags in steer and speed (each [low, high])
// by lagStep.
func (a *actuatorFitter) search(lo, hi, step int64, steer, speed [2]float64, lagStep float64) (int64, float64, float64) {
	best := math.Inf(1)
	var bd int64
	var bs, bv float64
	for d := lo; d <= hi; d += step {
		ms, ts := a.bestLag(d, steer, lagStep, false)
		mv, tv := a.bestLag(d, speed, lagStep, true)
		if c := math.Log(ms) + math.Log(mv); c < best {
			best, bd, bs, bv = c, d, ts, tv
		}
	}
	return bd, bs, bv
}

// bestLag returns the least SSE of one channel at delay d over the lags in
// r by step, and its lag.
func (a *actuatorFitter) bestLag(d int64, r [2]float64, step float64, speed bool) (float64, float64) {
	m, best := math.Inf(1), r[0]
	for k := 0; ; k++ {
		tau := r[0] + float64(k)*step
		if tau > r[1]+step/2 {
			return m, best
		}
		if e, _ := a.sse(d, tau, speed); e < m {
			m, best = e, tau
		}
	}
}

// sse runs one channel (speed, else steering) open loop with delay d and
// lag tau and returns the sum of squared residuals and their number.
func (a *actuatorFitter) sse(d int64, tau float64, speed bool) (float64, int) {
	s0 := &a.samples[0]
	x := s0.SpeedMps
	if !speed {
		switch {
		case s0.HasSteer:
			x = s0.SteerRad
		case math.Abs(s0.SpeedMps) >= 1:
			x = math.Atan(s0.YawRateRps * a.l / s0.SpeedMps)
		default:
			x = 0
		}
	}
	t := s0.TimeUs
	j := -1 // newest command in effect at t
	for j+1 < len(a.cmds) && a.cmds[j+1].TimeUs+d <= t {
		j++
	}
	var sum float64
	n := 0
	for i := 1; i < len(a.samples); i++ {
		s := &a.samples[i]
		for t < s.TimeUs {
			next := s.TimeUs
			if j+1 < len(a.cmds) {
				next = min(next, a.cmds[j+1].TimeUs+d)
			}
			if j >= 0 {
				c := a.cmds[j].SteerRad
				if speed {
					c = a.cmds[j].SpeedMps
				}
				if tau <= 0 {
					x = c
				} else {
					x = c + (x-c)*math.Exp(-float64(next-t)*1e-6/tau)
				}
			}
			t = next
			if j+1 < len(a.cmds) && a.cmds[j+1].TimeUs+d <= t {
				j++
			}
		}
		if s.TimeUs < a.fromUs {
			continue
		}
		var r float64
		if speed {
			r = s.SpeedMps - x
		} else {
			r = s.YawRateRps - s.SpeedMps*math.Tan(x)/a.l
		}
		sum += r * r
		n++
	}
	return sum, n
}
