package filter

import (
	"fmt"
	"math"
	"strings"
)

// Model selects the motion model of a Filter. The zero value is invalid.
type Model int

// Motion models.
const (
	ModelInvalid Model = iota // zero value; rejected by New
	// ModelCTRV is constant turn rate and velocity, state
	// [x_m, y_m, yaw_rad, speed_mps, yawrate_rps].
	ModelCTRV
	// ModelBicycle is the kinematic bicycle referenced at the rear-axle
	// centre, state [x_m, y_m, yaw_rad, speed_mps, steer_rad], yaw rate
	// speed*tan(steer)/WheelbaseM.
	ModelBicycle
)

// String returns "ctrv", "bicycle", or "invalid".
func (m Model) String() string {
	switch m {
	case ModelCTRV:
		return "ctrv"
	case ModelBicycle:
		return "bicycle"
	}
	return "invalid"
}

// ParseModel parses the names produced by Model.String (case-insensitive,
// surrounding spaces ignored). It returns an error wrapping ErrUnknownModel
// for anything else, including "invalid".
func ParseModel(s string) (Model, error) {
	switch strings.ToLower(strings.TrimSpace(s)) {
	case "ctrv":
		return ModelCTRV, nil
	case "bicycle":
		return ModelBicycle, nil
	}
	return ModelInvalid, fmt.Errorf("%w: %q (use \"ctrv\" or \"bicycle\")", ErrUnknownModel, s)
}

// StateDim is the length of the state vector of both models.
const StateDim = 5

// Indices into State.Vec and State.Cov.
const (
	IdxX     = 0 // x_m, forward axis of the odometry frame
	IdxY     = 1 // y_m, left axis of the odometry frame
	IdxYaw   = 2 // yaw_rad, counter-clockwise from the odometry x axis
	IdxSpeed = 3 // speed_mps, longitudinal, negative when reversing
	// IdxTurn holds yawrate_rps for ModelCTRV and steer_rad for ModelBicycle.
	IdxTurn = 4
)

// Physical limits for sample validation. They are common-practice bounds
// for road vehicles, chosen well outside what a car can do so that only
// corrupted or mis-scaled values are rejected: 120 m/s is 432 km/h, 6 rad/s
// is about 344 deg/s, 30 m/s^2 is about 3 g, 1.2 rad is about 69 deg of
// road-wheel angle.
//
// MaxAbsTimeUs (about 146 000 years) only catches corrupted timestamps and
// keeps time arithmetic far from int64 overflow.
const (
	MaxAbsTimeUs  = int64(1) << 62
	MaxSpeedMps   = 120.0
	MaxYawRateRps = 6.0
	MaxAccelMps2  = 30.0
	MaxSteerRad   = 1.2
)

// steerClampRad bounds the bicycle steer estimate after each update so that
// tan(steer) stays finite (tan(1.4) ~ 5.8). It is a numerical guard beyond
// MaxSteerRad, not a physical limit.
const steerClampRad = 1.4

// sincSeriesBelow is |u| below which sinc and its derivative use their
// Taylor series. At u = 1e-2 the first omitted terms are below 1e-18.
const sincSeriesBelow = 1e-2

// sinc returns sin(u)/u, 1 at u = 0.
func sinc(u float64) float64 {
	if math.Abs(u) < sincSeriesBelow {
		u2 := u * u
		return 1 - u2/6*(1-u2/20*(1-u2/42))
	}
	return math.Sin(u) / u
}

// dsinc returns d/du sin(u)/u = (u cos u - sin u)/u^2, 0 at u = 0.
func dsinc(u float64) float64 {
	if math.Abs(u) < sincSeriesBelow {
		u2 := u * u
		return -u / 3 * (1 - u2/10*(1-u2/28))
	}
	return (u*math.Cos(u) - math.Sin(u)) / (u * u)
}

// kinematics holds what the transition and measurement functions need to
// know about the model.
type kinematics struct {
	model      Model
	wheelbaseM float64
	// Process noise standard deviations for the two noise inputs.
	accelNoise    float64 // speed channel, m/s^2 (when no accel control)
	accelCtlNoise float64 // speed channel, m/s^2 (when accel is a control)
	turnNoise     float64 // yaw accel rad/s^2 (CTRV) or steer rate rad/s (bicycle)
}

// transition evaluates one step of the discrete motion model of duration
// dtS seconds with longitudinal acceleration accel (0 when unknown) held
// constant over the step. It writes the next state to xn, the Jacobian
// ∂xn/∂x to fj and the noise gain g (xn changes by g·[ν_a, ν_turn] for
// piecewise-constant noise inputs over the step).
//
// Pose update (both models), with v_m = v + a·dt/2 the mean speed over the
// step, ω the turn rate, θ = ω·dt and sinc(u) = sin(u)/u:
//
//	x' = x + v_m·dt·sinc(θ/2)·cos(yaw + θ/2)
//	y' = y + v_m·dt·sinc(θ/2)·sin(yaw + θ/2)
//	yaw' = yaw + θ
//
// which equals the closed form x' = x + v/ω·(sin(yaw+θ) − sin yaw),
// y' = y + v/ω·(cos yaw − cos(yaw+θ)) and tends continuously to the straight
// line x' = x + v·dt·cos yaw as ω → 0.
func (k *kinematics) transition(x *[StateDim]float64, dtS, accel float64, xn *[StateDim]float64, fj *[StateDim][StateDim]float64, g *[StateDim][2]float64) {
	yaw, v, turn := x[IdxYaw], x[IdxSpeed], x[IdxTurn]
	vm := v + 0.5*accel*dtS

	// Turn rate and its partials w.r.t. speed and the turn state.
	var omega, dOmegaDv, dOmegaDturn float64
	var tanD, sec2D float64
	if k.model == ModelBicycle {
		tanD = math.Tan(turn)
		sec2D = 1 + tanD*tanD
		omega = vm * tanD / k.wheelbaseM
		dOmegaDv = tanD / k.wheelbaseM
		dOmegaDturn = vm * sec2D / k.wheelbaseM
	} else {
		omega = turn
		dOmegaDv = 0
		dOmegaDturn = 1
	}

	half := 0.5 * omega * dtS
	s, ds := sinc(half), dsinc(half)
	phi := yaw + half
	sn, c := math.Sincos(phi)
	d := vm * dtS

	xn[IdxX] = x[IdxX] + d*s*c
	xn[IdxY] = x[IdxY] + d*s*sn
	xn[IdxYaw] = yaw + omega*dtS
	xn[IdxSpeed] = v + accel*dtS
	xn[IdxTurn] = turn

	// Partials of the pose w.r.t. yaw, the mean speed (ω held) and ω.
	dxdYaw, dydYaw := -d*s*sn, d*s*c
	dxdVm, dydVm := dtS*s*c, dtS*s*sn
	dxdW := d * (ds*c - s*sn) * 0.5 * dtS
	dydW := d * (ds*sn + s*c) * 0.5 * dtS

	*fj = [StateDim][StateDim]float64{}
	for i := range StateDim {
		fj[i][i] = 1
	}
	fj[IdxX][IdxYaw] = dxdYaw
	fj[IdxY][IdxYaw] = dydYaw
	fj[IdxX][IdxSpeed] = dxdVm + dxdW*dOmegaDv
	fj[IdxY][IdxSpeed] = dydVm + dydW*dOmegaDv
	fj[IdxYaw][IdxSpeed] = dtS * dOmegaDv
	fj[IdxX][IdxTurn] = dxdW * dOmegaDturn
	fj[IdxY][IdxTurn] = dydW * dOmegaDturn
	fj[IdxYaw][IdxTurn] = dtS * dOmegaDturn

	// Noise gain: ν_a is a constant longitudinal acceleration over the step,
	// ν_turn a constant yaw acceleration (CTRV) or steer rate (bicycle).
	h2 := 0.5 * dtS * dtS
	*g = [StateDim][2]float64{}
	g[IdxX][0] = h2 * c
	g[IdxY][0] = h2 * sn
	g[IdxSpeed][0] = dtS
	g[IdxTurn][1] = dtS
	if k.model == ModelBicycle {
		g[IdxYaw][0] = h2 * tanD / k.wheelbaseM
		g[IdxYaw][1] = h2 * vm * sec2D / k.wheelbaseM
	} else {
		g[IdxYaw][1] = h2
	}
}

// processNoise fills q = g·diag(sa², st²)·gᵀ.
func processNoise(g *[StateDim][2]float64, sa, st float64, q *[StateDim][StateDim]float64) {
	va, vt := sa*sa, st*st
	for i := range StateDim {
		for j := range StateDim {
			q[i][j] = g[i][0]*g[j][0]*va + g[i][1]*g[j][1]*vt
		}
	}
}

// yawRate returns the yaw rate of state x (rad/s).
func (k *kinematics) yawRate(x *[StateDim]float64) float64 {
	if k.model == ModelBicycle {
		return x[IdxSpeed] * math.Tan(x[IdxTurn]) / k.wheelbaseM
	}
	return x[IdxTurn]
}

// maxMeas is the largest number of scalar measurements one sample yields.
const maxMeas = 3

// measurement is one linearised measurement set: z ≈ h(x) + H·(x − x̂) + v,
// v ~ N(0, R).
type measurement struct {
	m  int
	z  [maxMeas]float64
	hx [maxMeas]float64
	h  [maxMeas][StateDim]float64
	r  [maxMeas][maxMeas]float64
}

// measNoise holds measurement noise standard deviations.
type measNoise struct {
	speed, yawRate, steer, kinematic float64
}

// measure builds the measurement set for sample s at prior state x.
//
// Both models measure speed (h = v) and yaw rate. CTRV: h = ω; if the
// sample has a steering angle and the wheelbase is known, a pseudo
// measurement of yaw rate z = v_s·tan(δ_s)/L (from the sample's speed and
// steer) is added with variance from both inputs plus the kinematic model
// error, and its covariance with the speed measurement. Bicycle: h = v·tan(δ)/L
// with variance yawRate² + kinematic², and h = δ for a measured steer angle.
//
// A SourceVideo sample measures speed and yaw rate with its own standard
// deviations (no kinematic term: the video sees the yaw rate itself) and
// nothing else.
func (k *kinematics) measure(s *Sample, x *[StateDim]float64, n *measNoise, out *measurement) {
	*out = measurement{}
	if s.Source == SourceVideo {
		out.m = 2
		out.z[0], out.hx[0] = s.SpeedMps, x[IdxSpeed]
		out.h[0][IdxSpeed] = 1
		out.r[0][0] = s.SpeedStdMps * s.SpeedStdMps
		out.z[1], out.hx[1] = s.YawRateRps, k.yawRate(x)
		if k.model == ModelBicycle {
			t := math.Tan(x[IdxTurn])
			out.h[1][IdxSpeed] = t / k.wheelbaseM
			out.h[1][IdxTurn] = x[IdxSpeed] * (1 + t*t) / k.wheelbaseM
		} else {
			out.h[1][IdxTurn] = 1
		}
		out.r[1][1] = s.YawRateStdRps * s.YawRateStdRps
		return
	}
	out.z[0] = s.SpeedMps
	out.hx[0] = x[IdxSpeed]
	out.h[0][IdxSpeed] = 1
	out.r[0][0] = n.speed * n.speed
	out.z[1] = s.YawRateRps
	out.m = 2
	switch k.model {
	case ModelBicycle:
		t := math.Tan(x[IdxTurn])
		l := k.wheelbaseM
		out.hx[1] = x[IdxSpeed] * t / l
		out.h[1][IdxSpeed] = t / l
		out.h[1][IdxTurn] = x[IdxSpeed] * (1 + t*t) / l
		out.r[1][1] = n.yawRate*n.yawRate + n.kinematic*n.kinematic
		if s.HasSteer {
			out.z[2] = s.SteerRad
			out.hx[2] = x[IdxTurn]
			out.h[2][IdxTurn] = 1
			out.r[2][2] = n.steer * n.steer
			out.m = 3
		}
	default:
		out.hx[1] = x[IdxTurn]
		out.h[1][IdxTurn] = 1
		out.r[1][1] = n.yawRate * n.yawRate
		if s.HasSteer && k.wheelbaseM > 0 {
			l := k.wheelbaseM
			t := math.Tan(s.SteerRad)
			out.z[2] = s.SpeedMps * t / l
			out.hx[2] = x[IdxTurn]
			out.h[2][IdxTurn] = 1
			dv := t / l                      // ∂z/∂v_s
			dd := s.SpeedMps * (1 + t*t) / l // ∂z/∂δ_s
			out.r[2][2] = dv*dv*n.speed*n.speed + dd*dd*n.steer*n.steer + n.kinematic*n.kinematic
			out.r[0][2] = dv * n.speed * n.speed
			out.r[2][0] = out.r[0][2]
			out.m = 3
		}
	}
}
