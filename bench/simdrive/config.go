package simdrive

import (
	"fmt"
	"math"

	"stopgap/filter"
)

// Config describes a simulated drive. Zero fields take the documented
// defaults, so the zero Config is a valid 20 s, 1280x720, 30 fps drive.
type Config struct {
	Width, Height int     // image size in pixels; default 1280x720
	FPS           float64 // frame rate; default 30
	DurationS     float64 // drive length in seconds; default 20
	SpeedMps      float64 // mean speed in m/s; default 10
	Seed          int64   // seeds textures, layout and noise; 0 means 1
	TelemetryHz   float64 // telemetry sample rate; default 100

	// Telemetry noise standard deviations; 0 means the default, a negative
	// value means no noise on that channel.
	SpeedSigmaMps    float64 // default 0.05 m/s
	YawRateSigmaRps  float64 // default 0.002 rad/s
	AccelSigmaMps2   float64 // default 0.05 m/s^2
	SteerSigmaRad    float64 // default 0.002 rad
	WheelbaseM       float64 // for the steering column; default 2.7 m
	JPEGQuality      int     // 1..100; default 92
	GroundTexelM     float64 // ground map resolution in metres per texel; default 0.05
	CameraHeightM    float64 // default 1.4 m
	CameraPitchDeg   float64 // default 5 (down); use a tiny value such as 1e-9 for a level camera
	CameraXOffsetM   float64 // camera ahead of the vehicle origin; default 1.5 m
	HorizontalFOVDeg float64 // default 90; fx = fy = (Width/2) / tan(FOV/2)

	// FacadeSetbackM is the least distance of building fronts behind the
	// sidewalk (each front adds a random 0-6 m); default 8 m, a suburban
	// street with front gardens. Predicted frames move the ground and the
	// far scene only, so nearby vertical structures are what they get
	// wrong: use a small value (e.g. 1) for a narrow city street.
	FacadeSetbackM float64

	// PanYawRateRps, when not zero, adds a yaw rate of this amplitude
	// (rad/s) that reverses every half PanPeriodS on top of the curves: a
	// smoothed square wave, tanh(3 sin(2π t / PanPeriodS))/tanh(3), that
	// holds near ±PanYawRateRps and swings from -90 % to +90 % of it in
	// about a sixth of the period. A weaving drive whose camera pans left,
	// then right, to test predictions at reversals of the turn rate.
	// PanPeriodS defaults to 4 s (a reversal every 2 s).
	PanYawRateRps float64
	PanPeriodS    float64

	// Traffic adds moving road users (see placeTraffic: oncoming cars, a
	// car ahead, pedestrians walking along and jogging across the road)
	// and writes, per frame, the exact mask of where they are visible
	// (MoverMaskPath). Off by default: a drive without it is byte for
	// byte the drive of earlier versions.
	Traffic bool
	// The operator's commands (package documentation, "Commands"):
	// CommandHz is their rate (default 50 Hz), CommandDelayMs the uplink
	// delay from station to actuators (default 120 ms), SteerLagS and
	// SpeedLagS the actuators' first-order time constants (default 0.15 s
	// and 0.6 s; a negative value means none). OperatorSteerSigmaRad and
	// OperatorSpeedSigmaMps are the operator's own corrections on top of
	// what the script needs (defaults 0.01 rad and 0.1 m/s), and
	// SlipYawRateSigmaRps a yaw-rate disturbance the commands do not
	// explain (tyre slip; default 0.005 rad/s); negative means none.
	// NoCommands drives the scripted profile directly, with no commands
	// (as drives made before commands existed).
	CommandHz             float64
	CommandDelayMs        float64
	SteerLagS             float64
	SpeedLagS             float64
	OperatorSteerSigmaRad float64
	OperatorSpeedSigmaMps float64
	SlipYawRateSigmaRps   float64
	NoCommands            bool
}

// Defaults.
const (
	DefaultWidth         = 1280
	DefaultHeight        = 720
	DefaultFPS           = 30
	DefaultDurationS     = 20
	DefaultSpeedMps      = 10
	DefaultTelemetryHz   = 100
	DefaultSpeedSigma    = 0.05
	DefaultYawRateSigma  = 0.002
	DefaultAccelSigma    = 0.05
	DefaultSteerSigma    = 0.002
	DefaultWheelbaseM    = filter.DefaultWheelbaseM
	DefaultJPEGQuality   = 92
	DefaultGroundTexelM  = 0.05
	DefaultCameraHeightM = 1.4
	DefaultPitchDeg      = 5
	DefaultXOffsetM      = 1.5
	DefaultHFOVDeg       = 90
	DefaultSetbackM      = 8
	DefaultPanPeriodS    = 4
	// Command defaults: values from memory of common practice (cellular
	// one-way delays of 50-150 ms; electric power steering and drive
	// responses of a few tenths of a second), not measured on a vehicle.
	DefaultCommandHz        = 50
	DefaultCommandDelayMs   = 120
	DefaultSteerLagS        = 0.15
	DefaultSpeedLagS        = 0.6
	DefaultOperatorSteerRad = 0.01
	DefaultOperatorSpeedMps = 0.1
	DefaultSlipYawRateSigma = 0.005
)

// withDefaults returns c with zero fields replaced by defaults and checks
// the result.
func (c Config) withDefaults() (Config, error) {
	setI := func(v *int, d int) {
		if *v == 0 {
			*v = d
		}
	}
	setF := func(v *float64, d float64) {
		if *v == 0 {
			*v = d
		}
	}
	setI(&c.Width, DefaultWidth)
	setI(&c.Height, DefaultHeight)
	setF(&c.FPS, DefaultFPS)
	setF(&c.DurationS, DefaultDurationS)
	setF(&c.SpeedMps, DefaultSpeedMps)
	if c.Seed == 0 {
		c.Seed = 1
	}
	setF(&c.TelemetryHz, DefaultTelemetryHz)
	setF(&c.SpeedSigmaMps, DefaultSpeedSigma)
	setF(&c.YawRateSigmaRps, DefaultYawRateSigma)
	setF(&c.AccelSigmaMps2, DefaultAccelSigma)
	setF(&c.SteerSigmaRad, DefaultSteerSigma)
	setF(&c.WheelbaseM, DefaultWheelbaseM)
	setI(&c.JPEGQuality, DefaultJPEGQuality)
	setF(&c.GroundTexelM, DefaultGroundTexelM)
	setF(&c.CameraHeightM, DefaultCameraHeightM)
	setF(&c.CameraPitchDeg, DefaultPitchDeg)
	setF(&c.CameraXOffsetM, DefaultXOffsetM)
	setF(&c.HorizontalFOVDeg, DefaultHFOVDeg)
	setF(&c.FacadeSetbackM, DefaultSetbackM)
	setF(&c.PanPeriodS, DefaultPanPeriodS)
	setF(&c.CommandHz, DefaultCommandHz)
	setF(&c.CommandDelayMs, DefaultCommandDelayMs)
	setF(&c.SteerLagS, DefaultSteerLagS)
	setF(&c.SpeedLagS, DefaultSpeedLagS)
	setF(&c.OperatorSteerSigmaRad, DefaultOperatorSteerRad)
	setF(&c.OperatorSpeedSigmaMps, DefaultOperatorSpeedMps)
	setF(&c.SlipYawRateSigmaRps, DefaultSlipYawRateSigma)
	c.SteerLagS, c.SpeedLagS = sigma(c.SteerLagS), sigma(c.SpeedLagS)

	checks := []struct {
		ok   bool
		what string
	}{
		{c.Width >= 16 && c.Width <= 8192, "Width must be 16..8192 pixels"},
		{c.Height >= 16 && c.Height <= 8192, "Height must be 16..8192 pixels"},
		{finite(c.FPS) && c.FPS > 0 && c.FPS <= 1000, "FPS must be in (0, 1000]"},
		{finite(c.DurationS) && c.DurationS > 0 && c.DurationS <= 120, "DurationS must be in (0, 120] seconds (one ground map covers the drive)"},
		{finite(c.SpeedMps) && c.SpeedMps > 0 && c.SpeedMps <= 40, "SpeedMps must be in (0, 40] m/s"},
		{finite(c.TelemetryHz) && c.TelemetryHz > 0 && c.TelemetryHz <= 10000, "TelemetryHz must be in (0, 10000]"},
		{finite(c.SpeedSigmaMps) && finite(c.YawRateSigmaRps) && finite(c.AccelSigmaMps2) && finite(c.SteerSigmaRad), "noise sigmas must be finite"},
		{finite(c.WheelbaseM) && c.WheelbaseM > 0 && c.WheelbaseM < 20, "WheelbaseM must be in (0, 20) m"},
		{c.JPEGQuality >= 1 && c.JPEGQuality <= 100, "JPEGQuality must be 1..100"},
		{finite(c.GroundTexelM) && c.GroundTexelM >= 0.01 && c.GroundTexelM <= 1, "GroundTexelM must be in [0.01, 1] m"},
		{finite(c.CameraHeightM) && c.CameraHeightM >= 0.3 && c.CameraHeightM <= 10, "CameraHeightM must be in [0.3, 10] m"},
		{finite(c.CameraPitchDeg) && c.CameraPitchDeg > -30 && c.CameraPitchDeg < 60, "CameraPitchDeg must be in (-30, 60)"},
		{finite(c.CameraXOffsetM) && math.Abs(c.CameraXOffsetM) <= 10, "CameraXOffsetM must be within ±10 m"},
		{finite(c.HorizontalFOVDeg) && c.HorizontalFOVDeg >= 20 && c.HorizontalFOVDeg <= 150, "HorizontalFOVDeg must be in [20, 150]"},
		{finite(c.FacadeSetbackM) && c.FacadeSetbackM >= 0 && c.FacadeSetbackM <= 30, "FacadeSetbackM must be in [0, 30] m"},
		{finite(c.PanYawRateRps) && math.Abs(c.PanYawRateRps) <= 2, "PanYawRateRps must be within ±2 rad/s"},
		{finite(c.PanPeriodS) && c.PanPeriodS >= 0.5 && c.PanPeriodS <= 60, "PanPeriodS must be in [0.5, 60] s"},
		{finite(c.CommandHz) && c.CommandHz >= 1 && c.CommandHz <= 1000, "CommandHz must be in [1, 1000]"},
		{finite(c.CommandDelayMs) && c.CommandDelayMs >= 0 && c.CommandDelayMs <= 1000, "CommandDelayMs must be in [0, 1000]"},
		{finite(c.SteerLagS) && finite(c.SpeedLagS) && c.SteerLagS <= 5 && c.SpeedLagS <= 5, "SteerLagS and SpeedLagS must be at most 5 s"},
		{finite(c.OperatorSteerSigmaRad) && finite(c.OperatorSpeedSigmaMps) && finite(c.SlipYawRateSigmaRps), "command noise sigmas must be finite"},
	}
	for _, ch := range checks {
		if !ch.ok {
			return c, fmt.Errorf("%w: %s", ErrConfig, ch.what)
		}
	}
	return c, nil
}

// sigma maps the configured value to the effective standard deviation
// (negative means none).
func sigma(v float64) float64 { return math.Max(v, 0) }

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

// frameCount returns the number of frames: one at t = 0 and one every
// 1/FPS up to DurationS (exclusive).
func (c Config) frameCount() int { return int(math.Ceil(c.DurationS*c.FPS - 1e-9)) }

// captureUs returns the capture time of frame i, rounded to the microsecond.
func (c Config) captureUs(i int) int64 { return int64(math.Round(float64(i) * 1e6 / c.FPS)) }
