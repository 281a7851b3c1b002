package filter

import (
	"fmt"
	"math"
)

// Command is one operator command: what the operator asked the vehicle to
// do, known on the operator's side even while the link to the vehicle is
// down. With ModelBicycle it is the model's control input (see AddCommand).
type Command struct {
	// TimeUs is when the command was sent, in microseconds on the vehicle
	// clock (the operator station's clock mapped onto it). It takes effect
	// at the vehicle Actuator.DelayUs later.
	TimeUs int64
	// SteerRad is the commanded front road-wheel angle, positive to the
	// left (ISO 8855).
	SteerRad float64
	// SpeedMps is the commanded longitudinal speed; used only if HasSpeed.
	SpeedMps float64
	HasSpeed bool
	// AccelMps2 is a commanded longitudinal acceleration, applied as is
	// (no lag) when there is no commanded speed; used only if HasAccel.
	AccelMps2 float64
	HasAccel  bool
}

// Actuator says how the vehicle follows commands: a command sent at t
// reaches the actuators at t + DelayUs, and from then on the road-wheel
// angle δ and the speed v approach the commanded δc and vc as first-order
// lags,
//
//	dδ/dt = (δc − δ) / SteerLagS,   dv/dt = (vc − v) / SpeedLagS,
//
// which over a step of dt with the command held is exactly
// δ' = δc + (δ − δc)·exp(−dt/SteerLagS) (and alike for v). A zero lag means
// the actuator follows at once. The values are vehicle properties; estimate
// them from a drive with FitActuator.
type Actuator struct {
	// DelayUs is the uplink delay from the station to the vehicle's
	// actuators, microseconds, >= 0.
	DelayUs int64
	// SteerLagS and SpeedLagS are the time constants, seconds, >= 0.
	SteerLagS, SpeedLagS float64
	// SteerRateNoiseRps and AccelNoiseMps2 replace SteerRateNoiseRps and
	// AccelNoiseMps2 of Config over the time a command is in effect: what
	// the lag model does not explain (tyre slip, slope, actuator noise).
	// Defaults DefaultCommandSteerRateNoiseRps, DefaultCommandAccelNoiseMps2.
	SteerRateNoiseRps, AccelNoiseMps2 float64
	// MaxCommands is how many commands are kept (the newest); default
	// DefaultMaxCommands, 20 s at 50 Hz.
	MaxCommands int
}

// Defaults of Actuator. The noise values are a design choice of this
// project (an order of magnitude below the free-running noise of Config,
// since the commands explain most of the motion), checked on simulated
// drives only.
const (
	DefaultCommandSteerRateNoiseRps = 0.03
	DefaultCommandAccelNoiseMps2    = 0.3
	DefaultMaxCommands              = 1024
	// maxCommandDelayUs bounds Actuator.DelayUs (2 s): beyond it remote
	// driving is not possible anyway.
	maxCommandDelayUs = 2_000_000
	// maxLagS bounds the lags (10 s).
	maxLagS = 10.0
	// commandSubStepUs is the longest step taken with a command in effect:
	// the transition holds the mean road-wheel angle of each sub-step.
	commandSubStepUs = 10_000
)

// fill replaces zero fields with defaults and checks the ranges.
func (a *Actuator) fill() error {
	if a.DelayUs < 0 || a.DelayUs > maxCommandDelayUs {
		return fmt.Errorf("%w: Actuator.DelayUs = %d; use 0..%d", ErrConfig, a.DelayUs, maxCommandDelayUs)
	}
	for _, v := range []struct {
		name string
		p    *float64
		def  float64
	}{
		{"SteerLagS", &a.SteerLagS, 0},
		{"SpeedLagS", &a.SpeedLagS, 0},
		{"SteerRateNoiseRps", &a.SteerRateNoiseRps, DefaultCommandSteerRateNoiseRps},
		{"AccelNoiseMps2", &a.AccelNoiseMps2, DefaultCommandAccelNoiseMps2},
	} {
		if math.IsNaN(*v.p) || *v.p < 0 || *v.p > maxLagS*1e5 {
			return fmt.Errorf("%w: Actuator.%s = %v; use a finite value >= 0 (0 means default)", ErrConfig, v.name, *v.p)
		}
		if *v.p == 0 {
			*v.p = v.def
		}
	}
	if a.SteerLagS > maxLagS || a.SpeedLagS > maxLagS {
		return fmt.Errorf("%w: actuator lags %v s and %v s; use at most %v s", ErrConfig, a.SteerLagS, a.SpeedLagS, maxLagS)
	}
	if a.MaxCommands < 0 {
		return fmt.Errorf("%w: Actuator.MaxCommands = %d; use 0 (default) or a positive count", ErrConfig, a.MaxCommands)
	}
	if a.MaxCommands == 0 {
		a.MaxCommands = DefaultMaxCommands
	}
	return nil
}

// commandLog is a fixed-size ring of commands in send order.
type commandLog struct {
	buf  []Command
	head int
	n    int
}

func (l *commandLog) at(i int) *Command { return &l.buf[(l.head+i)%len(l.buf)] }

func (l *commandLog) push(c Command) {
	if l.n == len(l.buf) {
		l.head = (l.head + 1) % len(l.buf)
		l.n--
	}
	*l.at(l.n) = c
	l.n++
}

// inEffect returns the index of the newest command in effect at tUs (sent
// at or before tUs − delayUs), or -1.
func (l *commandLog) inEffect(tUs, delayUs int64) int {
	lo, hi := 0, l.n
	for lo < hi {
		mid := int(uint(lo+hi) >> 1)
		if diffUs(tUs, l.at(mid).TimeUs) < delayUs {
			hi = mid
		} else {
			lo = mid + 1
		}
	}
	return lo - 1
}

// AddCommand feeds one operator command (ModelBicycle only; other models
// keep it unused). From TimeUs + Actuator.DelayUs until the next command
// takes effect, every prediction step follows it through the actuator lags
// (see Actuator) instead of holding the road-wheel angle and the speed;
// telemetry keeps correcting the state as before. Samples already applied
// after the command took effect are re-filtered.
//
// The command is rejected with a *RejectError (Command true), counted in
// CommandsRejected and leaves the filter unchanged if a value is NaN or
// ±Inf, beyond MaxSteerRad, MaxSpeedMps, MaxAccelMps2 or MaxAbsTimeUs in
// magnitude, or if TimeUs is not after the previous accepted command's
// (ErrOutOfOrder).
func (f *Filter) AddCommand(c Command) error {
	f.mu.Lock()
	defer f.mu.Unlock()
	s := Sample{TimeUs: c.TimeUs, SteerRad: c.SteerRad, SpeedMps: c.SpeedMps, AccelMps2: c.AccelMps2}
	if r, detail := validate(&s); r != ReasonInvalid {
		return f.rejectCommand(r, c, detail)
	}
	if f.cmds.n > 0 {
		if prev := f.cmds.at(f.cmds.n - 1).TimeUs; c.TimeUs <= prev {
			return f.rejectCommand(ReasonOutOfOrder, c, fmt.Sprintf(
				"not after the previous command (t_us=%d); send commands in order from one station clock", prev))
		}
	}
	f.cmds.push(c)
	if f.cfg.Model != ModelBicycle || f.hist.len() == 0 {
		return nil
	}
	// Telemetry already applied after the command took effect was filtered
	// without it.
	eff := c.TimeUs + f.cfg.Actuator.DelayUs
	if i := f.lastAtOrBefore(eff) + 1; i < f.hist.len() {
		f.refilter(i)
	}
	return nil
}

// CommandsRejected returns how many commands AddCommand has rejected, per
// reason, since New.
func (f *Filter) CommandsRejected() Counts {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.cmdCounts
}

func (f *Filter) rejectCommand(r Reason, c Command, detail string) error {
	switch r {
	case ReasonNotFinite:
		f.cmdCounts.NotFinite++
	case ReasonOutOfRange:
		f.cmdCounts.OutOfRange++
	case ReasonOutOfOrder:
		f.cmdCounts.OutOfOrder++
	}
	return &RejectError{Reason: r, Sample: Sample{TimeUs: c.TimeUs}, Detail: detail, Command: true}
}

// commandsUsable reports whether prediction steps may follow commands.
func (f *Filter) commandsUsable() bool { return f.cfg.Model == ModelBicycle && f.cmds.n > 0 }

// commandSteps predicts f.kf from t0Us over dtUs: in pieces split where a
// command takes effect and at most commandSubStepUs long; a piece with no
// command in effect yet is a plain step with the control of ctl.
func (f *Filter) commandSteps(t0Us, dtUs int64, ctl *Sample, wrap bool) {
	delay := f.cfg.Actuator.DelayUs
	end := t0Us + dtUs
	for t := t0Us; t < end; {
		i := f.cmds.inEffect(t, delay)
		next := end
		if i+1 < f.cmds.n {
			next = min(next, f.cmds.at(i+1).TimeUs+delay)
		}
		if i < 0 {
			f.plainStep(next-t, ctl, wrap)
			t = next
			continue
		}
		next = min(next, t+commandSubStepUs)
		f.commandStep(next-t, f.cmds.at(i), ctl, wrap)
		t = next
	}
}

// commandStep predicts f.kf over dtUs (> 0) with command c in effect.
// In Relative the yaw also turns at the slip rate the telemetry showed up
// to the step's start (slipTrend): between kept samples as over a gap,
// since the yaw-rate measurements correct the road-wheel angle only
// weakly (KinematicNoiseRps) and the integrated heading would otherwise
// miss the slip over every interval Relative spans, the upright
// estimate's 200 ms baseline between real frames included.
//
// The road-wheel angle follows its lag exactly, δ' = δc + (δ − δc)·e with
// e = exp(−dt/SteerLagS); the pose advances with the mean angle over the
// step, δc + (δ − δc)·(1 − e)·SteerLagS/dt. With a commanded speed the
// speed follows its lag exactly, applied as the constant acceleration
// (vc − v)(1 − e_v)/dt (so the pose uses the mean speed (v + v')/2); else a
// commanded acceleration, else the sample's, as in a plain step.
func (f *Filter) commandStep(dtUs int64, c *Command, ctl *Sample, wrap bool) {
	dt := float64(dtUs) * 1e-6
	act := &f.cfg.Actuator
	var x, xn [StateDim]float64
	var fj, q [StateDim][StateDim]float64
	var g [StateDim][2]float64
	copy(x[:], f.kf.x.RawVector().Data)

	d0 := x[IdxTurn]
	eS, kS := lagFactors(dt, act.SteerLagS)
	x[IdxTurn] = c.SteerRad + (d0-c.SteerRad)*kS

	accel, kV, eV := 0.0, 1.0, 1.0
	switch {
	case c.HasSpeed:
		eV, _ = lagFactors(dt, act.SpeedLagS)
		accel = (c.SpeedMps - x[IdxSpeed]) * (1 - eV) / dt
		kV = (1 + eV) / 2
	case c.HasAccel:
		accel = c.AccelMps2
	case ctl.HasAccel:
		accel = ctl.AccelMps2
	}
	f.kin.transition(&x, dt, accel, &xn, &fj, &g)
	xn[IdxTurn] = c.SteerRad + (d0-c.SteerRad)*eS
	for _, r := range []int{IdxX, IdxY, IdxYaw} {
		fj[r][IdxTurn] *= kS
		fj[r][IdxSpeed] *= kV
	}
	fj[IdxTurn][IdxTurn] = eS
	if c.HasSpeed {
		fj[IdxSpeed][IdxSpeed] = eV
	}
	xn[IdxYaw] += f.gapSlipRps * dt
	processNoise(&g, act.AccelNoiseMps2, act.SteerRateNoiseRps, &q)
	f.predictWith(&xn, &fj, &q, wrap)
}

// lagFactors returns, for a first-order lag of time constant tauS over dtS,
// the decay e = exp(−dt/τ) and the mean weight (1 − e)·τ/dt of the start
// value over the step (both 0 for τ = 0: the actuator follows at once).
func lagFactors(dtS, tauS float64) (e, mean float64) {
	if tauS <= 0 {
		return 0, 0
	}
	r := dtS / tauS
	e = math.Exp(-r)
	if r < 1e-6 {
		return e, 1 - r/2
	}
	return e, -math.Expm1(-r) / r
}

// slipTrend returns the mean yaw rate the kinematic relation does not
// explain over the Config.TurnAdaptWindowUs ending at history entry last:
// measured yaw rate minus v·tan(δ)/L, with δ and v the posterior's. Tyre
// slip, understeer and a gyro bias change slowly, so Relative carries this
// mean over a gap driven by commands, which alone would miss it. 0 when no
// sample is in the window.
//
// The posterior's angle, not the sample's measured one: with commands in
// effect the posterior follows the commanded angle through the actuator lag
// and the measured angles only correct it, so it is far less noisy than one
// sample, whose noise the slope v/L turns into yaw rate (0.002 rad at
// 10 m/s and a 2.7 m wheelbase is 7 mrad/s per sample, more than the slip
// itself). On simdrive's default drive, commands with telemetry lost with
// the video, the mean misalignment of PREDICTED ticks fell from 0.95 to
// 0.56 mrad (bench.BenchmarkEvalSources).
func (f *Filter) slipTrend(last int) float64 {
	if last < 0 || last >= f.hist.len() {
		return 0
	}
	end := f.hist.at(last).s.TimeUs
	var sum float64
	n := 0
	for j := last; j >= 0; j-- {
		e := f.hist.at(j)
		if end-e.s.TimeUs > f.cfg.TurnAdaptWindowUs {
			break
		}
		d := e.x[IdxTurn]
		sum += e.s.YawRateRps - e.x[IdxSpeed]*math.Tan(d)/f.cfg.WheelbaseM
		n++
	}
	if n == 0 {
		return 0
	}
	return sum / float64(n)
}
