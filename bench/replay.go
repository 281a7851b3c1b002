package bench

import (
	"context"
	"errors"
	"fmt"
	"image"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"time"

	"gocv.io/x/gocv"

	"stopgap/filter"
	"stopgap/internal/lossmodel"
	"stopgap/predictor"
	"stopgap/stream/cadence"
	"stopgap/stream/recording"
)

// DefaultAllowanceMs is the default jitter allowance of the display clock:
// how long after its nominal arrival a frame may still come and be shown as
// LIVE. A design choice of this project, about two thirds of a frame period
// at 30 fps; tune it to the link's measured jitter.
const DefaultAllowanceMs = 20

// DefaultExamples is how many side-by-side example ticks a report shows.
const DefaultExamples = 4

// ReplayConfig configures Replay. Zero values take the documented defaults
// where one is given; Drive and Out are required.
type ReplayConfig struct {
	// Drive is the recording directory (see package stopgap/stream/recording).
	Drive string
	// Out is the report directory to create (see ReportWriter).
	Out string
	// Overwrite allows replacing an existing non-empty Out.
	Overwrite bool

	// ArrivalsFile, if set, gives the recorded arrival time of each frame
	// (index,t_arrival_us; blank = never arrived) and Loss is ignored.
	// When it belongs to another recording than Drive (a live session
	// replayed on the vehicle's onboard recording), the session's frames
	// are paired with Drive's by capture time or RTP timestamp
	// (recording.PairFrames) and the replay runs on the session's ticks.
	ArrivalsFile string
	// PairToleranceMs is the capture-time tolerance of that pairing;
	// 0 means recording.DefaultPairTolerance (a quarter frame period).
	PairToleranceMs float64
	// Loss is the simulated link used when ArrivalsFile is empty. Its zero
	// value is invalid: set at least Model.
	Loss lossmodel.Config

	// Policy decides PREDICTED versus STALE (cutoff and age cap).
	Policy predictor.Policy
	// CutoffAt, if set, gives the operator's cutoff at tick k (for example
	// the one a live session recorded with each tick, Session.Cutoffs);
	// where it returns false, Policy's cutoff is used. It is read once per
	// tick, as the live relay reads the console's.
	CutoffAt func(k int) (cutoff float64, ok bool)
	// Filter configures the motion filter; a zero Model means CTRV.
	// Filter configures the motion filter. A zero Model means the bicycle
	// driven by the operator's commands when the drive has them (see
	// NoCommands), else CTRV. A zero Filter.Actuator is fitted from the
	// drive (filter.FitActuator).
	Filter filter.Config
	// NoCommands ignores the operator's commands (operator.ControlsFile in
	// Drive, or beside ArrivalsFile) even when present: the filter then
	// runs on telemetry alone.
	NoCommands bool
	// AllowanceMs is the display clock's jitter allowance past a frame's
	// nominal arrival; 0 means DefaultAllowanceMs, negative is an error.
	AllowanceMs float64
	// Telemetry says how telemetry without recorded arrival times reaches
	// the filter; the zero value shares the fate of the video.
	Telemetry TelemetryLink
	// Confidence is the confidence model (its tolerance is also the
	// calibration criterion); the zero value uses the defaults.
	Confidence predictor.ConfidenceModel
	// Motion says which sources of motion feed the filter: telemetry
	// (the zero value), the video's own ego-motion, or both.
	Motion MotionSources
	// Lead turns on latency compensation (predictor.Leader) on LIVE ticks
	// and scores it (Summary.Lead). It needs a simulated link, whose
	// arrival times are on the vehicle clock; with ArrivalsFile it is
	// refused.
	Lead bool

	// Examples is how many example ticks the report shows side by side;
	// 0 means DefaultExamples, negative means none.
	Examples int
	// Progress, if set, is called after each tick with the number of ticks
	// done and the total.
	Progress func(done, total int)
	// Shown, if set, is called for every tick once it is decided, in tick
	// order, with its row and what the operator would have seen: for a
	// missing tick the frame as shown (labelled PREDICTED or STALE),
	// borrowed for the duration of the call; for a LIVE tick, or a tick
	// before any real frame, the zero Mat (Ptr() == nil; the real frame is
	// the recording's). An error stops the replay.
	Shown func(row TickRow, shown gocv.Mat) error
	// Logger receives warnings (tolerated input, rejected telemetry);
	// nil means slog.Default().
	Logger *slog.Logger
	// Now is the clock for synthesis times; nil means time.Now.
	Now func() time.Time

	// truthMotion, if set, replaces the filter by a motion source made
	// from truth.csv: the exact motion (the evaluation's upper bound,
	// EvalSource.Truth), or a reference that knows part of the truth.
	truthMotion func(truth []recording.Truth) predictor.MotionSource
	// predicted, if set, is called on each scored PREDICTED tick k with
	// the held frame's index, the frame shown before its label and the
	// true and held frames, all borrowed for the call (ErrorBudget).
	predicted func(k, held int, unlabelled, truth, heldImg gocv.Mat) error
	// marked, if set, is called on each PREDICTED tick whose marks were
	// scored, with what the scoring saw (TestDiagMarks).
	marked func(d markedTick) error
}

// Schedule is the display schedule of a replay: when each tick falls and
// whether its real frame is here by then, as the display clock
// (cadence.Clock, the rule the live relay follows) decides them. All times
// are on the receiver clock unless said otherwise.
//
// Tick k is due at DeadlineUs(k) = g_k + L + allowance (see cadence.Clock:
// g_k on the grid locked to the capture cadence, L the latency estimate
// frozen after cadence.LatencyFrames frames). Frame k is LIVE at tick k if it
// arrived by then (or on the tick next to it, by the clock's capture-jitter
// rule). Otherwise tick k is missing, and the newest frame that has arrived
// by DeadlineUs(k) is the one a prediction is built from.
type Schedule struct {
	// CaptureUs is each frame's capture time on the vehicle clock.
	CaptureUs []int64
	// ArrivalUs is each frame's arrival on the receiver clock, or
	// NeverArrivesUs.
	ArrivalUs []int64
	// LatencyUs is the nominal capture-to-arrival latency L as the clock
	// had it at the end (receiver clock minus vehicle clock).
	LatencyUs int64
	// AllowanceUs is the jitter allowance.
	AllowanceUs int64
	// TickDeadlineUs holds each tick's deadline as the clock decided it;
	// nil (a Schedule written by hand) means CaptureUs + LatencyUs +
	// AllowanceUs.
	TickDeadlineUs []int64
	// TickLive holds whether each tick showed a frame LIVE (its own, or
	// by the clock's capture-jitter rule the frame before or after it);
	// nil means arrival <= DeadlineUs.
	TickLive []bool
	// RecordedDeadlineUs, if not nil, holds each tick's deadline as the
	// live relay recorded it (arrivals.csv t_deadline_us); the clock uses
	// it (and the row's capture time as the target) instead of its own
	// rule, so a replay reproduces the live schedule exactly.
	RecordedDeadlineUs []int64
}

// NewSchedule builds the schedule for frames captured at captureUs that
// arrived at arrivalUs (NeverArrivesUs for lost ones) by running them through
// the display clock. It fails if no frame arrived at all, since then there is
// nothing to show.
func NewSchedule(captureUs, arrivalUs []int64, allowanceUs int64) (Schedule, error) {
	return newSchedule(captureUs, arrivalUs, nil, allowanceUs)
}

func newSchedule(captureUs, arrivalUs, recordedDeadlineUs []int64, allowanceUs int64) (Schedule, error) {
	if len(captureUs) != len(arrivalUs) {
		return Schedule{}, fmt.Errorf("schedule: %d capture times but %d arrival times: %w", len(captureUs), len(arrivalUs), ErrReplayInput)
	}
	s := Schedule{CaptureUs: captureUs, ArrivalUs: arrivalUs, AllowanceUs: allowanceUs, RecordedDeadlineUs: recordedDeadlineUs,
		TickDeadlineUs: make([]int64, len(captureUs)), TickLive: make([]bool, len(captureUs))}
	clock, err := replayClock(captureUs, recordedDeadlineUs, allowanceUs, predictor.Policy{}, nil, 0)
	if err != nil {
		return Schedule{}, err
	}
	var h scheduleHandler
	h.s = &s
	arrived := arrivalOrder(arrivalUs)
	if len(arrived) == 0 {
		return Schedule{}, fmt.Errorf("schedule: no frame arrived, nothing to replay; check the arrivals file or lower --frame-loss-rate: %w", ErrReplayInput)
	}
	for _, j := range arrived {
		if v := clock.FrameAt(&h, j, captureUs[j], arrivalUs[j]); v.Live && v.Tick.K < len(captureUs) {
			s.TickDeadlineUs[v.Tick.K], s.TickLive[v.Tick.K] = v.Tick.DeadlineUs, true
		}
	}
	clock.FillThrough(&h, len(captureUs)-1)
	s.LatencyUs, _ = clock.Latency()
	return s, nil
}

// scheduleHandler keeps the deadlines of missing ticks; telemetry plays no
// part in the schedule.
type scheduleHandler struct{ s *Schedule }

func (h *scheduleHandler) Telemetry(filter.Sample, int64) {}
func (h *scheduleHandler) Missing(t cadence.Tick) {
	if t.K < len(h.s.TickDeadlineUs) {
		h.s.TickDeadlineUs[t.K] = t.DeadlineUs
	}
}

// replayClock returns the display clock for a replay of frames captured at
// captureUs: the grid starts at the rows' capture interval (rowPeriodUs; the
// live relay starts at its configured frame rate); recordedDeadlineUs, if
// not nil, replaces the rule's deadlines and the rows' capture times its
// targets.
func replayClock(captureUs, recordedDeadlineUs []int64, allowanceUs int64, pol predictor.Policy, cutoff func(int) float64, historyUs int64) (*cadence.Clock, error) {
	period := rowPeriodUs(captureUs)
	cfg := cadence.ClockConfig{PeriodUs: period, AllowanceUs: allowanceUs, Policy: pol, Cutoff: cutoff,
		HistoryUs: historyUs, VehicleClock: true}
	if recordedDeadlineUs != nil {
		cfg.Schedule = func(k int) (int64, int64, bool) {
			if k < 0 || k >= len(recordedDeadlineUs) {
				return 0, 0, false
			}
			return captureUs[k], recordedDeadlineUs[k], true
		}
	}
	c, err := cadence.NewClock(cfg)
	if err != nil {
		return nil, fmt.Errorf("schedule: %w: %w", ErrReplayInput, err)
	}
	return c, nil
}

// rowPeriodUs estimates the capture period of a replay's rows, µs: the mean
// of the intervals between adjacent rows within half a median interval of
// the median, or 1/30 s with fewer than two rows. A relay's recording keeps
// a frame the display moved on (the capture-jitter and outage rules,
// cadence) on the row of the tick it was shown on, so its capture time lies
// up to a period before the row's grid time; the rows after it may all sit
// one tick on until the sender skips a frame. The interval across such a
// step is near 0 or near two periods and is left out; a mean from the first
// to the last row would take the step as a slower rate (a 1.6 % error with
// the last 18 of 61 rows one tick on), and the grid starts that far off.
// Steps of 33 and 34 ms (a sender stamping whole milliseconds) are all kept
// and average to the sender's rate.
func rowPeriodUs(captureUs []int64) float64 {
	if len(captureUs) < 2 {
		return 1e6 / 30
	}
	d := make([]float64, 0, len(captureUs)-1)
	for i := 1; i < len(captureUs); i++ {
		if v := float64(captureUs[i] - captureUs[i-1]); v > 0 {
			d = append(d, v)
		}
	}
	if len(d) == 0 {
		return 1e6 / 30
	}
	sorted := slices.Clone(d)
	slices.Sort(sorted)
	med := sorted[len(sorted)/2]
	sum, n := 0.0, 0
	for _, v := range d {
		if v >= med/2 && v <= med*3/2 {
			sum += v
			n++
		}
	}
	return sum / float64(n)
}

// arrivalOrder returns the indices of the frames that arrived, in arrival
// order (capture order among equal arrivals).
func arrivalOrder(arrivalUs []int64) []int {
	var out []int
	for i, a := range arrivalUs {
		if a != NeverArrivesUs {
			out = append(out, i)
		}
	}
	sort.SliceStable(out, func(a, b int) bool { return arrivalUs[out[a]] < arrivalUs[out[b]] })
	return out
}

// DeadlineUs returns the receiver time of tick k.
func (s Schedule) DeadlineUs(k int) int64 {
	if s.TickDeadlineUs != nil {
		return s.TickDeadlineUs[k]
	}
	if s.RecordedDeadlineUs != nil {
		return s.RecordedDeadlineUs[k]
	}
	return s.CaptureUs[k] + s.LatencyUs + s.AllowanceUs
}

// Live reports whether frame k was shown LIVE at tick k.
func (s Schedule) Live(k int) bool {
	if s.TickLive != nil {
		return s.TickLive[k]
	}
	return s.ArrivalUs[k] != NeverArrivesUs && s.ArrivalUs[k] <= s.DeadlineUs(k)
}

// Held returns the newest frame j <= k that has arrived by tick k's
// deadline, or -1 if none has.
func (s Schedule) Held(k int) int {
	d := s.DeadlineUs(k)
	for j := k; j >= 0; j-- {
		if s.ArrivalUs[j] != NeverArrivesUs && s.ArrivalUs[j] <= d {
			return j
		}
	}
	return -1
}

// telemetryArrivals returns, for each telemetry row, the receiver time at
// which it reached the filter, or NeverArrivesUs.
//
// A row that recorded its own arrival (t_arrival_us, written by the live
// relay) uses it. Otherwise telemetry shares the fate of the video: a sample
// taken while frame i was the newest capture arrives with frame i's delay if
// frame i arrived, and is lost with it if not. This is the conservative
// choice: during a video outage the filter learns nothing new either.
func telemetryArrivals(rows []recording.TelemetryRow, s Schedule) []int64 {
	out := make([]int64, len(rows))
	for r, row := range rows {
		if row.HasArrival {
			out[r] = row.ArrivalUs
			continue
		}
		i := sort.Search(len(s.CaptureUs), func(i int) bool { return s.CaptureUs[i] > row.TimeUs }) - 1
		switch {
		case i < 0: // before the first frame: delivered with the nominal latency
			out[r] = row.TimeUs + s.LatencyUs
		case s.ArrivalUs[i] == NeverArrivesUs:
			out[r] = NeverArrivesUs
		default:
			out[r] = row.TimeUs + (s.ArrivalUs[i] - s.CaptureUs[i])
		}
	}
	return out
}

// SampleFromRow converts one telemetry row to a filter sample.
func SampleFromRow(r recording.TelemetryRow) filter.Sample {
	return filter.Sample{
		TimeUs: r.TimeUs, SpeedMps: r.SpeedMps, YawRateRps: r.YawRateRps,
		AccelMps2: r.AccelMps2, HasAccel: r.HasAccel,
		SteerRad: r.SteerRad, HasSteer: r.HasSteer,
	}
}

// Replay replays a recorded drive on a virtual display clock and scores, for
// every tick whose real frame the operator would not have had, what each
// method shows against the frame that really happened: hold (the last real
// frame), rotation (rotation-only warp) and predicted (what stopgap shows:
// a predicted frame above the cutoff, the held frame when STALE). Images are
// scored before labels and desaturation. It writes the report to cfg.Out and
// returns its summary.
//
// Nothing is written to cfg.Out unless the whole replay succeeds.
func Replay(ctx context.Context, cfg ReplayConfig) (Summary, error) {
	if cfg.Drive == "" || cfg.Out == "" {
		return Summary{}, fmt.Errorf("replay: both a drive directory and an output directory are needed: %w", ErrReplayInput)
	}
	if !cfg.Overwrite {
		if err := checkFreshOut(cfg.Out); err != nil {
			return Summary{}, err
		}
	}
	var out replayOutput
	defer func() {
		for _, e := range out.examples {
			closeExample(e)
		}
	}()
	sum, err := replayDrive(ctx, cfg, &out)
	if err != nil {
		return Summary{}, err
	}
	if err := (ReportWriter{Overwrite: cfg.Overwrite}).Write(cfg.Out, sum, out.rows, out.examples); err != nil {
		return Summary{}, fmt.Errorf("replay: writing the report: %w", err)
	}
	return sum, nil
}

// replayOutput receives the ticks and example images of a successful
// replayDrive; the examples are then owned by the caller (closeExample).
type replayOutput struct {
	rows     []TickRow
	examples []Example
}

// replayDrive runs the replay of cfg.Drive without writing anything and
// returns the summary; on success it hands every tick and the example
// ticks to out.
func replayDrive(ctx context.Context, cfg ReplayConfig, out *replayOutput) (Summary, error) {
	log := cfg.Logger
	if log == nil {
		log = slog.Default()
	}
	now := cfg.Now
	if now == nil {
		now = time.Now
	}
	if cfg.Drive == "" {
		return Summary{}, fmt.Errorf("replay: a drive directory is needed: %w", ErrReplayInput)
	}
	if err := cfg.Telemetry.Validate(); err != nil {
		return Summary{}, fmt.Errorf("replay: %w", err)
	}
	if err := cfg.Confidence.Validate(); err != nil {
		return Summary{}, fmt.Errorf("replay: %w", err)
	}
	if err := cfg.Policy.Validate(); err != nil {
		return Summary{}, fmt.Errorf("replay: %w", err)
	}
	if cfg.Lead && cfg.ArrivalsFile != "" {
		return Summary{}, fmt.Errorf("replay: lead scoring needs a simulated link (recorded arrivals are on the receiver's clock, not the vehicle's); drop the arrivals file or the lead: %w", ErrReplayInput)
	}
	if cfg.AllowanceMs < 0 || math.IsNaN(cfg.AllowanceMs) || math.IsInf(cfg.AllowanceMs, 0) {
		return Summary{}, fmt.Errorf("replay: jitter allowance %v ms must be a finite number >= 0: %w", cfg.AllowanceMs, ErrReplayInput)
	}
	allowanceMs := cfg.AllowanceMs
	if allowanceMs == 0 {
		allowanceMs = DefaultAllowanceMs
	}
	nExamples := cfg.Examples
	if nExamples == 0 {
		nExamples = DefaultExamples
	}
	rec, err := recording.Open(cfg.Drive)
	if err != nil {
		return Summary{}, fmt.Errorf("replay: %w", err)
	}
	for _, w := range rec.Warnings {
		log.Warn("recording tolerated", "drive", cfg.Drive, "warning", w)
	}
	if len(rec.Frames) == 0 {
		return Summary{}, fmt.Errorf("replay: %s has no frames: %w", filepath.Join(cfg.Drive, "frames.csv"), ErrReplayInput)
	}
	cam := rec.Camera // complete with its mount: recording.Open checked it

	if cfg.PairToleranceMs < 0 || math.IsNaN(cfg.PairToleranceMs) || math.IsInf(cfg.PairToleranceMs, 0) {
		return Summary{}, fmt.Errorf("replay: pairing tolerance %v ms must be a finite number >= 0: %w", cfg.PairToleranceMs, ErrReplayInput)
	}
	var in replayInput
	if sess, arrivals, paired, err := pairedSession(cfg, log); err != nil {
		return Summary{}, err
	} else if paired {
		if in, err = pairedInput(cfg, rec, sess, arrivals, cam.Width, cam.Height, log); err != nil {
			return Summary{}, err
		}
	} else if in, err = indexInput(cfg, rec, cam.Width, cam.Height); err != nil {
		return Summary{}, err
	}
	frames := in.frames
	defer frames.Close()
	captureUs := in.captureUs
	allowanceUs := int64(math.Round(allowanceMs * 1000))
	// The schedule alone (the same clock, without telemetry) gives the
	// latency that simulated telemetry arrivals are placed with.
	sched, err := newSchedule(captureUs, in.arrivalUs, in.deadlineUs, allowanceUs)
	if err != nil {
		return Summary{}, fmt.Errorf("replay: %w", err)
	}

	fcfg, cmds, cmdUse, err := loadCommands(cfg, in.telemetry, log)
	if err != nil {
		return Summary{}, err
	}
	flt, err := filter.New(fcfg)
	if err != nil {
		return Summary{}, fmt.Errorf("replay: filter: %w", err)
	}
	telArr := telemetryArrivals(in.telemetry, sched)
	if cfg.Telemetry.Own {
		times := make([]int64, len(in.telemetry))
		for i, row := range in.telemetry {
			times[i] = row.TimeUs
		}
		own := cfg.Telemetry.ownChannelArrivals(times, sched.LatencyUs)
		for i, row := range in.telemetry {
			if !row.HasArrival {
				telArr[i] = own[i]
			}
		}
	}
	for i, lost := range in.telLost {
		if lost {
			telArr[i] = NeverArrivesUs
		}
	}
	telOrder := make([]int, 0, len(telArr))
	for i, a := range telArr {
		if a != NeverArrivesUs && !cfg.Motion.NoTelemetry {
			telOrder = append(telOrder, i)
		}
	}
	sort.SliceStable(telOrder, func(a, b int) bool { return telArr[telOrder[a]] < telArr[telOrder[b]] })
	var lead *leadScorer
	if cfg.Lead {
		if lead, err = newLeadScorer(cam, flt, cfg.Confidence, cfg.Policy.CutoffConfidence); err != nil {
			return Summary{}, fmt.Errorf("replay: %w", err)
		}
		defer lead.Close()
	}
	var video *videoMotion
	if cfg.Motion.Video {
		if video, err = newVideoMotion(cam); err != nil {
			return Summary{}, fmt.Errorf("replay: %w", err)
		}
		defer video.Close()
	}

	var motion predictor.MotionSource = flt
	if cfg.truthMotion != nil {
		if in.pairing != nil || len(rec.Truth) != len(captureUs) {
			return Summary{}, fmt.Errorf("replay: the exact motion needs a truth.csv row for every frame: %w", ErrReplayInput)
		}
		motion = cfg.truthMotion(rec.Truth)
	}
	r, err := newReplayer(cam, cfg.Policy, cfg.Confidence, motion, now)
	if err != nil {
		return Summary{}, fmt.Errorf("replay: %w", err)
	}
	defer r.Close()
	r.captureUs = captureUs
	r.predicted = cfg.predicted
	r.marked = cfg.marked
	if in.pairing == nil {
		r.truth = rec.Truth
		if r.marks, err = newMarkScorer(cfg.Drive); err != nil {
			return Summary{}, err
		}
	}

	var acc Accumulator
	rows := make([]TickRow, 0, len(captureUs))
	var examples []Example
	defer func() {
		if out.examples == nil { // not handed over: an error
			for _, e := range examples {
				closeExample(e)
			}
		}
	}()
	exampleBuckets := map[string]bool{}
	total := len(captureUs)
	// emit takes every decided tick, in tick order.
	emit := func(row TickRow) error {
		if row.Tick != len(rows) {
			return fmt.Errorf("tick %d decided after tick %d: %w", row.Tick, len(rows)-1, ErrReplayInput)
		}
		if row.State != TickLive {
			if b := bucketLabel(row.AgeMs) + "/" + row.State; len(examples) < nExamples && !exampleBuckets[b] && r.truthImg.Ptr() != nil {
				exampleBuckets[b] = true
				examples = append(examples, r.example(row))
			}
		}
		if err := acc.Add(row); err != nil {
			return err
		}
		if cfg.Shown != nil {
			img := gocv.Mat{}
			if r.shownValid && row.State != TickLive {
				img = r.shown
			}
			if err := cfg.Shown(row, img); err != nil {
				return err
			}
		}
		rows = append(rows, row)
		if cfg.Progress != nil {
			cfg.Progress(len(rows), total)
		}
		return nil
	}
	var cutoff func(int) float64
	if cfg.CutoffAt != nil {
		cutoff = func(k int) float64 {
			if v, ok := cfg.CutoffAt(k); ok {
				return v
			}
			return cfg.Policy.CutoffConfidence
		}
	}
	historyUs := fcfg.HistoryUs
	if historyUs == 0 {
		historyUs = filter.DefaultHistoryUs
	}
	clock, err := replayClock(captureUs, in.deadlineUs, allowanceUs, cfg.Policy, cutoff, historyUs)
	if err != nil {
		return Summary{}, fmt.Errorf("replay: %w", err)
	}
	d := &replayDriver{r: r, flt: flt, log: log, frames: frames, captureUs: captureUs, hasTruth: in.hasTruth,
		last: -1, beforeLast: -1, emit: emit}
	if lead != nil {
		d.onLive = func(k int) error { return lead.live(k, sched, frames, in.hasTruth) }
	}
	if cmds != nil {
		// Commands are made on the operator's side: they are never lost
		// with the video, and reach the filter before each tick it fills.
		d.beforeMissing = func(deadlineUs int64) { cmds.feed(flt, deadlineUs, log) }
	}
	// Frames and telemetry reach the clock in arrival order, as they reach
	// the live relay's display loop; the clock fills each tick whose
	// deadline passed before the next event.
	frameOrder := arrivalOrder(in.arrivalUs)
	fi, ti := 0, 0
	for fi < len(frameOrder) || ti < len(telOrder) {
		if err := ctx.Err(); err != nil {
			return Summary{}, fmt.Errorf("replay: stopped at tick %d of %d: %w", len(rows), total, err)
		}
		if ti < len(telOrder) && (fi == len(frameOrder) || telArr[telOrder[ti]] < in.arrivalUs[frameOrder[fi]]) {
			i := telOrder[ti]
			ti++
			clock.Advance(d, telArr[i])
			if !clock.Telemetry(d, SampleFromRow(in.telemetry[i]), telArr[i]) {
				log.Debug("telemetry sample later than the filter's history window", "t_us", in.telemetry[i].TimeUs)
			}
		} else {
			j := frameOrder[fi]
			fi++
			v := clock.FrameAt(d, j, captureUs[j], in.arrivalUs[j])
			if d.err == nil {
				d.frame(j, v)
			}
			// The video's ego-motion is known once the frame is decoded:
			// it reaches the filter at the frame's arrival, for the ticks
			// decided after it (as in the live relay).
			if video != nil && d.err == nil {
				if err := video.observe(j, captureUs[j], frames, flt, log); err != nil {
					return Summary{}, fmt.Errorf("replay: frame %d: %w", j, err)
				}
			}
		}
		if d.err != nil {
			return Summary{}, fmt.Errorf("replay: %w", d.err)
		}
	}
	clock.FillThrough(d, total-1)
	if d.err != nil {
		return Summary{}, fmt.Errorf("replay: %w", d.err)
	}
	if len(rows) != total {
		return Summary{}, fmt.Errorf("replay: %d of %d ticks decided: %w", len(rows), total, ErrReplayInput)
	}

	sum := acc.Summary()
	sum.TicksUnscored = len(r.noTruth) + r.noFrameYet
	sum.UnscoredNote = unscoredNote(in, sum.TicksMissing, r.noTruth, r.noFrameYet)
	if in.reference != nil {
		if in.pairing == nil {
			in.pairing = &PairingReport{Session: filepath.Dir(cfg.ArrivalsFile)}
		}
		compareReference(in.reference, rows, in.pairing)
	}
	sum.Pairing = in.pairing
	sum.Calibration, sum.CalibrationTruth = acc.CalibrationAt(cfg.Confidence.Tolerance())
	sum.Telemetry = cfg.Telemetry
	sum.Drive = cfg.Drive
	sum.Cutoff = cfg.Policy.CutoffConfidence
	sum.MaxAgeMs = cfg.Policy.MaxAgeMs
	sum.Loss = cfg.Loss
	if cfg.ArrivalsFile != "" {
		sum.Loss = lossmodel.Config{Model: lossmodel.Recorded}
	}
	sum.ArrivalsFile = cfg.ArrivalsFile
	sum.AllowanceMs = allowanceMs
	lat, _ := clock.Latency()
	sum.LatencyMs = float64(lat) / 1000
	sum.FilterModel = fcfg.Model.String()
	sum.TelemetryRejected = int(flt.Rejected().Total())
	sum.Motion = cfg.Motion
	if lead != nil {
		sum.Lead = lead.summary()
	}
	if video != nil {
		sum.VideoSamples = video.samples
	}
	cmdUse.Rejected = int(flt.CommandsRejected().Total())
	sum.Commands = cmdUse
	out.rows, out.examples = rows, examples
	return sum, nil
}

// replayArrivals returns each frame's arrival time: recorded (cfg.ArrivalsFile)
// or simulated (cfg.Loss). If every recorded row carries its tick's deadline
// (t_deadline_us, as the live relay writes), the deadlines are returned too.
// A frame recorded without an image must not be marked as arrived.
func replayArrivals(cfg ReplayConfig, rec *recording.Recording, captureUs []int64) (arrivals, deadlines []int64, err error) {
	if cfg.ArrivalsFile != "" {
		if err := rec.LoadArrivals(cfg.ArrivalsFile); err != nil {
			return nil, nil, fmt.Errorf("replay: %w", err)
		}
		arrivals = make([]int64, len(captureUs))
		for i := range arrivals {
			arrivals[i] = NeverArrivesUs
		}
		withDeadline := 0
		deadlines = make([]int64, len(captureUs))
		for _, a := range rec.Arrivals {
			if a.Arrived {
				if rec.Frames[a.Index].NoImage {
					return nil, nil, fmt.Errorf("replay: %s: frame %d arrived at %d us but frames.csv has no image for it: %w", cfg.ArrivalsFile, a.Index, a.ArrivalUs, ErrReplayInput)
				}
				arrivals[a.Index] = a.ArrivalUs
			}
			if a.HasDeadline {
				deadlines[a.Index] = a.DeadlineUs
				withDeadline++
			}
		}
		if withDeadline != len(captureUs) {
			deadlines = nil
		}
		return arrivals, deadlines, nil
	}
	if err := cfg.Loss.Validate(); err != nil {
		return nil, nil, fmt.Errorf("replay: loss model: %w", err)
	}
	arr, err := cfg.Loss.Simulate(nil, captureUs)
	if err != nil {
		return nil, nil, fmt.Errorf("replay: loss model: %w", err)
	}
	// A frame the recorder never got (a live recording's lost frame) is
	// lost on the modelled link too: the model's drops come on top.
	for i, f := range rec.Frames {
		if f.NoImage {
			arr.ArrivalUs[i] = NeverArrivesUs
		}
	}
	return arr.ArrivalUs, nil, nil
}

// checkFreshOut fails early, before any work, if out exists and is not empty.
func checkFreshOut(out string) error {
	entries, err := os.ReadDir(out)
	if errors.Is(err, os.ErrNotExist) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("replay: output %s: %w", out, err)
	}
	if len(entries) > 0 {
		return fmt.Errorf("replay: output %s exists and is not empty; choose another --out or pass --overwrite: %w", out, ErrDestExists)
	}
	return nil
}

func bucketLabel(ageMs float64) string {
	b := AgeBuckets()
	if i := BucketIndex(ageMs); i >= 0 && i < len(b) {
		return b[i].Label
	}
	return "?"
}

func closeExample(e Example) {
	for _, m := range []gocv.Mat{e.True, e.Hold, e.Rotation, e.Predicted} {
		if m.Ptr() != nil {
			m.Close()
		}
	}
}

// replayer holds the per-tick machinery and its buffers.
type replayer struct {
	filler    *predictor.Filler
	synth     *predictor.Synthesizer
	scorer    *Scorer
	now       func() time.Time
	held      int     // frame index the filler holds, -1 if none
	captureUs []int64 // each frame's capture time

	// noTruth lists the missing ticks without a true frame to score
	// against; noFrameYet counts those before any real frame.
	noTruth    []int
	noFrameYet int

	shown, unlabelled, rotation, scratch, warp gocv.Mat
	shownValid                                 bool // shown holds the frame of the tick just filled

	cam    predictor.Camera
	cm     predictor.ConfidenceModel
	meter  *MisalignmentMeter
	region image.Rectangle
	refs   [][2]float64
	// truth is the exact pose per tick (truth.csv), nil when the ticks
	// are not the recording's frames (a paired live session) or there
	// is none.
	truth []recording.Truth

	// truthImg and heldImg are the images of the tick just scored, borrowed
	// from the frame source until its next Get.
	truthImg, heldImg gocv.Mat
	// marks scores the marks of things that moved against the drive's
	// masks; nil without masks (or on a paired session's ticks).
	marks *markScorer
	// predicted is ReplayConfig.predicted.
	predicted func(k, held int, unlabelled, truth, heldImg gocv.Mat) error
	// marked is ReplayConfig.marked.
	marked func(d markedTick) error
	// olderUs is holdNewest's scratch: capture times of the older frames.
	olderUs []int64
}

func newReplayer(cam predictor.Camera, pol predictor.Policy, cm predictor.ConfidenceModel, flt predictor.MotionSource, now func() time.Time) (*replayer, error) {
	filler, err := predictor.NewFiller(predictor.FillerConfig{Camera: cam, Policy: pol, Motion: flt, Confidence: cm})
	if err != nil {
		return nil, err
	}
	synth, err := predictor.NewSynthesizer(cam, predictor.SynthOptions{})
	if err != nil {
		filler.Close()
		return nil, err
	}
	r := &replayer{
		filler: filler, synth: synth, scorer: NewScorer(), now: now, held: -1,
		shown: gocv.NewMat(), unlabelled: gocv.NewMat(), rotation: gocv.NewMat(), scratch: gocv.NewMat(), warp: gocv.NewMat(),
		cam: cam, cm: cm, meter: NewMisalignmentMeter(), region: RoadRegion(cam), refs: ReferencePixels(cam, cm),
	}
	filler.Now = now
	filler.Unlabelled = &r.unlabelled
	// Warm up: OpenCV initialises its warp tables and thread pool on the
	// first call, which would otherwise show up as one slow synthesis in
	// the timing statistics of every replay.
	warm := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(128, 128, 128, 0), cam.Height, cam.Width, gocv.MatTypeCV8UC3)
	defer warm.Close()
	if _, err := synth.Synthesize(warm, filter.Motion{DxM: 1}, &r.scratch); err != nil {
		r.Close()
		return nil, fmt.Errorf("warming up the synthesizer: %w", err)
	}
	return r, nil
}

func (r *replayer) Close() {
	r.filler.Close()
	r.synth.Close()
	r.scorer.Close()
	r.meter.Close()
	r.marks.Close()
	for _, m := range []gocv.Mat{r.shown, r.unlabelled, r.rotation, r.scratch, r.warp} {
		m.Close()
	}
}

// replayDriver is the replay's side of the display clock (cadence.Handler):
// it feeds telemetry to the filter, fills and scores missing ticks, and
// tracks the two newest real frames the display has had, which the filler
// loads only when a gap needs them.
type replayDriver struct {
	r         *replayer
	flt       *filter.Filter
	log       *slog.Logger
	frames    frameGetter
	captureUs []int64
	hasTruth  []bool
	// last and beforeLast are the newest frame handed to the clock and the
	// one before it, in capture order (-1: none), as the live relay's
	// filler keeps them.
	last, beforeLast int
	// older holds the frames handed to the clock before beforeLast, in
	// capture order, the newest predictor.MoverHistory of them (the ones
	// the live filler keeps for the movers' motion evidence).
	older []int
	emit  func(TickRow) error
	// onLive, if not nil, runs for each LIVE tick after its row (the
	// lead's scores).
	onLive func(k int) error
	// beforeMissing, if not nil, runs before a missing tick is filled,
	// with its deadline (the operator's commands sent by then).
	beforeMissing func(deadlineUs int64)
	err           error // the first error; the replay stops
}

// Telemetry feeds one sample to the filter (cadence.Handler).
func (d *replayDriver) Telemetry(s filter.Sample, _ int64) {
	if err := d.flt.Add(s); err != nil {
		d.log.Debug("telemetry sample rejected", "t_us", s.TimeUs, "err", err)
	}
}

// Missing fills and scores tick t (cadence.Handler).
func (d *replayDriver) Missing(t cadence.Tick) {
	if d.err != nil || t.K >= len(d.captureUs) {
		return
	}
	if d.beforeMissing != nil {
		d.beforeMissing(t.DeadlineUs)
	}
	row, err := d.r.missing(t, d.captureUs[t.K], d.last, d.beforeLast, d.older, d.frames, d.hasTruth)
	if err != nil {
		d.err = fmt.Errorf("tick %d (t_capture_us %d): %w", t.K, d.captureUs[t.K], err)
		return
	}
	if err := d.emit(row); err != nil {
		d.err = fmt.Errorf("tick %d: %w", t.K, err)
	}
}

// frame takes the clock's verdict on frame j: the row of the tick it is
// shown on if LIVE (by the capture-jitter rule that may be the tick before
// or after j), and the frame becomes the newest the display has (LIVE or
// late).
func (d *replayDriver) frame(j int, v cadence.Frame) {
	if j > d.last {
		if d.beforeLast >= 0 {
			if len(d.older) == predictor.MoverHistory {
				d.older = append(d.older[:0], d.older[1:]...)
			}
			d.older = append(d.older, d.beforeLast)
		}
		d.last, d.beforeLast = j, d.last
	}
	k := v.Tick.K
	if !v.Live || k >= len(d.captureUs) {
		// Late, or moved on past the replay's last tick: nothing to show.
		return
	}
	d.r.shownValid = false
	row := NewTickRow(k, d.captureUs[k], TickLive, 0)
	row.Confidence = 1
	if err := d.emit(row); err != nil {
		d.err = fmt.Errorf("tick %d: %w", k, err)
		return
	}
	if d.onLive != nil {
		if err := d.onLive(k); err != nil {
			d.err = fmt.Errorf("tick %d: %w", k, err)
		}
	}
}

// missing fills and scores tick t, whose frame is not due-and-here, from
// frame last (and beforeLast, the frame before it, and older, the frames
// before that); captureUs is the row's capture time.
func (r *replayer) missing(t cadence.Tick, captureUs int64, last, beforeLast int, older []int, frames frameGetter, hasTruth []bool) (TickRow, error) {
	k := t.K
	r.truthImg, r.heldImg = gocv.Mat{}, gocv.Mat{}
	r.shownValid = false
	if err := r.holdNewest(frames, beforeLast, last, older); err != nil {
		return TickRow{}, err
	}
	if err := r.filler.SetPolicy(t.Policy); err != nil {
		return TickRow{}, err
	}
	tick, err := r.filler.MissingWith(predictor.MethodGround, t.TargetUs, &r.shown)
	switch {
	case errors.Is(err, predictor.ErrNoFrame):
		// No real frame yet: the operator sees a "no picture" frame;
		// nothing to score.
		row := NewTickRow(k, captureUs, TickNoPicture, 0)
		row.Confidence = 0
		r.noFrameYet++
		return row, nil
	case errors.Is(err, predictor.ErrTargetBeforeFrame):
		// The newest frame was captured after this tick's time: the
		// display shows nothing new (as the live relay).
		row := NewTickRow(k, captureUs, TickNotShown, 0)
		row.Confidence = 0
		r.noFrameYet++
		return row, nil
	case err != nil:
		return TickRow{}, err
	}
	r.shownValid = true
	row := NewTickRow(k, captureUs, tick.State.String(), tick.AgeMs)
	row.Confidence = tick.Confidence
	if tick.MotionErr == nil {
		row.SigmaPx = tick.SigmaPx
		if j := r.held; j >= 0 && j < len(r.truth) && k < len(r.truth) {
			t0, t1 := r.truth[j], r.truth[k]
			c, sn := math.Cos(t0.YawRad), math.Sin(t0.YawRad)
			dx, dy := t1.XM-t0.XM, t1.YM-t0.YM
			tr := [3]float64{c*dx + sn*dy, -sn*dx + c*dy, math.Remainder(t1.YawRad-t0.YawRad, 2*math.Pi)}
			pred := [3]float64{tick.Motion.DxM, tick.Motion.DyM, tick.Motion.DyawRad}
			if px, err := TruthMisalignmentPx(r.cam, r.cm, pred, tr); err == nil {
				row.TruthMisalignMrad = PxToMrad(px, r.cam.Fx)
			}
		}
	}
	row.LabelShare = tick.LabelFraction
	if tick.State == predictor.StatePredicted {
		row.SynthMs = float64(tick.SynthDuration) / float64(time.Millisecond)
		row.UnfilledShare = tick.UnfilledFraction
		if r.marks != nil && r.held >= 0 {
			if err := r.marks.score(&row, r.filler, r.cam, r.held, k, tick.AgeMs, tick.Motion); err != nil {
				return TickRow{}, err
			}
			if r.marked != nil {
				if err := r.marked(r.marks.tick(r.filler, r.held, k, tick.AgeMs, r.shown, tick.Motion)); err != nil {
					return TickRow{}, err
				}
			}
		}
	}
	if !hasTruth[k] {
		// Lost on the live link (and not recorded on board): the state
		// is replayed, but there is no true frame to score against.
		r.noTruth = append(r.noTruth, k)
		return row, nil
	}
	truth, err := frames.Get(k)
	if err != nil {
		return TickRow{}, err
	}
	held, err := frames.Get(r.held)
	if err != nil {
		return TickRow{}, err
	}
	r.truthImg, r.heldImg = truth, held
	if row.Hold, err = r.scorer.Score(held, truth); err != nil {
		return TickRow{}, fmt.Errorf("scoring hold: %w", err)
	}
	// What stopgap shows, before label and desaturation.
	if row.Predicted, err = r.scorer.Score(r.unlabelled, truth); err != nil {
		return TickRow{}, fmt.Errorf("scoring predicted: %w", err)
	}
	if r.predicted != nil && tick.State == predictor.StatePredicted {
		if err := r.predicted(k, r.held, r.unlabelled, truth, held); err != nil {
			return TickRow{}, err
		}
	}
	// The rotation-only baseline always warps (it has no cutoff); without
	// a usable motion it can only hold.
	if tick.MotionErr == nil {
		if _, err := r.synth.SynthesizeRotation(held, tick.Motion, &r.rotation); err != nil {
			return TickRow{}, fmt.Errorf("rotation baseline: %w", err)
		}
	} else {
		held.CopyTo(&r.rotation)
	}
	if row.Rotation, err = r.scorer.Score(r.rotation, truth); err != nil {
		return TickRow{}, fmt.Errorf("scoring rotation: %w", err)
	}
	// The prediction itself, shown or not: scores and misalignment.
	if tick.MotionErr == nil {
		warp := r.unlabelled
		if tick.State != predictor.StatePredicted {
			if _, _, err := r.filler.WarpHeld(tick.Motion, &r.warp); err != nil {
				return TickRow{}, fmt.Errorf("warping the held frame: %w", err)
			}
			warp = r.warp
			if row.Warp, err = r.scorer.Score(warp, truth); err != nil {
				return TickRow{}, fmt.Errorf("scoring the warp: %w", err)
			}
		} else {
			row.Warp = row.Predicted
		}
		mm, err := r.meter.Measure(warp, truth, r.region, r.refs)
		if err != nil {
			return TickRow{}, err
		}
		row.MisalignPx = mm.MaxPx
		row.MisalignMrad = PxToMrad(mm.MaxPx, r.cam.Fx)
	}
	return row, nil
}

// holdNewest makes the filler hold frame last with beforeLast as the frame
// before it (-1: none), loading them only if it does not hold them yet, and
// the one of older (frames before beforeLast, in capture order) that the
// movers compare last with.
func (r *replayer) holdNewest(frames frameGetter, beforeLast, last int, older []int) error {
	if last < 0 || last == r.held {
		return nil
	}
	wasBefore := r.held >= 0 && r.held == beforeLast
	img, err := frames.Get(last)
	if err != nil {
		return err
	}
	if err := r.filler.Hold(img, r.capture(last)); err != nil {
		return fmt.Errorf("holding frame %d: %w", last, err)
	}
	r.held = last
	if beforeLast < 0 {
		return nil
	}
	if !wasBefore { // else the frame held before is the one before last
		if img, err = frames.Get(beforeLast); err != nil {
			return err
		}
		if err := r.filler.HoldPrevious(img, r.capture(beforeLast)); err != nil {
			return fmt.Errorf("frame %d before frame %d: %w", beforeLast, last, err)
		}
	}
	r.olderUs = r.olderUs[:0]
	for _, j := range older {
		r.olderUs = append(r.olderUs, r.capture(j))
	}
	k, ok := r.filler.MoverFrameWanted(r.capture(last), r.olderUs)
	if !ok {
		return nil
	}
	if img, err = frames.Get(older[k]); err != nil {
		return err
	}
	if err := r.filler.HoldOlder(img, r.capture(older[k])); err != nil {
		return fmt.Errorf("frame %d before frame %d: %w", older[k], beforeLast, err)
	}
	return nil
}

// capture returns frame j's capture time.
func (r *replayer) capture(j int) int64 { return r.captureUs[j] }

// example copies the images of the tick just scored for the report.
func (r *replayer) example(row TickRow) Example {
	e := Example{Tick: row.Tick, AgeMs: row.AgeMs, State: row.State, Confidence: row.Confidence}
	e.True = gocv.NewMat()
	e.Hold = gocv.NewMat()
	e.Rotation = gocv.NewMat()
	e.Predicted = gocv.NewMat()
	r.truthImg.CopyTo(&e.True)
	r.heldImg.CopyTo(&e.Hold)
	r.rotation.CopyTo(&e.Rotation)
	r.shown.CopyTo(&e.Predicted)
	return e
}

// ErrReplayInput means the recording or the replay settings cannot be
// replayed as given; the wrapping error names the file, line or setting.
var ErrReplayInput = errors.New("bench: replay input unusable")
