// Package filter tracks planar vehicle motion from telemetry with an
// extended Kalman filter and answers "how did the vehicle move between two
// times, and how sure are we" for the frame predictor.
//
// # Units and axes
//
// SI units throughout; names carry them (TimeUs in microseconds on the
// vehicle clock, SpeedMps, YawRateRps, AccelMps2, SteerRad, WheelbaseM).
// Axes follow ISO 8855: x forward, y left, z up; yaw is counter-clockwise
// seen from above, so a positive yaw rate turns left. The vehicle reference
// point is the rotation centre on the ground (the rear-axle centre for the
// bicycle model).
//
// Poses from Predict are in an odometry frame: the vehicle frame at the
// first sample of the current track (after New, Reset or a gap longer than
// Config.MaxGapUs). Its absolute pose is dead reckoning and its covariance
// grows without bound; use Relative for motion over a gap, which does not
// depend on that frame.
//
// # Models
//
// Both models have a five-element state. The first four are x_m, y_m,
// yaw_rad, speed_mps. The fifth (IdxTurn) is
//
//	ModelCTRV:    yawrate_rps ω (constant turn rate and velocity)
//	ModelBicycle: steer_rad δ, with ω = v·tan(δ)/L, L = Config.WheelbaseM
//
// Over a step of dt seconds, with a = the acceleration of the sample that
// starts the step (0 without one), v_m = v + a·dt/2 and θ = ω·dt (ω from
// v_m for the bicycle):
//
//	x'   = x + v_m·dt·sinc(θ/2)·cos(yaw + θ/2)
//	y'   = y + v_m·dt·sinc(θ/2)·sin(yaw + θ/2)
//	yaw' = yaw + θ
//	v'   = v + a·dt
//	ω' = ω (CTRV),  δ' = δ (bicycle)
//
// with sinc(u) = sin(u)/u. For constant v this is exactly the closed form
// x' = x + (v/ω)(sin(yaw+θ) − sin yaw), y' = y + (v/ω)(cos yaw − cos(yaw+θ))
// of the CTRV model, written so that it is finite and continuous at ω = 0,
// where it is the straight line x' = x + v·dt·cos yaw. sinc and its
// derivative switch to their Taylor series for |θ/2| < 1e-2; the two
// branches agree to rounding error. With an acceleration the speed change is
// exact and the pose uses the mean speed v_m over the step. That is exact
// for the bicycle (constant curvature tan(δ)/L: the path is an arc of
// length v_m·dt) and exact for CTRV yaw; CTRV position is off by about
// |a·ω|·dt³/12 (9 µm for a 50 ms step, 9 mm for a 0.5 s extrapolation at
// a = 3 m/s², ω = 0.3 rad/s).
//
// The acceleration of a sample is a control input held from that sample to
// the next one (and, for Predict and Relative beyond the newest sample, to
// the requested time). Acceleration is not estimated: without a measured
// value the speed follows a random walk.
//
// Process noise is two random inputs, independent between steps and
// constant within a step (the discrete white noise model): longitudinal
// acceleration ν_a (Config.AccelNoiseMps2, or Config.AccelInputNoiseMps2
// when an acceleration is applied as control) and ν_t, a yaw acceleration
// for CTRV (Config.YawAccelNoiseRps2) or a steer rate for the bicycle
// (Config.SteerRateNoiseRps). Q = G·diag(σ_a², σ_t²)·Gᵀ with the
// first-order gain G below. A prediction from the newest sample to a later
// time is one step, so over a gap the unknown acceleration is taken as
// constant for the whole gap (speed-change variance σ_a²·T²), which suits
// the short gaps this package is for. The flip side of this model is that
// the noise injected between samples depends on the sample period.
//
//	G = [ dt²/2·cos(yaw+θ/2)  0
//	      dt²/2·sin(yaw+θ/2)  0
//	      0 | dt²/2·tanδ/L    dt²/2 | dt²/2·v_m·sec²δ/L   (CTRV | bicycle)
//	      dt                  0
//	      0                   dt ].
//
// # Commands
//
// With ModelBicycle the operator's commands (AddCommand: commanded
// road-wheel angle δc and speed vc, sent at TimeUs) are the control input.
// A command takes effect Actuator.DelayUs after it was sent; from then on
// each prediction step, split where a command takes effect and at most
// 10 ms long, moves the steer and speed states along first-order lags
// toward it instead of holding them:
//
//	δ' = δc + (δ − δc)·exp(−dt/τ_δ),   v' = vc + (v − vc)·exp(−dt/τ_v)
//
// exact for a command held over the step; the pose advances with the mean
// angle over the step and the mean speed (v + v')/2. The process noise of
// such steps is Actuator.SteerRateNoiseRps and AccelNoiseMps2. Telemetry
// corrects the state exactly as without commands. Over a gap the yaw also
// turns at the mean yaw rate the kinematic relation left unexplained in
// the last Config.TurnAdaptWindowUs of telemetry (tyre slip, understeer),
// held. The delay and the lags are properties of the vehicle and its link;
// FitActuator estimates them from a drive's commands and telemetry
// (commanded against measured yaw rate and speed).
//
// # Measurements
//
// Every sample measures speed (h = v) and yaw rate: h = ω for CTRV,
// h = v·tan(δ)/L for the bicycle (variance YawRateNoiseRps² +
// KinematicNoiseRps², the second term covering tyre slip). A steering angle
// is measured directly in the bicycle model (h = δ). In CTRV it becomes a
// pseudo-measurement of yaw rate z = v_s·tan(δ_s)/L built from the sample's
// own speed and steer, if Config.WheelbaseM is set (ignored otherwise), with
// its variance propagated from both inputs plus KinematicNoiseRps² and its
// covariance with the speed measurement. Updates use the Joseph form.
// After each bicycle update the steer estimate is clamped to ±1.4 rad so
// that tan(δ) stays finite.
//
// A sample whose Source is SourceVideo is ego-motion estimated from the
// video (predictor.EgoMotion) rather than measured on the vehicle: it
// measures speed (h = v) and yaw rate (h as above, without the kinematic
// term) with the sample's own SpeedStdMps and YawRateStdRps, and nothing
// else. Video and telemetry samples can be mixed in one track. A gap that
// follows a video sample is extrapolated with
// Config.VideoGapYawAccelNoiseRps2 instead of GapYawAccelNoiseRps2.
//
// # Time
//
// Samples may arrive late or out of order. The filter keeps the samples and
// posteriors of the last Config.HistoryUs; a late sample is inserted in time
// order and everything after it is re-filtered from the checkpoint before
// it. Older samples, invalid values and duplicates are rejected with a
// *RejectError and counted (Filter.Rejected); a rejected sample never
// changes the state.
//
// The generic Kalman core (Kalman) is exported so that plain linear filters
// can use the same, tested equations.
package filter
