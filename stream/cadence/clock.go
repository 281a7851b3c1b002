package cadence

import (
	"errors"
	"fmt"

	"stopgap/filter"
	"stopgap/internal/display"
)

// LatencyFrames is how many frames of a session the latency estimate takes
// its median over before it is frozen.
const LatencyFrames = 15

// ErrBadClock reports a ClockConfig the Clock cannot run with.
var ErrBadClock = errors.New("cadence: invalid display clock configuration")

// MaxPendingTelemetry bounds the samples waiting for their tick (40 s of
// 100 Hz telemetry); beyond it samples go to the filter at once.
const MaxPendingTelemetry = 4096

// ClockConfig configures a Clock. PeriodUs is required; the zero value of every
// other field is a valid choice described beside it.
type ClockConfig struct {
	// PeriodUs is the nominal frame period, µs (> 0): the grid's starting
	// period, which then follows the sender (cadence.Grid).
	PeriodUs float64
	// AllowanceUs is the jitter allowance past a frame's nominal arrival,
	// µs (>= 0).
	AllowanceUs int64
	// FixedLatency, when set, makes LatencyUs the nominal latency L for
	// the whole session; otherwise L is estimated (see the package doc)
	// and LatencyUs is ignored.
	FixedLatency bool
	// LatencyUs is the fixed nominal latency, µs (receiver clock minus
	// vehicle clock; may be negative when the clocks are offset).
	LatencyUs int64
	// Policy holds the age cap, and the cutoff used when Cutoff is nil.
	Policy display.Policy
	// Cutoff, if not nil, is read once per tick, just before the tick is
	// decided, with the tick's index; its value becomes Tick.Policy's
	// cutoff. A value outside [0, 1] is refused (counted in
	// Stats.CutoffsRefused) and the previous cutoff kept.
	Cutoff func(k int) float64
	// HistoryUs is the filter's history window (filter.ClockConfig.HistoryUs):
	// a telemetry sample that arrives more than this after it was taken
	// (vehicle time plus L), once L is frozen and the timeline is on the
	// vehicle clock, is dropped. 0 never drops.
	HistoryUs int64
	// Schedule, if not nil, is a schedule recorded by a live session: when
	// it returns ok, tick k's target and deadline are these instead of the
	// rule's (a replay of a session whose early frames, before the switch
	// to the vehicle clock, are not in the recording). Nil: the rule.
	Schedule func(k int) (targetUs, deadlineUs int64, ok bool)
	// VehicleClock says capture times are on the vehicle clock from the
	// start (a recording); a live session says so later with
	// UseVehicleClock.
	VehicleClock bool
}

// Tick is one display tick as the Clock decided it.
type Tick struct {
	// K is the tick's index: 0 for the session's first frame (or the
	// index a driver gave with FrameAt).
	K int
	// TargetUs is g_k, the tick's time on the display grid (vehicle
	// clock): the time a missing tick's frame is predicted for.
	TargetUs int64
	// DeadlineUs is d_k on the receiver clock.
	DeadlineUs int64
	// Policy is the policy the tick is decided with: the age cap and the
	// cutoff read for this tick. Drivers record this cutoff.
	Policy display.Policy
}

// Handler receives the Clock's instructions, in order, on the caller's
// goroutine. Both methods are called from Frame, Advance, FillThrough or
// Telemetry.
type Handler interface {
	// Telemetry hands one sample to the motion filter. arrivalUs is the
	// receiver time the display had it by (a sample that reached the
	// display after ticks it could have served were decided is moved to
	// just after the last of them), the time a recording keeps.
	Telemetry(s filter.Sample, arrivalUs int64)
	// Missing fills tick t, whose frame is not here by its deadline, from
	// the newest frame the driver holds, with t.Policy.
	Missing(t Tick)
}

// Frame is the Clock's verdict on a frame handed to Frame or FrameAt.
type Frame struct {
	// Tick is the frame's tick. Its Policy is read only for a LIVE frame.
	Tick Tick
	// Live: show the frame now, unlabelled. Otherwise it is late: hold it
	// for later gaps, do not show it.
	Live bool
	// ArrivalUs is the ready time as the display had it: readyUs, or, for
	// a frame ready by its deadline that reached the display only after
	// its tick (and maybe later ones) had been filled, just after the
	// deadline of the last tick filled. Recordings keep this time so a
	// replay decides as the display did.
	ArrivalUs int64
	// MovedOn: the frame is shown LIVE on an open tick next to its nearest
	// one, by the capture-jitter rule (slot.go); Tick is the tick it is
	// shown on, where a recording keeps it.
	MovedOn bool
	// Resumed: the frame is shown by the outage rule (slot.go), on the
	// open tick after ticks that were STALE because the picture had
	// passed the age cap. MovedOn is set too.
	Resumed bool
}

// ClockStats counts what the Clock did.
type ClockStats struct {
	// Frames handed in, LIVE and late.
	Frames, Late uint64
	// Missing ticks filled.
	Missing uint64
	// MovedOn counts LIVE frames shown on a tick next to their nearest
	// one (the capture-jitter rule, slot.go).
	MovedOn uint64
	// Resumed counts frames of MovedOn shown by the outage rule
	// (slot.go).
	Resumed uint64
	// TelemetryDropped counts samples later than HistoryUs.
	TelemetryDropped uint64
	// CutoffsRefused counts cutoff reads outside [0, 1].
	CutoffsRefused uint64
}

// Clock is the display clock and the per-tick decision, the one decision
// core of stopgap: the live relay (stopgap/stream/relay) drives it with real
// time and the offline replay (stopgap/bench) with virtual time, and neither
// decides anything about a tick on its own, so a recorded session replays to
// the same decisions.
//
// Tick k stands for the frame captured at g_k, its time on the display grid
// locked to the sender's capture cadence (Grid), on the
// vehicle clock. Its deadline on the receiver clock is
//
//	d_k = g_k + L + allowance
//
// where L is the nominal capture-to-arrival latency (receiver clock minus
// vehicle clock, so it includes any clock offset): ClockConfig.LatencyUs when
// ClockConfig.FixedLatency is set, otherwise the median of (ready - capture) over
// the frames so far, frozen after the first LatencyFrames frames. Real
// capture times feed the latency; grid times place the ticks.
//
//   - Frames are handed in decoding order; a frame is ready no earlier than
//     the one handed before it.
//   - Frame k is LIVE if it is ready by d_k (ready == d_k is in time). It is
//     shown at once; the allowance adds no latency to LIVE frames.
//   - A tick whose deadline has passed without its frame, or whose frame
//     can no longer come because a newer frame is here (frames arrive in
//     capture order), is missing: at d_k the driver fills it from the
//     newest frame ready by then, with the Policy of that tick.
//   - A frame ready after its tick was decided is late: it becomes the held
//     frame for later gaps, but is not shown.
//   - Capture jitter (slot.go): a frame stamped late enough to be nearest
//     to the tick after the open one, or whose own tick was just decided,
//     is shown LIVE on the open tick next to it if it is in time there
//     and newer than everything decided; the display then runs at most one
//     tick behind the nearest-tick mapping.
//   - After an outage (slot.go): a late frame newer than a held picture
//     that had passed the age cap is shown LIVE on the open tick.
//   - Telemetry waits until the first tick whose deadline it arrived by is
//     decided, and reaches the filter before that tick's decision. A sample
//     later than the filter's history window after it was taken is
//     dropped.
//   - The operator's cutoff is read once per tick (ClockConfig.Cutoff) and the
//     value read is the one decided with and recorded (Tick.Policy).
//
// It holds no images: it tells its driver (a Handler) when to feed a
// telemetry sample and when a tick is missing, and tells the caller of Frame
// whether a frame is LIVE or late. The per-tick path does not allocate.
//
// Its zero value is
// not usable; create it with New. Not safe for concurrent use: one display
// loop owns it.
type Clock struct {
	cfg  ClockConfig
	grid *Grid
	pol  display.Policy

	started bool
	offset  int // tick = grid tick + offset
	next    int // lowest tick not yet decided
	// decidedCaptureUs is the time of tick next-1 as decided: the capture
	// time of the frame shown on it, or its target if it was filled
	// (slotFor).
	decidedCaptureUs int64

	readyUs int64 // ready time of the newest frame handed in
	// heldUs is the capture time of the newest frame handed in (shown or
	// held), the picture a missing tick is filled from; held says there
	// is one.
	heldUs int64
	held   bool
	// decidedUs is the deadline tick next-1 was decided with (the
	// estimate of L may have moved since).
	decidedUs int64
	latUs     int64
	latKnown  bool
	lat       [LatencyFrames]int64 // sorted samples of (ready - capture)
	nLat      int

	pend  []pendingSample
	stats ClockStats
}

type pendingSample struct {
	s         filter.Sample
	arrivalUs int64
}

// NewClock validates cfg and returns a Clock with no frame yet.
func NewClock(cfg ClockConfig) (*Clock, error) {
	g, err := New(cfg.PeriodUs)
	if err != nil {
		return nil, fmt.Errorf("display clock: %w", err)
	}
	if cfg.AllowanceUs < 0 {
		return nil, fmt.Errorf("display clock: allowance %d µs must be >= 0: %w", cfg.AllowanceUs, ErrBadClock)
	}
	if cfg.HistoryUs < 0 {
		return nil, fmt.Errorf("display clock: history window %d µs must be >= 0: %w", cfg.HistoryUs, ErrBadClock)
	}
	if err := cfg.Policy.Validate(); err != nil {
		return nil, fmt.Errorf("display clock: %w", err)
	}
	c := &Clock{cfg: cfg, grid: g, pol: cfg.Policy, pend: make([]pendingSample, 0, 64)}
	if cfg.FixedLatency {
		c.latUs, c.latKnown = cfg.LatencyUs, true
	}
	return c, nil
}

// Started reports whether the Clock has had its first frame (ticks exist).
func (c *Clock) Started() bool { return c.started }

// Next returns the lowest tick not yet decided.
func (c *Clock) Next() int { return c.next }

// Latency returns the nominal latency L, µs, and whether it is final
// (configured, or frozen after LatencyFrames frames).
func (c *Clock) Latency() (us int64, final bool) { return c.latUs, c.latKnown }

// Stats returns the counters.
func (c *Clock) Stats() ClockStats { return c.stats }

// Grid returns the display grid, for its statistics. Callers must not
// change it.
func (c *Clock) Grid() *Grid { return c.grid }

// TargetUs returns g_k (or the recorded schedule's target).
func (c *Clock) TargetUs(k int) int64 {
	if c.cfg.Schedule != nil {
		if t, _, ok := c.cfg.Schedule(k); ok {
			return t
		}
	}
	return c.grid.CaptureUs(k - c.offset)
}

// DeadlineUs returns d_k = g_k + L + allowance (or the recorded
// schedule's deadline).
func (c *Clock) DeadlineUs(k int) int64 {
	if c.cfg.Schedule != nil {
		if _, d, ok := c.cfg.Schedule(k); ok {
			return d
		}
	}
	return c.grid.CaptureUs(k-c.offset) + c.latUs + c.cfg.AllowanceUs
}

// NextDeadlineUs returns the deadline of the next undecided tick; ok is
// false before the first frame.
func (c *Clock) NextDeadlineUs() (us int64, ok bool) {
	if !c.started {
		return 0, false
	}
	return c.DeadlineUs(c.next), true
}

// UseVehicleClock says the capture times are on the vehicle clock from now
// on (telemetry lateness can be judged).
func (c *Clock) UseVehicleClock() { c.cfg.VehicleClock = true }

// Shift moves the timeline by dUs when capture times switch from an arrival
// anchor to the vehicle clock: grid times move, and an estimated latency
// (receiver minus capture) moves the other way. A fixed latency is relative
// to the vehicle clock already and stays.
func (c *Clock) Shift(dUs int64) {
	if c.started {
		c.grid.Shift(dUs)
		c.decidedCaptureUs += dUs
	}
	// The last decision's deadline is on the receiver clock, which does
	// not move.
	if c.cfg.FixedLatency {
		return
	}
	c.latUs -= dUs
	for i := range c.nLat {
		c.lat[i] -= dUs
	}
}

// Frame hands the Clock a decoded frame captured at captureUs (timeline
// clock) and ready at readyUs (receiver clock). Its tick is the grid's
// (Grid.Observe), or the one next to it by the capture-jitter rule
// (slot.go). Ticks whose deadline passed before readyUs, and
// earlier ticks whose frame can no longer come, are filled first (through
// h); then the verdict says whether to show the frame or hold it.
func (c *Clock) Frame(h Handler, captureUs, readyUs int64) Frame {
	gk := c.grid.Observe(captureUs)
	if !c.started {
		c.started, c.offset = true, 0
	}
	return c.frame(h, gk+c.offset, captureUs, readyUs)
}

// FrameAt is Frame for a driver that knows the frame's tick: the frame of
// recording row k is tick k (the capture-jitter rule applies to it as to a
// frame of Frame, with k as its nearest tick). The grid still observes the capture time (its
// period and phase follow the sender); the first frame anchors the tick
// numbering, and ticks before it are filled (with no picture) when it
// comes.
func (c *Clock) FrameAt(h Handler, k int, captureUs, readyUs int64) Frame {
	gk := c.grid.Observe(captureUs)
	if !c.started {
		c.started, c.offset = true, k-gk
	}
	return c.frame(h, k, captureUs, readyUs)
}

func (c *Clock) frame(h Handler, k int, captureUs, readyUs int64) Frame {
	// Frames are handed in decoding order: a frame handed after another
	// was not ready before it (a receiver clock that reads earlier has
	// stepped back).
	if c.stats.Frames > 0 && readyUs < c.readyUs {
		readyUs = c.readyUs
	}
	c.readyUs = readyUs
	c.stats.Frames++
	if !c.latKnown {
		c.addLatency(readyUs - captureUs)
	}
	// Deadlines that passed before this frame was ready (a frame ready
	// at its deadline is still in time).
	c.Advance(h, readyUs)
	arrival := readyUs
	if k < c.next {
		if d := c.decidedUs; arrival <= d {
			// Ready by a deadline, but it reached the display after that
			// tick was filled (the display loop was not scheduled in
			// between); on a starved CPU later ticks may have been filled
			// without it too. The display had no frame until now.
			arrival = d + 1
			c.readyUs = arrival
		}
	}
	nearest := k
	resume := c.resumes(k, captureUs, readyUs)
	if !c.held || captureUs > c.heldUs {
		c.heldUs, c.held = captureUs, true
	}
	k, show := slotFor(k, c.next, captureUs, c.TargetUs(k), c.decidedCaptureUs, c.next > 0, resume)
	if !show {
		c.stats.Late++
		return Frame{Tick: Tick{K: k, TargetUs: c.TargetUs(k), DeadlineUs: c.DeadlineUs(k), Policy: c.pol}, ArrivalUs: arrival}
	}
	// Earlier ticks whose frames can no longer come (frames arrive in
	// capture order).
	for c.next < k {
		c.missing(h, c.next)
	}
	t := c.tick(k)
	c.next, c.decidedUs, c.decidedCaptureUs = k+1, t.DeadlineUs, captureUs
	c.feed(h, t.DeadlineUs)
	resumed := resume && k > nearest
	if k != nearest {
		c.stats.MovedOn++
	}
	if resumed {
		c.stats.Resumed++
	}
	return Frame{Tick: t, Live: true, ArrivalUs: arrival, MovedOn: k != nearest, Resumed: resumed}
}

// resumes reports whether a frame whose nearest tick is k, captured at
// captureUs and ready at readyUs, comes after an outage (the outage rule,
// slot.go): tick next-1 was filled from a held picture older than the age
// cap, the frame is newer than that picture, and it is at most
// ResumeMaxLateUs later than its own tick's deadline. The age is the one the
// filler decides with (predictor.Tick.AgeMs): the tick's target minus the
// held picture's capture time.
func (c *Clock) resumes(k int, captureUs, readyUs int64) bool {
	if !c.held || c.next == 0 || captureUs <= c.heldUs+JitterMarginUs || readyUs-c.DeadlineUs(k) > ResumeMaxLateUs {
		return false
	}
	ageMs := float64(c.TargetUs(c.next-1)-c.heldUs) / 1000
	return ageMs > c.pol.MaxAgeMs
}

// addLatency adds one (ready - capture) sample to the running median and
// freezes it after LatencyFrames samples.
func (c *Clock) addLatency(us int64) {
	i := c.nLat
	for i > 0 && c.lat[i-1] > us {
		c.lat[i] = c.lat[i-1]
		i--
	}
	c.lat[i] = us
	c.nLat++
	c.latUs = c.lat[c.nLat/2]
	if c.nLat == LatencyFrames {
		c.latKnown = true
	}
}

// Advance fills every tick whose deadline is before nowUs (receiver clock).
// A live driver calls it when its timer fires; a replay before each event.
func (c *Clock) Advance(h Handler, nowUs int64) {
	if !c.started {
		return
	}
	for c.DeadlineUs(c.next) < nowUs {
		c.missing(h, c.next)
	}
}

// FillThrough fills every undecided tick up to and including k, whatever
// the time: the end of a replay, whose last frames never came.
func (c *Clock) FillThrough(h Handler, k int) {
	if !c.started {
		return
	}
	for c.next <= k {
		c.missing(h, c.next)
	}
}

func (c *Clock) missing(h Handler, k int) {
	d := c.DeadlineUs(k)
	c.feed(h, d)
	c.stats.Missing++
	t := c.tickAt(k, d)
	c.next, c.decidedUs, c.decidedCaptureUs = k+1, d, t.TargetUs
	h.Missing(t)
}

// tick reads the cutoff for tick k and returns its decision context.
func (c *Clock) tick(k int) Tick { return c.tickAt(k, c.DeadlineUs(k)) }

func (c *Clock) tickAt(k int, deadlineUs int64) Tick {
	if c.cfg.Cutoff != nil {
		v := c.cfg.Cutoff(k)
		if display.ValidCutoff(v) == nil {
			c.pol.CutoffConfidence = v
		} else {
			c.stats.CutoffsRefused++
		}
	}
	return Tick{K: k, TargetUs: c.TargetUs(k), DeadlineUs: deadlineUs, Policy: c.pol}
}

// Telemetry hands the Clock one sample that arrived at arrivalUs (receiver
// clock). It waits for the first tick whose deadline it arrived by and is
// given to h.Telemetry before that tick is decided; before the first frame,
// or when MaxPendingTelemetry samples wait, it is given at once. It returns
// false if the sample was dropped as later than ClockConfig.HistoryUs.
func (c *Clock) Telemetry(h Handler, s filter.Sample, arrivalUs int64) bool {
	if c.cfg.HistoryUs > 0 && c.cfg.VehicleClock && c.latKnown && arrivalUs-(s.TimeUs+c.latUs) > c.cfg.HistoryUs {
		c.stats.TelemetryDropped++
		return false
	}
	if !c.started || len(c.pend) >= MaxPendingTelemetry {
		h.Telemetry(s, arrivalUs)
		return true
	}
	if c.next > 0 && arrivalUs <= c.decidedUs {
		arrivalUs = c.decidedUs + 1
	}
	c.pend = append(c.pend, pendingSample{s, arrivalUs})
	return true
}

// feed gives h every waiting sample that arrived by untilUs, in arrival
// order (samples are queued in arrival order).
func (c *Clock) feed(h Handler, untilUs int64) {
	n := 0
	for _, p := range c.pend {
		if p.arrivalUs <= untilUs {
			h.Telemetry(p.s, p.arrivalUs)
		} else {
			c.pend[n] = p
			n++
		}
	}
	c.pend = c.pend[:n]
}
