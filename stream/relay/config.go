package relay

import (
	"fmt"
	"log/slog"
	"math"
	"time"

	"stopgap/filter"
	"stopgap/predictor"
	"stopgap/stream/console"
	"stopgap/stream/vp8"
	"stopgap/stream/whip"
)

// Defaults applied by New for zero Config fields.
const (
	// DefaultFPS is the nominal frame rate of the vehicle's camera.
	DefaultFPS = 30
	// DefaultAllowanceMs is the display clock's jitter allowance, the same
	// value as the offline replay's default (a design choice of this
	// project: about two thirds of a frame period at 30 fps).
	DefaultAllowanceMs = 20
	// LatencyFrames is how many frames of a session the latency estimate
	// (median of arrival - capture) is taken over before it is frozen.
	LatencyFrames = 15
	// DefaultKeyframeRetry is how often a keyframe request is repeated while
	// the decoder waits for a keyframe (common receiver practice).
	DefaultKeyframeRetry = 200 * time.Millisecond
	// DefaultFrameQueue is how many decoded frames may wait for the display
	// loop; beyond it frames are dropped and counted. Eight frames are
	// 267 ms at 30 fps: a gap's first PREDICTED tick (about 0.1 s of CPU
	// at 1280x720, several times that in wall time when four relays share
	// two cores) must not make the frames decoded meanwhile drop, since
	// every dropped frame is a tick the relay fills itself, which ends
	// pass-through and costs the next gap. Each waiting frame is an I420
	// picture (1.4 MB at 1280x720) and, once converted, a BGR one.
	DefaultFrameQueue = 8
	// DefaultTelemetryQueue is how many telemetry samples may wait for the
	// display loop; beyond it samples are dropped and counted.
	DefaultTelemetryQueue = 256
	// DefaultRecordQuality is the JPEG quality of recorded frames.
	DefaultRecordQuality = 90
	// DefaultPendingRecordUs bounds how long (receiver clock) a tick's
	// recording row waits for its frame: after 2 s it is written as never
	// arrived.
	DefaultPendingRecordUs = 2_000_000
)

// Config configures a Relay. Zero values select the documented defaults;
// Camera, IngestToken and ConsoleToken are required.
type Config struct {
	// FPS is the vehicle camera's nominal frame rate (default DefaultFPS).
	// The display tick period is 1/FPS.
	FPS float64
	// AllowanceMs is how late after its nominal arrival a frame may still
	// come and be LIVE, ms (default DefaultAllowanceMs; negative is an
	// error).
	AllowanceMs float64
	// LatencyMs is the nominal capture-to-arrival latency L in ms (receiver
	// clock minus vehicle clock). 0 = estimate it per session (see the
	// package documentation).
	LatencyMs float64

	// Camera is the vehicle camera (required, complete with its mount): read
	// it with ReadCameraFile, or take a recording's Camera as it is.
	Camera predictor.Camera
	// Policy gives MaxAgeMs (0 = predictor.DefaultMaxAgeMs). Its cutoff is
	// ignored: each tick uses the console's Cutoff().
	Policy predictor.Policy
	// Filter configures the motion filter; a zero Model means CTRV.
	Filter filter.Config
	// VideoMotion feeds the filter also with the vehicle's motion estimated
	// from each decoded frame against the one before it (predictor.EgoMotion,
	// filter.SourceVideo samples): for vehicles that send no telemetry, or
	// to keep the filter informed while telemetry is lost and video is not.
	// It costs about one bare warp of the frame per frame.
	VideoMotion bool

	// RecordDir, if not empty, is a new directory the relay records the
	// drive into (see the package documentation of stopgap/stream/recording,
	// plus shown.csv with what the relay showed).
	RecordDir string
	// RecordQuality is the JPEG quality 1..100 of recorded frames (default
	// DefaultRecordQuality).
	RecordQuality int

	// Encoder configures the egress VP8 encoder; Width and Height are taken
	// from Camera and FrameRateHz from FPS when zero.
	Encoder vp8.EncoderConfig
	// AlwaysTranscode sends every frame through the relay's encoder, LIVE
	// frames too, so the console gets one encoder's stream at the
	// Encoder's bitrate. The default (false) is pass-through: LIVE frames
	// are forwarded as the vehicle sent them, as soon as each is complete
	// and its VP8 header checks out, and the encoder only makes PREDICTED
	// and STALE frames and bridges to the vehicle's next keyframe (see
	// stopgap/stream/passthru).
	AlwaysTranscode bool

	// IngestToken is the WHIP bearer token (required; at least
	// console.MinTokenLen characters). Never logged.
	IngestToken string
	// ConsoleToken is the console's and /metrics' bearer token (required; at
	// least console.MinTokenLen characters). Never logged.
	ConsoleToken string
	// Console configures the operator console; Token, KeyframeNeeded and
	// Logger are set by New.
	Console console.Config
	// Whip configures the ingest server; Token, OnSession, Logger and Clock
	// are set by New.
	Whip whip.Config

	// KeyframeRetry is the keyframe request repeat interval (default
	// DefaultKeyframeRetry).
	KeyframeRetry time.Duration
	// FrameQueue and TelemetryQueue bound the queues between the ingest and
	// the display loop (defaults DefaultFrameQueue, DefaultTelemetryQueue).
	FrameQueue, TelemetryQueue int

	// Logger receives JSON-able structured logs (default slog.Default()).
	Logger *slog.Logger
	// Now is the receiver clock (default time.Now).
	Now func() time.Time
	// DrawOverdue draws every missing tick, however far behind its
	// deadline the display loop is. By default (false) a tick whose
	// deadline passed more than a period ago when it is filled is decided
	// and recorded but not drawn (NOT_SHOWN, counted in Stats.Overruns):
	// its picture would reach the viewer after its successor was due, and
	// drawing it would keep a relay on a busy machine behind. Nor is a
	// tick without a frame drawn while a newer real frame already waits
	// for the display loop (NOT_SHOWN, metric
	// stopgap_ticks_not_drawn_frame_waiting_total), nor sent a frame of
	// the relay's own that shows an earlier instant than a frame already
	// passed through (passthru.Gate.BeginOwnShowing). A test whose Now
	// runs faster than real time and fills ticks in batches sets it: its
	// ingest runs ahead of the display loop by design.
	DrawOverdue bool
	// NewTimer makes the display loop's deadline timer (default: a
	// time.Timer). Tests inject a fake.
	NewTimer func(d time.Duration) Timer
}

// Timer is the deadline timer of the display loop. *time.Timer satisfies it
// through the adapter used by default.
type Timer interface {
	// C delivers the time when the timer fires.
	C() <-chan time.Time
	// Reset re-arms the timer to fire after d (like time.Timer.Reset).
	Reset(d time.Duration)
	// Stop stops the timer (like time.Timer.Stop).
	Stop() bool
}

type stdTimer struct{ t *time.Timer }

func (s stdTimer) C() <-chan time.Time   { return s.t.C }
func (s stdTimer) Reset(d time.Duration) { s.t.Reset(d) }
func (s stdTimer) Stop() bool            { return s.t.Stop() }

func newStdTimer(d time.Duration) Timer { return stdTimer{time.NewTimer(d)} }

// withDefaults validates c and fills the defaults.
func (c Config) withDefaults() (Config, error) {
	bad := func(field, why string) (Config, error) {
		return c, fmt.Errorf("%w: %s: %s", ErrBadConfig, field, why)
	}
	if c.FPS == 0 {
		c.FPS = DefaultFPS
	}
	if !(c.FPS > 0 && c.FPS <= 240) {
		return bad("FPS", "must be in (0, 240]")
	}
	if c.AllowanceMs == 0 {
		c.AllowanceMs = DefaultAllowanceMs
	}
	if !(c.AllowanceMs >= 0) || math.IsInf(c.AllowanceMs, 0) {
		return bad("AllowanceMs", "must be a finite number >= 0")
	}
	if math.IsNaN(c.LatencyMs) || math.IsInf(c.LatencyMs, 0) || math.Abs(c.LatencyMs) > 1e9 {
		return bad("LatencyMs", "must be finite (0 = estimate)")
	}
	if err := c.Camera.Validate(); err != nil {
		return c, fmt.Errorf("%w: Camera: %w; check camera.json", ErrBadConfig, err)
	}
	if c.Policy.MaxAgeMs == 0 {
		c.Policy.MaxAgeMs = predictor.DefaultMaxAgeMs
	}
	c.Policy.CutoffConfidence = predictor.DefaultCutoffConfidence
	if err := c.Policy.Validate(); err != nil {
		return c, fmt.Errorf("%w: Policy: %w", ErrBadConfig, err)
	}
	if c.Filter.Model == filter.ModelInvalid {
		c.Filter.Model = filter.ModelCTRV
	}
	if c.RecordQuality == 0 {
		c.RecordQuality = DefaultRecordQuality
	}
	if c.RecordQuality < 1 || c.RecordQuality > 100 {
		return bad("RecordQuality", "must be in 1..100")
	}
	if c.Encoder.Width == 0 && c.Encoder.Height == 0 {
		c.Encoder.Width, c.Encoder.Height = c.Camera.Width, c.Camera.Height
	}
	if c.Encoder.Width != c.Camera.Width || c.Encoder.Height != c.Camera.Height {
		return bad("Encoder", "Width and Height must equal the camera's (or be zero)")
	}
	if c.Encoder.FrameRateHz == 0 {
		c.Encoder.FrameRateHz = c.FPS
	}
	if len(c.IngestToken) < console.MinTokenLen {
		return bad("IngestToken", fmt.Sprintf("must be at least %d characters; generate one with console.NewToken", console.MinTokenLen))
	}
	if len(c.ConsoleToken) < console.MinTokenLen {
		return bad("ConsoleToken", fmt.Sprintf("must be at least %d characters; generate one with console.NewToken", console.MinTokenLen))
	}
	if c.KeyframeRetry == 0 {
		c.KeyframeRetry = DefaultKeyframeRetry
	}
	if c.KeyframeRetry < 0 {
		return bad("KeyframeRetry", "must be > 0")
	}
	if c.FrameQueue == 0 {
		c.FrameQueue = DefaultFrameQueue
	}
	if c.TelemetryQueue == 0 {
		c.TelemetryQueue = DefaultTelemetryQueue
	}
	if c.FrameQueue < 1 || c.TelemetryQueue < 1 {
		return bad("FrameQueue/TelemetryQueue", "must be >= 1")
	}
	if c.Logger == nil {
		c.Logger = slog.Default()
	}
	if c.Now == nil {
		c.Now = time.Now
	}
	if c.NewTimer == nil {
		c.NewTimer = newStdTimer
	}
	return c, nil
}

// periodUs returns the tick period in microseconds.
func (c Config) periodUs() float64 { return 1e6 / c.FPS }
