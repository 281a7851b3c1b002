package simdrive

import (
	"fmt"
	"math"
	"math/rand/v2"

	"stopgap/stream/operator"
)

// The operator's commands that produce the drive (see the package
// documentation, "Commands"): the scripted speed and road-wheel angle are
// what the vehicle should do; the commands are what an operator would send
// to make it do that through the uplink delay and the actuator lags, plus
// the operator's own small corrections; the vehicle then really follows the
// commands (delay, then first-order lags), and its yaw rate carries a small
// tyre-slip disturbance the commands do not explain.

// command is one operator command at its send time.
type command struct {
	TimeUs   int64
	SteerRad float64 // commanded road-wheel angle
	SpeedMps float64 // commanded speed
}

// actuation is the vehicle's response on the 1 ms integration grid.
type actuation struct {
	steer []float64 // road-wheel angle, rad
	speed []float64 // m/s
	accel []float64 // dv/dt, m/s^2
	slip  []float64 // yaw-rate disturbance, rad/s
	cmds  []command
}

// ouStep advances an Ornstein-Uhlenbeck process of stationary standard
// deviation sigma and correlation time tauS by hS with a standard normal
// draw n: exact discretisation.
func ouStep(x, sigma, tauS, hS, n float64) float64 {
	a := math.Exp(-hS / tauS)
	return a*x + sigma*math.Sqrt(1-a*a)*n
}

// Correlation times of the operator's corrections and of the slip
// disturbance: design choices of this project (a human's steering
// corrections have most of their power below 2 Hz).
const (
	operatorCorrS = 0.1
	slipCorrS     = 0.5
)

// actuate builds the commands for cfg from the scripted profile of tr and
// the vehicle's response to them, from t = 0 to the end of tr's span, and
// attaches the response to tr (which must not be integrated yet).
func actuate(tr *trajectory, cfg Config) *actuation {
	n := int(math.Ceil((cfg.DurationS+leadS)*1e6/float64(integStepUs))) + 1
	rng := rand.New(rand.NewPCG(uint64(cfg.Seed), 0xc0de))
	delayS := cfg.CommandDelayMs / 1000
	tauD, tauV := cfg.SteerLagS, cfg.SpeedLagS
	L := cfg.WheelbaseM
	steerP := func(t float64) float64 { return math.Atan(L * tr.CurvaturePM(t)) }
	const h = 1e-3
	// The command that makes a first-order lag of time constant tau follow
	// p after the delay: p(t + delay) + tau p'(t + delay).
	inverse := func(p func(float64) float64, tau, t float64) float64 {
		u := t + delayS
		return p(u) + tau*(p(u+h)-p(u-h))/(2*h)
	}
	periodUs := 1e6 / cfg.CommandHz
	var cmds []command
	var corrD, corrV float64
	// The first command is sent one period after the start (t_us > 0, as
	// the control log requires); until it arrives the vehicle follows the
	// profile (it was already driving).
	for k := 1; ; k++ {
		us := int64(math.Round(float64(k) * periodUs))
		if us > int64(n-1)*integStepUs {
			break
		}
		t := float64(us) * 1e-6
		hS := periodUs * 1e-6
		corrD = ouStep(corrD, sigma(cfg.OperatorSteerSigmaRad), operatorCorrS, hS, rng.NormFloat64())
		corrV = ouStep(corrV, sigma(cfg.OperatorSpeedSigmaMps), operatorCorrS, hS, rng.NormFloat64())
		cmds = append(cmds, command{TimeUs: us,
			SteerRad: inverse(steerP, tauD, t) + corrD,
			SpeedMps: inverse(tr.SpeedMps, tauV, t) + corrV})
	}
	a := &actuation{steer: make([]float64, n), speed: make([]float64, n), accel: make([]float64, n),
		slip: make([]float64, n), cmds: cmds}
	delayUs := int64(math.Round(cfg.CommandDelayMs * 1000))
	d, v, slip := steerP(0), tr.SpeedMps(0), 0.0
	hS := float64(integStepUs) * 1e-6
	lag := func(x, c, tau float64) float64 {
		if tau <= 0 {
			return c
		}
		return c + (x-c)*math.Exp(-hS/tau)
	}
	j := -1 // newest command in effect
	for k := range n {
		us := int64(k) * integStepUs
		for j+1 < len(cmds) && cmds[j+1].TimeUs+delayUs <= us {
			j++
		}
		cd, cv := steerP(float64(us)*1e-6), tr.SpeedMps(float64(us)*1e-6)
		if j >= 0 {
			cd, cv = cmds[j].SteerRad, cmds[j].SpeedMps
		}
		a.steer[k], a.speed[k], a.slip[k] = d, v, slip
		if tauV > 0 {
			a.accel[k] = (cv - v) / tauV
		}
		d, v = lag(d, cd, tauD), lag(v, cv, tauV)
		slip = ouStep(slip, sigma(cfg.SlipYawRateSigmaRps), slipCorrS, hS, rng.NormFloat64())
	}
	return a
}

// at interpolates a per-millisecond series linearly at t seconds, clamped
// to its span.
func at(s []float64, t float64) float64 {
	x := t * 1e6 / float64(integStepUs)
	if x <= 0 {
		return s[0]
	}
	k := int(x)
	if k >= len(s)-1 {
		return s[len(s)-1]
	}
	f := x - float64(k)
	return s[k] + f*(s[k+1]-s[k])
}

// simOperator is the operator name in a simulated drive's control log.
const simOperator = "simulated"

// writeCommands writes the commands sent up to the end of the drive to
// recDir/controls.csv (operator.ControlsFile). The simulated station sits
// next to the relay on the drive's clock: t_arrival_us = t_us.
func writeCommands(recDir string, cfg Config, tr *trajectory) error {
	if tr.act == nil {
		return nil
	}
	w, err := operator.CreateControls(recDir)
	if err != nil {
		return fmt.Errorf("simdrive: %w", err)
	}
	endUs := int64(math.Round(cfg.DurationS * 1e6))
	for _, c := range tr.act.cmds {
		if c.TimeUs > endUs {
			break
		}
		if err := w.Write(operator.Control{TUs: c.TimeUs, ArrivalUs: c.TimeUs, Operator: simOperator, SteerRad: c.SteerRad,
			SpeedMps: c.SpeedMps, HasSpeed: true}); err != nil {
			w.Close()
			return fmt.Errorf("simdrive: %w", err)
		}
	}
	if err := w.Close(); err != nil {
		return fmt.Errorf("simdrive: %w", err)
	}
	return nil
}
