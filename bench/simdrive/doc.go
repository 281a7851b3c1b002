// Package simdrive generates a simulated drive: a vehicle follows a
// scripted kinematic trajectory through a procedurally built street, a
// pinhole camera on the vehicle renders every frame on the CPU with OpenCV,
// and the result is written as a recording directory (package
// stopgap/stream/recording) with noisy telemetry and exact ground truth.
//
// # Conventions
//
// World and vehicle axes follow ISO 8855: x forward, y left, z up; yaw is
// counter-clockwise seen from above, so a positive yaw rate turns left. The
// world frame equals the vehicle frame at t = 0. The vehicle origin is the
// rotation centre on the ground (rear-axle centre for the bicycle model).
//
// Camera axes follow OpenCV: x right, y down, z forward along the optical
// axis. The camera centre sits at (XOffsetM, YOffsetM, HeightM) in the
// vehicle frame. With zero angles the optical axis points along vehicle +x;
// PitchDeg > 0 tilts it down toward the road; RollDeg rotates the camera
// about its (pitched) optical axis, positive turning the camera's right side
// down. Pixel coordinates have the centre of the top-left pixel at (0, 0).
// No lens distortion is rendered (k1..k3, p1, p2 are written as 0).
//
// # Trajectory
//
// The scripted speed and path curvature (what the operator aims for; see
// Commands for how the vehicle actually gets there) are smooth functions
// of time:
//
//	v(t) = SpeedMps * (1 + 0.25 sin(2 pi t / 12 s))           accelerate 0-3 s, brake 3-9 s, ...
//	k(t) = (1 / 50 m) * sin(2 pi t / 14 s)                     left 0-7 s, right 7-14 s, left ...
//	yaw rate = v k,  dx/dt = v cos(yaw),  dy/dt = v sin(yaw)
//
// integrated with classical Runge-Kutta at 1 kHz (and a partial step to hit
// each capture time exactly), so truth.csv is the pose the frame was
// rendered from, to floating-point precision.
//
// # Commands
//
// Unless NoCommands is set, the vehicle is driven by an operator's
// commands, written to controls.csv (stream/operator.ControlsFile, operator
// "simulated", t_arrival_us = t_us: a station next to the relay on the
// drive's clock). Every 1/CommandHz (default 50 Hz) the operator sends the
// road-wheel angle and speed that make the actuators reproduce the
// scripted profile p after the delay D and through the lag τ,
// p(t + D) + τ·p'(t + D), plus corrections of its own (Ornstein-Uhlenbeck,
// 0.1 s correlation, OperatorSteerSigmaRad and OperatorSpeedSigmaMps).
// The vehicle then really follows those commands: after CommandDelayMs
// (default 120 ms) its road-wheel angle and speed approach them as
// first-order lags (SteerLagS 0.15 s, SpeedLagS 0.6 s by default), stepped
// exactly every 1 ms, and its yaw rate v·tan(δ)/L carries a tyre-slip
// disturbance the commands do not explain (Ornstein-Uhlenbeck, 0.5 s
// correlation, SlipYawRateSigmaRps 0.005 rad/s). Speed, curvature,
// acceleration, steering telemetry and truth all come from that response,
// so the drive is what the commands produced. The defaults are our choice
// of plausible values (cellular one-way delays of 50-150 ms, power
// steering and drive responses of a few tenths of a second, from memory),
// not measurements.
//
// # Telemetry noise
//
// Telemetry is sampled at TelemetryHz (default 100 Hz) on the same clock as
// the frames, with independent zero-mean Gaussian noise, seeded by Seed:
// speed sigma 0.05 m/s, yaw rate sigma 0.002 rad/s, acceleration sigma
// 0.05 m/s^2, steering sigma 0.002 rad (our chosen defaults for a plausible
// mid-grade vehicle bus and gyro, not measured values). Steering is the
// actuator's road-wheel angle (with NoCommands, the kinematic-bicycle angle
// atan(WheelbaseM * k) for the configured wheelbase, default 2.7 m).
//
// # Scene
//
// A two-lane road (3.5 m lanes, solid edge lines and a dashed centre line)
// follows the trajectory with the vehicle in the right lane, with kerb-side
// sidewalks, grass, roadside posts every 15 m on both sides, and building
// facades with windows a few metres beyond the sidewalk, with gaps. The
// ground is rasterised once into a world-aligned texture map (5 cm per
// texel by default) and rendered per frame by a perspective warp computed
// from four projected ground points, with a small image pyramid selected by
// distance band against aliasing; sky is a vertical gradient above the
// horizon; posts and facades are textured vertical quads drawn far to near
// after clipping to a near plane. Everything is deterministic for a seed.
//
// With Config.Traffic the street has moving road users (see placeTraffic),
// drawn as textured upright faces in the same painter's order, and each
// frame's exact mask of where they are visible is written to
// movers/NNNNNN.png (MoverMaskPath).
//
// Frames are JPEG at quality 92 by default (visually near-lossless at a
// fraction of PNG's size; the codec's own blocking is then part of the
// data, as with a real camera's compressed stream).
package simdrive
