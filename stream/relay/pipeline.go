package relay

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"slices"
	"sync"
	"sync/atomic"
	"time"

	"gocv.io/x/gocv"

	"stopgap/filter"
	"stopgap/internal/display"
	"stopgap/predictor"
	"stopgap/stream/cadence"
	"stopgap/stream/console"
	"stopgap/stream/ingest"
)

// pipeline is the per-session state: ingest goroutines feed the display loop,
// which owns the filter, the filler and the output buffers.
type pipeline struct {
	r    *Relay
	cfg  Config
	log  *slog.Logger
	sess ingest.Session
	in   *frameIngest
	// lastTelNs is the arrival (Unix ns) of the latest telemetry message,
	// read or not; the ingest's timer watches it during a video silence.
	lastTelNs atomic.Int64

	pool   []picture
	free   chan *picture
	frames chan frameEvent
	// needBGR: every decoded frame is converted to BGR by the ingest,
	// because the recording or the video ego-motion reads each one; fixed
	// at creation (read by the ingest goroutine too).
	needBGR bool
	// def holds the frames that passed through, not yet converted, until
	// a gap needs them (see deferred).
	def deferred
	tel chan telEvent
	// drained is drain's buffer (display loop only).
	drained []drainItem

	flt    *filter.Filter
	filler *predictor.Filler
	ego    *predictor.EgoMotion // video ego-motion, nil unless Config.VideoMotion
	out    gocv.Mat             // labelled output frame
	encBuf []byte
	meta   console.Meta

	// clock decides every tick (stream/cadence.Clock); the pipeline is
	// its real-time driver (the cadence.Handler).
	clock        *cadence.Clock
	vehicleClock bool
	// Recording: tick k is row recBase+k; rows below recStart belong to
	// ticks shown before the session reached the vehicle clock (or to an
	// earlier session) and are not recorded. Both are fixed once, when the
	// session switches to the vehicle clock (recording on).
	recording bool
	recBase   int
	recStart  int

	lastDelayMs float64
	link        console.LinkStats
	lastStatsAt time.Time
	prevLost    int64
	prevHighest uint32
	prevDrops   [3]uint64 // ingest queue full, duplicate, too old
	prevRepair  ingest.RepairStats
}

func newPipeline(r *Relay, s ingest.Session) (*pipeline, error) {
	cfg := r.cfg
	p := &pipeline{r: r, cfg: cfg, sess: s, log: r.log.With("session", short(s.ID()))}
	var err error
	p.clock, err = cadence.NewClock(cadence.ClockConfig{
		PeriodUs:     cfg.periodUs(),
		AllowanceUs:  int64(math.Round(cfg.AllowanceMs * 1000)),
		FixedLatency: cfg.LatencyMs != 0,
		LatencyUs:    int64(math.Round(cfg.LatencyMs * 1000)),
		Policy:       cfg.Policy,
		// The operator's cutoff, read once per tick: the value decided
		// with is the one recorded.
		Cutoff:    func(int) float64 { return r.console.Cutoff() },
		HistoryUs: p.maxTelAgeUs(),
	})
	if err != nil {
		return nil, fmt.Errorf("relay: display clock: %w: %w", ErrBadConfig, err)
	}
	p.flt, err = filter.New(cfg.Filter)
	if err != nil {
		return nil, fmt.Errorf("relay: filter: %w: %w", ErrBadConfig, err)
	}
	if err := p.newFiller(); err != nil {
		return nil, err
	}
	if cfg.VideoMotion {
		if p.ego, err = predictor.NewEgoMotion(predictor.EgoMotionConfig{Camera: cfg.Camera, Seed: 1}); err != nil {
			p.filler.Close()
			return nil, fmt.Errorf("relay: video ego-motion: %w: %w", ErrBadConfig, err)
		}
	}
	p.out = gocv.NewMat()
	p.needBGR = r.rec != nil || p.ego != nil
	p.pool = make([]picture, cfg.FrameQueue)
	p.free = make(chan *picture, cfg.FrameQueue)
	p.frames = make(chan frameEvent, cfg.FrameQueue)
	for i := range p.pool {
		p.free <- &p.pool[i] // BGR allocated on the picture's first conversion
	}
	p.tel = make(chan telEvent, cfg.TelemetryQueue)
	r.gate.ForgetCaptureTimes() // a new session's timeline
	if lat, final := p.clock.Latency(); final {
		r.setLatency(lat, true)
	}
	p.in, err = newIngest(p)
	if err != nil {
		p.close()
		return nil, fmt.Errorf("relay: %w", err)
	}
	return p, nil
}

func (p *pipeline) newFiller() error {
	if p.filler != nil {
		p.filler.Close()
	}
	pol := p.cfg.Policy
	pol.CutoffConfidence = p.r.console.Cutoff() // each tick's own in Missing
	f, err := predictor.NewFiller(predictor.FillerConfig{Camera: p.cfg.Camera, Policy: pol, Motion: p.flt})
	if err != nil {
		return fmt.Errorf("relay: gap filler: %w", err)
	}
	f.Now = p.cfg.Now
	// The gap filler's scratch is made now, not on the first gap's
	// PREDICTED tick, which would otherwise pay for it (about 0.1 s of
	// CPU at 1280x720, enough to make a busy relay late for the ticks
	// after it). Nothing shown depends on it (predictor.Filler.Warm).
	if err := f.Warm(); err != nil {
		p.log.Warn("preparing the gap filler failed; the first gap will prepare it", "err", err)
	}
	p.filler = f
	return nil
}

func (p *pipeline) close() {
	if p.in != nil {
		p.in.close()
	}
	if p.filler != nil {
		p.filler.Close()
	}
	if p.ego != nil {
		p.ego.Close()
	}
	p.out.Close()
	p.def.close()
	for i := range p.pool {
		p.pool[i].close()
	}
}

// run starts the ingest goroutines and runs the display loop until the session
// or ctx ends.
func (p *pipeline) run(ctx context.Context) error {
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	var wg sync.WaitGroup
	rtpErr := make(chan error, 1)
	wg.Add(3)
	go func() { defer wg.Done(); rtpErr <- p.in.runRTP(ctx) }()
	go func() { defer wg.Done(); p.in.runTimers(ctx) }()
	go func() { defer wg.Done(); p.runTelemetry(ctx) }()
	p.log.Info("ingest session started")

	timer := p.cfg.NewTimer(time.Hour)
	defer timer.Stop()
	var err error
loop:
	for {
		p.r.beat(p.cfg.Now())
		// Once ticks are due, a telemetry sample does not wake the loop:
		// the display clock would only hold it until the tick it arrived
		// before (cadence.Clock.Telemetry), so the samples queued are
		// handed over before each frame and each tick instead, in arrival
		// order, which is before any decision made after they arrived.
		// Before the first frame each one is given to the filter at once.
		tel := p.tel
		if p.armTimer(timer) {
			tel = nil
		}
		select {
		case <-ctx.Done():
			err = ctx.Err()
			break loop
		case e := <-rtpErr:
			// The RTP reader ended: the session is over. Show what is queued.
			err = e
			p.drain()
			break loop
		case ev := <-p.frames:
			p.drainTelemetry()
			p.onFrame(ev)
		case te := <-tel:
			p.onTelemetry(te)
		case <-timer.C():
			p.drain()
			p.clock.Advance(p, p.cfg.Now().UnixMicro())
		}
	}
	cancel()
	p.sess.Close()
	wg.Wait()
	// Return mats still queued.
	for {
		select {
		case ev := <-p.frames:
			p.free <- ev.pic
			continue
		default:
		}
		break
	}
	if p.r.rec != nil {
		p.r.rec.endSession()
	}
	p.log.Info("ingest session ended", "frames_in", p.r.met.framesIn.Load())
	if errors.Is(err, context.Canceled) {
		return nil
	}
	return err
}

// drain processes every queued frame and telemetry event in time order.
// It runs before every tick; p.drained is its reused buffer, so it does not
// allocate once that has grown to the queues' depth.
func (p *pipeline) drain() {
	items := p.drained[:0]
	for {
		select {
		case ev := <-p.frames:
			items = append(items, drainItem{ts: ev.readyUs, isFrame: true, f: ev})
			continue
		case te := <-p.tel:
			items = append(items, drainItem{ts: te.arrivalUs, t: te})
			continue
		default:
		}
		break
	}
	slices.SortStableFunc(items, func(a, b drainItem) int { return cmp.Compare(a.ts, b.ts) })
	for _, it := range items {
		if it.isFrame {
			p.onFrame(it.f)
		} else {
			p.onTelemetry(it.t)
		}
	}
	clear(items) // drop the pictures' pointers
	p.drained = items[:0]
}

// drainItem is a queued frame (isFrame) or telemetry sample, at its time.
type drainItem struct {
	ts      int64
	isFrame bool
	f       frameEvent
	t       telEvent
}

// drainTelemetry hands every queued telemetry sample to the display clock,
// in arrival order.
func (p *pipeline) drainTelemetry() {
	for {
		select {
		case te := <-p.tel:
			p.onTelemetry(te)
		default:
			return
		}
	}
}

// armTimer sets the timer to the deadline of the next unresolved tick and
// reports whether there is one (false before the first frame).
func (p *pipeline) armTimer(t Timer) bool {
	t.Stop()
	next, ok := p.clock.NextDeadlineUs()
	if !ok {
		t.Reset(IdleWake) // wake anyway: the liveness probe watches the loop
		return false
	}
	// One microsecond after the deadline: Advance fills ticks whose
	// deadline has passed, and a frame ready at the deadline is in time.
	d := time.Duration(next+1-p.cfg.Now().UnixMicro()) * time.Microsecond
	if d < 0 {
		d = 0
	}
	t.Reset(d)
	return true
}

// onTelemetry hands one sample to the display clock, which gives it to the
// filter (Telemetry) before the first tick whose deadline it arrived by, as
// the replay does, or drops it as later than the filter's history window
// (counted as "too_late": an ordered, reliable data channel delivers such
// samples in a burst after an outage, and none can change a tick the display
// still has to fill).
func (p *pipeline) onTelemetry(te telEvent) {
	if !p.clock.Telemetry(p, te.sample, te.arrivalUs) {
		p.r.met.telemetryRejected.inc("too_late")
	}
}

// maxTelAgeUs is the filter's history window (filter.Config.HistoryUs).
func (p *pipeline) maxTelAgeUs() int64 {
	if h := p.cfg.Filter.HistoryUs; h > 0 {
		return h
	}
	return filter.DefaultHistoryUs
}

// Telemetry is the display clock's instruction to feed one sample to the
// filter (cadence.Handler); arrivalUs is the time the display had it by.
func (p *pipeline) Telemetry(s filter.Sample, arrivalUs int64) {
	p.feed(telEvent{sample: s, arrivalUs: arrivalUs})
}

// feed adds one sample to the filter (and the recording).
func (p *pipeline) feed(te telEvent) {
	if err := p.flt.Add(te.sample); err != nil {
		var re *filter.RejectError
		reason := "other"
		if errors.As(err, &re) {
			reason = re.Reason.String()
		}
		p.r.met.telemetryRejected.inc("filter_" + reason)
		return
	}
	p.r.met.telemetryIn.Add(1)
	if p.r.rec != nil {
		p.r.rec.telemetry(te)
	}
}

// onFrame hands one decoded frame to the display clock, which fills the
// ticks that became due first (Missing), and then shows it (LIVE) or holds
// it for later gaps (late). A LIVE frame that passed through is kept
// unconverted until a gap needs it (deferred); any other frame reaches the
// Filler at once, after the deferred ones.
func (p *pipeline) onFrame(ev frameEvent) {
	defer func() { p.free <- ev.pic }()
	if ev.hasShift {
		p.shift(ev.shiftUs)
	}
	if ev.vehicleClk && !p.vehicleClock {
		p.startRecording()
	}
	p.lastDelayMs = float64(ev.readyUs-ev.captureUs) / 1000
	_, wasFinal := p.clock.Latency()
	v := p.clock.Frame(p, ev.captureUs, ev.readyUs)
	if lat, final := p.clock.Latency(); !wasFinal {
		if final {
			p.log.Info("nominal latency estimated and frozen for this session", "latency_ms", float64(lat)/1000, "frames", cadence.LatencyFrames)
		}
		p.r.setLatency(lat, final)
	}
	k := v.Tick.K
	// The video's ego-motion of this frame is usable from its arrival on,
	// like the telemetry that arrived with it.
	p.observeVideo(&ev)
	if !v.Live {
		// Late: it becomes the held frame for later gaps, but is not
		// shown. The recording keeps the arrival the display had
		// (cadence.Frame.ArrivalUs), so the replay decides as it did.
		p.r.met.lateFrames.Add(1)
		if err := p.handOver(ev.pic); err != nil {
			p.log.Warn("holding a late frame failed", "err", err)
		} else if err := p.filler.Hold(ev.pic.bgr, ev.captureUs); err != nil {
			p.log.Warn("holding a late frame failed", "err", err)
		}
		p.log.Debug("late frame held, not shown", "tick", k, "late_us", ev.readyUs-v.Tick.DeadlineUs,
			"last_packet_late_us", ev.lastPktUs-v.Tick.DeadlineUs, "decode_us", ev.decodeDur.Microseconds(),
			"off_grid_us", ev.captureUs-v.Tick.TargetUs)
		if v.ArrivalUs != ev.readyUs {
			p.log.Debug("frame decoded in time reached the display after its tick was filled", "tick", k, "moved_us", v.ArrivalUs-ev.readyUs)
		}
		p.record(func(rc *recorder) { rc.frame(p.recIndex(k), ev.captureUs, v.ArrivalUs, ev.rtpTS, ev.pic.bgr) })
		return
	}
	if v.MovedOn {
		// The capture-jitter and outage rules (stream/cadence/slot.go).
		p.r.met.framesMovedOn.Add(1)
		p.log.Debug("frame shown on the open tick next to its own", "shown_on", k, "ready_before_deadline_us", v.Tick.DeadlineUs-ev.readyUs)
	}
	if v.Resumed {
		p.r.met.framesResumed.Add(1)
		p.log.Info("first frame after an outage shown at once, though later than its own tick", "shown_on", k)
	}
	var tick predictor.Tick
	var err error
	switch {
	case !ev.forwarded && p.r.gate.Forwarding():
		// Superseded: this frame was not passed through, but a newer
		// vehicle keyframe was while it waited for the display loop (a
		// busy machine), so the console shows a newer real picture
		// already. Encoding this one would put an older picture after it
		// and, as a frame of the relay's own, end the run the keyframe
		// opened: every real frame until the next vehicle keyframe would
		// be transcoded. The tick is LIVE as decided; only its meta goes
		// out, and the Filler holds the frame for later gaps.
		ev.superseded = true
		p.r.met.framesSuperseded.Add(1)
		if err = p.handOver(ev.pic); err == nil {
			tick, err = p.filler.Live(ev.pic.bgr, ev.captureUs, nil)
		}
	case ev.forwarded && !ev.pic.hasBGR:
		// Shown as the vehicle sent it: nothing to draw, and the BGR
		// picture only if a gap comes.
		held, have := p.filler.LastCaptureUs()
		p.def.add(ev.pic, ev.captureUs, held, have)
		tick = predictor.LiveTick(ev.captureUs)
	case ev.forwarded:
		if err = p.def.flush(p.filler, p.cfg.Camera.Width, p.cfg.Camera.Height); err == nil {
			tick, err = p.filler.Live(ev.pic.bgr, ev.captureUs, nil)
		}
	default:
		if err = p.handOver(ev.pic); err == nil {
			tick, err = p.filler.Live(ev.pic.bgr, ev.captureUs, &p.out)
		}
	}
	if err != nil {
		p.log.Warn("showing a live frame failed", "err", err)
		p.recordNotShown(v.Tick)
		return
	}
	p.emit(v.Tick, ev.captureUs, tick, &ev)
	p.record(func(rc *recorder) { rc.frame(p.recIndex(k), ev.captureUs, v.ArrivalUs, ev.rtpTS, ev.pic.bgr) })
}

// handOver prepares the Filler for a frame it must see now: the deferred
// frames go in first (they are older), and pc is converted to BGR if the
// ingest left it as I420.
func (p *pipeline) handOver(pc *picture) error {
	if err := p.def.flush(p.filler, p.cfg.Camera.Width, p.cfg.Camera.Height); err != nil {
		return err
	}
	return pc.toBGR()
}

// observeVideo gives the frame to the video ego-motion, if on, and its
// estimate to the filter: usable from the frame's arrival on, like the
// telemetry that arrived with it. A frame older than the last one observed
// (late) is skipped.
func (p *pipeline) observeVideo(ev *frameEvent) {
	if p.ego == nil {
		return
	}
	est, ok, err := p.ego.Observe(ev.pic.bgr, ev.captureUs) // converted by the ingest (needBGR)
	switch {
	case errors.Is(err, predictor.ErrTimeOrder):
		return
	case err != nil:
		p.log.Warn("video ego-motion failed", "err", err)
		return
	case !ok:
		return
	}
	if err := p.flt.Add(est.Sample()); err != nil {
		p.log.Debug("video ego-motion sample rejected", "err", err)
	}
}

// Missing fills tick t at its deadline with the tick's own policy (the
// display clock's instruction, cadence.Handler).
func (p *pipeline) Missing(t cadence.Tick) {
	if late := p.cfg.Now().UnixMicro() - t.DeadlineUs; !p.cfg.DrawOverdue && float64(late) > p.clock.Grid().PeriodUs() {
		// Overrun: the display loop is more than a period behind this
		// tick's deadline, so the next tick is due as well and will be
		// filled right after. A picture made for this one would reach
		// the viewer after its successor was due: it is decided (and
		// recorded) but not drawn, NOT_SHOWN. At most one overdue tick
		// per catch-up is drawn, so a relay slowed by a busy machine
		// catches up instead of spending each period on pictures of
		// ticks already past (a PREDICTED tick at 1280x720 costs more
		// than a period when two relays share a core).
		p.r.met.overruns.Add(1)
		p.log.Debug("tick not drawn: the display loop is behind", "tick", t.K, "after_deadline_us", late)
		p.recordNotShown(t)
		return
	}
	if !p.cfg.DrawOverdue && len(p.frames) > 0 {
		// Behind the vehicle: a real frame decoded since this catch-up
		// began waits for the display loop (run drains the queue before
		// every Advance, so the queue fills only while ticks are being
		// filled). A picture for this tick (a gap's first PREDICTED tick
		// costs about 0.1 s of CPU at 1280x720, and the relay's frame
		// ends pass-through) would delay that frame and the ones after
		// it, and on a busy machine make them late in turn: decided and
		// recorded, not drawn (NOT_SHOWN, as an overrun).
		p.r.met.framesWaiting.Add(1)
		p.log.Debug("tick not drawn: a newer frame waits for the display loop", "tick", t.K, "waiting", len(p.frames))
		p.recordNotShown(t)
		return
	}
	if err := p.def.flush(p.filler, p.cfg.Camera.Width, p.cfg.Camera.Height); err != nil {
		p.log.Warn("the frames before a gap could not reach the gap filler", "tick", t.K, "err", err)
	}
	if err := p.filler.SetPolicy(t.Policy); err != nil {
		// The clock hands only valid cutoffs; keep the check honest.
		p.log.Warn("tick policy refused", "tick", t.K, "err", err)
	}
	if p.log.Enabled(context.Background(), slog.LevelDebug) {
		p.log.Debug("tick filled without a frame", "tick", t.K, "after_deadline_us", p.cfg.Now().UnixMicro()-t.DeadlineUs)
	}
	tick, err := p.filler.MissingWith(predictor.MethodGround, t.TargetUs, &p.out)
	switch {
	case errors.Is(err, predictor.ErrNoFrame):
		// A labelled "no picture" frame (NO_PICTURE).
	case errors.Is(err, predictor.ErrTargetBeforeFrame):
		// A newer frame was already shown (a frame arrived early): showing
		// an older tick now would go back in time. Record it only.
		p.recordNotShown(t)
		return
	case err != nil:
		p.log.Warn("filling a missing tick failed", "tick", t.K, "err", err)
		p.recordNotShown(t)
		return
	}
	p.r.met.synth.observe(tick.SynthDuration)
	p.emit(t, t.TargetUs, tick, nil)
}

// emit encodes the output frame and sends it with its meta to the console.
// t is the display clock's tick, whose cutoff is the one decided with and
// recorded; captureUs is the frame's capture time (LIVE) or t's target.
// A LIVE frame that passed through (ev.forwarded) was sent by the ingest
// already, and a superseded one (ev.superseded, see onFrame) is not sent:
// only their meta goes out here.
func (p *pipeline) emit(t cadence.Tick, captureUs int64, tick predictor.Tick, ev *frameEvent) {
	var encDur time.Duration
	var writtenAt time.Time
	trace := p.r.tracer.fn.Load()
	switch {
	case ev != nil && ev.forwarded:
		writtenAt = ev.forwardedAt
	case ev != nil && ev.superseded:
		// No output frame (see onFrame).
	default:
		var sent, refused bool
		encDur, sent, refused = p.encodeOwn(t, captureUs)
		switch {
		case refused && ev != nil:
			// A newer real frame passed through while this one waited
			// (see encodeOwn): superseded, only its meta goes out.
			ev.superseded = true
			p.r.met.framesSuperseded.Add(1)
		case refused:
			p.log.Debug("tick not drawn: a newer real frame passed through already", "tick", t.K)
			p.recordNotShown(t)
			return
		case !sent:
			return
		default:
			if trace != nil {
				writtenAt = p.cfg.Now()
			}
			if ev != nil {
				p.r.met.addedLatency.observe(p.cfg.Now().Sub(ev.lastPktAt) - ev.decodeDur - encDur)
			}
		}
	}
	cutoff := t.Policy.CutoffConfidence
	conf, age := finite(tick.Confidence), finite(tick.AgeMs)
	p.r.met.tick(tick.State, age)
	_, havePicture := p.filler.LastCaptureUs()
	havePicture = havePicture || p.def.n > 0
	pol := predictor.Policy{CutoffConfidence: cutoff, MaxAgeMs: p.cfg.Policy.MaxAgeMs}
	p.sendMeta(tickMeta(tick, captureUs, pol, havePicture))
	p.record(func(rc *recorder) { rc.tick(p.recIndex(t.K), captureUs, t.DeadlineUs, tick.State, age, conf, cutoff) })
	if trace != nil {
		tr := FrameTrace{Seq: p.meta.Seq, TickUs: captureUs, State: tick.State, Encode: encDur, WrittenAt: writtenAt}
		if ev != nil {
			tr.LastPacketAt, tr.Decode, tr.Forwarded, tr.Superseded = ev.lastPktAt, ev.decodeDur, ev.forwarded, ev.superseded
			tr.RTPTimestamp = ev.rtpTS
		}
		(*trace)(tr)
	}
}

// encodeOwn encodes the output frame, which shows the instant showsUs (a
// filled tick's target or a real frame's capture time), with the relay's
// encoder and writes it to the console, under the pass-through gate (a
// frame of the relay's own ends a run of forwarded frames and is then a
// keyframe). It returns the encode time and whether the frame was sent;
// refused: the gate refused it because a newer real frame passed through
// already (passthru.Gate.BeginOwnShowing: on a busy machine the vehicle's
// next frame can be forwarded while the display loop still predicts the
// tick before it), nothing recorded. A frame neither sent nor refused
// failed, and tick t is recorded as NOT_SHOWN.
func (p *pipeline) encodeOwn(t cadence.Tick, showsUs int64) (encDur time.Duration, sent, refused bool) {
	buf, err := p.out.DataPtrUint8()
	if err != nil {
		p.log.Warn("output frame unusable", "err", err)
		p.recordNotShown(t)
		return 0, false, false
	}
	var forceKey bool
	if p.cfg.DrawOverdue {
		// Ticks filled in batches faster than real time: the ingest
		// runs ahead of the display loop by design (Config.DrawOverdue).
		forceKey = p.r.gate.BeginOwn()
	} else {
		var ok bool
		if forceKey, ok = p.r.gate.BeginOwnShowing(showsUs); !ok {
			return 0, false, true
		}
	}
	if forceKey {
		p.r.enc.ForceKeyframe()
	}
	defer p.r.gate.EndOwn()
	t0 := p.cfg.Now()
	// The encoder's timestamps only steer its rate control and must
	// increase: one tick period per output frame, across sessions too
	// (capture times can step back when a session moves onto the vehicle
	// clock or a new session starts).
	p.r.encPtsUs += int64(math.Round(p.cfg.periodUs()))
	frame, _, err := p.r.enc.EncodeBGR(p.encBuf[:0], buf, p.r.encPtsUs)
	encDur = p.cfg.Now().Sub(t0)
	if err != nil {
		p.log.Warn("encoding the output frame failed", "err", err)
		p.recordNotShown(t)
		return 0, false, false
	}
	p.encBuf = frame
	p.r.met.encode.observe(encDur)
	period := time.Duration(p.cfg.periodUs() * float64(time.Microsecond))
	if err := p.r.console.WriteFrame(frame, period); err != nil && !errors.Is(err, console.ErrClosed) {
		p.log.Warn("console write failed", "err", err)
	}
	return encDur, true, false
}

// tickMeta is the console's meta message for a tick put on screen, in the
// tick's own state; timeUs is the frame's capture time (LIVE) or the tick's
// target, pol the policy the tick was decided with, and havePicture whether
// the filler holds a real frame. sendMeta adds Seq, Profile and Link.
func tickMeta(tick predictor.Tick, timeUs int64, pol predictor.Policy, havePicture bool) console.Meta {
	m := console.Meta{TimeUs: timeUs, State: tick.State, AgeMs: finite(tick.AgeMs), MaxAgeMs: pol.MaxAgeMs,
		Why: predictor.WhyStale(pol, tick, havePicture).String(), Confidence: finite(tick.Confidence), Cutoff: pol.CutoffConfidence}
	if tick.State == predictor.StateNoPicture {
		// No picture, so no picture age; the state itself says why.
		m.AgeMs, m.Why = 0, ""
	}
	return m
}

// notShownMeta is the console's meta message for tick t, decided but not
// put on screen: no picture age, no confidence (console.Meta.Validate).
func notShownMeta(t cadence.Tick, maxAgeMs float64) console.Meta {
	return console.Meta{TimeUs: t.TargetUs, State: display.StateNotShown, MaxAgeMs: maxAgeMs, Cutoff: t.Policy.CutoffConfidence}
}

// sendMeta numbers m one after the previous meta message, adds the profile,
// the display clock's tick period and the link statistics, and writes it to
// the console: one message per decided tick, so the page always knows what
// the tick put on screen, and how soon to expect the next one (a LIVE
// status expires on the page's clock after a few periods,
// console.StatusLateAfterMs).
func (p *pipeline) sendMeta(m console.Meta) {
	p.refreshLink()
	m.Seq, m.Profile, m.Link = p.meta.Seq+1, p.r.console.Profile(), p.link
	m.PeriodMs = p.clock.Grid().PeriodUs() / 1000
	p.meta = m
	if err := p.r.console.WriteMeta(p.meta); err != nil && !errors.Is(err, console.ErrClosed) {
		p.log.Warn("console meta failed", "err", err)
	}
}

// recordNotShown records tick t as NOT_SHOWN and tells the console: the
// viewer still sees the previous output frame. Every decided tick gets a
// row in the relay's ticks table: the recorder writes rows in index order
// and waits for each row's tick.
func (p *pipeline) recordNotShown(t cadence.Tick) {
	p.r.met.tick(display.StateNotShown, 0)
	p.sendMeta(notShownMeta(t, p.cfg.Policy.MaxAgeMs))
	p.record(func(rc *recorder) {
		rc.tick(p.recIndex(t.K), t.TargetUs, t.DeadlineUs, display.StateNotShown, 0, 0, t.Policy.CutoffConfidence)
	})
}

// refreshLink updates the link statistics about once per second.
func (p *pipeline) refreshLink() {
	now := p.cfg.Now()
	p.link.KeyframeRequests = p.r.met.keyframeRequestsSent()
	p.link.FramesIn = p.r.met.framesIn.Load()
	p.link.DelayMs = finite(p.lastDelayMs)
	var lastPkt time.Time
	if ns := p.in.lastArrivalNs.Load(); ns != 0 {
		lastPkt = time.Unix(0, ns)
	}
	p.link.NoPacketsMs = noPacketsMs(now, lastPkt)
	if !p.lastStatsAt.IsZero() && now.Sub(p.lastStatsAt) < time.Second {
		return
	}
	p.lastStatsAt = now
	st := p.sess.Stats()
	expected := int64(st.HighestSeq) - int64(p.prevHighest)
	lost := st.PacketsLost - p.prevLost
	if expected > 0 && lost >= 0 {
		p.link.LossPct = 100 * float64(lost) / float64(expected)
	} else {
		p.link.LossPct = 0
	}
	p.prevLost, p.prevHighest = st.PacketsLost, st.HighestSeq
	p.countDrops(st)
	p.countRepair(st.Repair)
	p.link.JitterMs = float64(st.Jitter) / float64(time.Millisecond)
}

// noPacketsMs returns console.LinkStats.NoPacketsMs at now for a link whose
// latest packet arrived at last (zero: none yet, which the console's
// UNKNOWN state covers).
func noPacketsMs(now, last time.Time) float64 {
	if last.IsZero() {
		return 0
	}
	if d := float64(now.Sub(last)) / float64(time.Millisecond); d >= console.NoPacketsAfterMs {
		return d
	}
	return 0
}

// shift moves the session timeline by d µs when capture times switch from
// the arrival anchor to the vehicle clock. The held frame's capture time is on
// the old timeline, so the filler starts over.
func (p *pipeline) shift(d int64) {
	p.clock.Shift(d)
	p.r.gate.ForgetCaptureTimes()
	p.def.drop()
	if err := p.newFiller(); err != nil {
		p.log.Error("recreating the gap filler failed", "err", err)
	}
}

// startRecording marks the session as on the vehicle clock and, if recording
// is on, places its block of rows: the first tick not yet handled (p.next, on
// the shifted timeline) becomes the recorder's next row. It is called once,
// before any tick or frame of the vehicle-clock timeline is handled, so every
// later tick k and the frame the display mapped to k share row recBase+k.
func (p *pipeline) startRecording() {
	p.vehicleClock = true
	p.clock.UseVehicleClock()
	if p.r.rec == nil {
		return
	}
	p.recording = true
	p.recStart = p.r.rec.nextIndex()
	p.recBase = p.recStart - p.clock.Next()
}

// recIndex returns the recording row of tick k, or -1 if tick k is not
// recorded (recording off, not yet on the vehicle clock, or shown before the
// recording started).
func (p *pipeline) recIndex(k int) int {
	if !p.recording {
		return -1
	}
	i := p.recBase + k
	if i < p.recStart {
		return -1
	}
	return i
}

// record runs fn on the recorder if this session is being recorded.
func (p *pipeline) record(fn func(*recorder)) {
	if !p.recording {
		return
	}
	fn(p.r.rec)
}

func finite(x float64) float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return 0
	}
	return x
}

// countRepair adds the session's loss-repair counters since the last call
// to the relay's.
func (p *pipeline) countRepair(r ingest.RepairStats) {
	m, prev := p.r.met, p.prevRepair
	m.repairGaps.Add(r.Gaps - min(prev.Gaps, r.Gaps))
	m.repairRepaired.Add(r.Repaired - min(prev.Repaired, r.Repaired))
	m.repairGaveUp.Add(r.GaveUp - min(prev.GaveUp, r.GaveUp))
	m.repairCancelled.Add(r.Cancelled - min(prev.Cancelled, r.Cancelled))
	m.repairSkipped.Add(r.SkippedGaps - min(prev.SkippedGaps, r.SkippedGaps))
	if r.RTT > 0 {
		m.repairRTTUs.Store(uint64(r.RTT.Microseconds()))
	}
	p.prevRepair = r
}

// countDrops adds to rtp_dropped the packets dropped outside Push's errors:
// by the ingest queue (whip) and as duplicates or too late (assembler).
func (p *pipeline) countDrops(st ingest.Stats) {
	p.in.mu.Lock()
	as := p.in.asm.Stats()
	p.in.mu.Unlock()
	now := [3]uint64{st.PacketsDropped, as.Duplicate, as.TooOld}
	names := [3]string{"ingest_queue_full", "duplicate", "too_old"}
	for i := range now {
		if now[i] > p.prevDrops[i] {
			p.r.met.rtpDropped.add(names[i], now[i]-p.prevDrops[i])
		}
	}
	p.prevDrops = now
}
