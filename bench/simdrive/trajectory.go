package simdrive

import "math"

// Scenario constants (see the package documentation).
const (
	speedSwing     = 0.25        // relative speed amplitude
	speedPeriodS   = 12.0        // period of the speed swing
	curvatureMaxPM = 1.0 / 50    // peak path curvature, 1/m (50 m radius)
	curvePeriodS   = 14.0        // period of the left/right curve sequence
	integStepUs    = int64(1000) // integration step, 1 ms
	leadS          = 15.0        // trajectory integrated beyond the drive, for the road ahead
)

// pose is a planar vehicle pose in the world frame (ISO 8855 axes).
type pose struct {
	XM, YM float64 // vehicle origin, metres
	YawRad float64 // heading, counter-clockwise from world +x
}

// trajectory is the scripted motion: analytic speed and curvature profiles
// integrated on a fixed 1 ms grid.
type trajectory struct {
	meanSpeedMps float64
	grid         []pose  // grid[k] is the pose at k*integStepUs
	panRps       float64 // amplitude of the extra pan yaw rate (Config.PanYawRateRps)
	panPeriodS   float64
	// act, if set, is the vehicle's response to the operator's commands
	// (see commands.go); speed, acceleration and curvature then come from
	// it instead of the scripted profile.
	act        *actuation
	wheelbaseM float64
}

// newTrajectory integrates the profile from t = 0 to durationS + leadS.
func newTrajectory(meanSpeedMps, durationS float64) *trajectory {
	return newPanTrajectory(meanSpeedMps, durationS, 0, DefaultPanPeriodS)
}

// newPanTrajectory is newTrajectory with an extra yaw rate
// panRps·panWave(t / panPeriodS) (see Config.PanYawRateRps).
func newPanTrajectory(meanSpeedMps, durationS, panRps, panPeriodS float64) *trajectory {
	tr := &trajectory{meanSpeedMps: meanSpeedMps, panRps: panRps, panPeriodS: panPeriodS}
	tr.integrate(durationS)
	return tr
}

// newDriveTrajectory returns the trajectory of cfg (after defaults): the
// scripted profile, produced by the operator's commands unless
// cfg.NoCommands.
func newDriveTrajectory(cfg Config) *trajectory {
	if cfg.NoCommands {
		return newPanTrajectory(cfg.SpeedMps, cfg.DurationS, cfg.PanYawRateRps, cfg.PanPeriodS)
	}
	tr := &trajectory{meanSpeedMps: cfg.SpeedMps, panRps: cfg.PanYawRateRps, panPeriodS: cfg.PanPeriodS}
	act := actuate(tr, cfg)
	tr.act, tr.wheelbaseM = act, cfg.WheelbaseM
	tr.integrate(cfg.DurationS)
	return tr
}

// integrate fills the pose grid from t = 0 to durationS + leadS.
func (tr *trajectory) integrate(durationS float64) {
	n := int(math.Ceil((durationS+leadS)*1e6/float64(integStepUs))) + 1
	tr.grid = make([]pose, n)
	for k := 1; k < n; k++ {
		tr.grid[k] = tr.step(tr.grid[k-1], float64(int64(k-1)*integStepUs)*1e-6, float64(integStepUs)*1e-6)
	}
}

// SpeedMps returns the true longitudinal speed at time t (seconds).
func (tr *trajectory) SpeedMps(t float64) float64 {
	if tr.act != nil {
		return at(tr.act.speed, t)
	}
	return tr.meanSpeedMps * (1 + speedSwing*math.Sin(2*math.Pi*t/speedPeriodS))
}

// AccelMps2 returns the true longitudinal acceleration dv/dt at time t.
func (tr *trajectory) AccelMps2(t float64) float64 {
	if tr.act != nil {
		return at(tr.act.accel, t)
	}
	return tr.meanSpeedMps * speedSwing * 2 * math.Pi / speedPeriodS * math.Cos(2*math.Pi*t/speedPeriodS)
}

// CurvaturePM returns the path curvature (1/m, positive left) at time t.
func (tr *trajectory) CurvaturePM(t float64) float64 {
	if tr.act != nil {
		return math.Tan(at(tr.act.steer, t))/tr.wheelbaseM + at(tr.act.slip, t)/tr.SpeedMps(t)
	}
	k := curvatureMaxPM * math.Sin(2*math.Pi*t/curvePeriodS)
	if tr.panRps != 0 {
		k += tr.panRps * panWave(t/tr.panPeriodS) / tr.SpeedMps(t)
	}
	return k
}

// SteerRad returns the true front road-wheel angle at time t: the
// actuator's angle when the drive is commanded, else the kinematic-bicycle
// angle of the scripted curvature.
func (tr *trajectory) SteerRad(t, wheelbaseM float64) float64 {
	if tr.act != nil {
		return at(tr.act.steer, t)
	}
	return math.Atan(wheelbaseM * tr.CurvaturePM(t))
}

// YawRateRps returns the true yaw rate at time t.
func (tr *trajectory) YawRateRps(t float64) float64 { return tr.SpeedMps(t) * tr.CurvaturePM(t) }

// deriv is the kinematic model: d/dt (x, y, yaw).
func (tr *trajectory) deriv(p pose, t float64) pose {
	v := tr.SpeedMps(t)
	return pose{v * math.Cos(p.YawRad), v * math.Sin(p.YawRad), v * tr.CurvaturePM(t)}
}

// step advances p from t by h seconds with classical Runge-Kutta (RK4).
func (tr *trajectory) step(p pose, t, h float64) pose {
	add := func(a, d pose, s float64) pose {
		return pose{a.XM + s*d.XM, a.YM + s*d.YM, a.YawRad + s*d.YawRad}
	}
	k1 := tr.deriv(p, t)
	k2 := tr.deriv(add(p, k1, h/2), t+h/2)
	k3 := tr.deriv(add(p, k2, h/2), t+h/2)
	k4 := tr.deriv(add(p, k3, h), t+h)
	return pose{
		p.XM + h/6*(k1.XM+2*k2.XM+2*k3.XM+k4.XM),
		p.YM + h/6*(k1.YM+2*k2.YM+2*k3.YM+k4.YM),
		p.YawRad + h/6*(k1.YawRad+2*k2.YawRad+2*k3.YawRad+k4.YawRad),
	}
}

// PoseAt returns the pose at tUs microseconds: the grid pose at or before
// tUs advanced by one partial RK4 step. tUs is clamped to the integrated span.
func (tr *trajectory) PoseAt(tUs int64) pose {
	if tUs <= 0 {
		return tr.grid[0]
	}
	k := int(tUs / integStepUs)
	if k >= len(tr.grid)-1 {
		return tr.grid[len(tr.grid)-1]
	}
	rem := tUs - int64(k)*integStepUs
	if rem == 0 {
		return tr.grid[k]
	}
	return tr.step(tr.grid[k], float64(int64(k)*integStepUs)*1e-6, float64(rem)*1e-6)
}

// endUs returns the last integrated time.
func (tr *trajectory) endUs() int64 { return int64(len(tr.grid)-1) * integStepUs }

// panSharpness shapes panWave: tanh(3 sin)/tanh(3) goes from -0.9 to +0.9
// in about a sixth of the period.
const panSharpness = 3

// panWave is a smoothed square wave of period 1 in the phase p:
// tanh(k sin 2πp)/tanh(k), k = panSharpness. It holds near ±1 and reverses
// quickly, like a camera panning left, then right.
func panWave(p float64) float64 {
	return math.Tanh(panSharpness*math.Sin(2*math.Pi*p)) / math.Tanh(panSharpness)
}
