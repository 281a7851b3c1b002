package relay

import (
	"context"
	"errors"
	"fmt"
	"log/slog"
	"math"
	"sort"
	"sync"
	"time"

	"gocv.io/x/gocv"

	"stopgap/filter"
	"stopgap/predictor"
	"stopgap/stream/cadence"
	"stopgap/stream/console"
	"stopgap/stream/whip"
)

// pipeline is the per-session state: ingest goroutines feed the display loop,
// which owns the filter, the filler and the output buffers.
type pipeline struct {
	r    *Relay
	cfg  Config
	log  *slog.Logger
	sess IngestSession
	in   *ingest

	pool   []gocv.Mat
	free   chan *gocv.Mat
	frames chan frameEvent
	tel    chan telEvent
	// pendTel holds telemetry that arrived but whose tick has not been
	// handled yet (see onTelemetry).
	pendTel []telEvent

	flt    *filter.Filter
	filler *predictor.Filler
	out    gocv.Mat // labelled output frame
	held   gocv.Mat // scratch for late frames
	encBuf []byte
	meta   console.Meta

	// Session timeline (receiver and vehicle clocks in µs). The display
	// ticks lie on grid, locked to the vehicle's capture cadence
	// (stream/cadence); haveC0 tells whether it has its first frame.
	grid         *cadence.Grid
	haveC0       bool
	next         int   // lowest tick whose deadline has not been handled
	handledUs    int64 // time of tick next-1 as handled (see slotFor)
	latUs        int64
	latKnown     bool
	latSamples   []int64
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
	prevRepair  whip.RepairStats
}

func newPipeline(r *Relay, s IngestSession) (*pipeline, error) {
	cfg := r.cfg
	p := &pipeline{r: r, cfg: cfg, sess: s, log: r.log.With("session", short(s.ID()))}
	var err error
	p.grid, err = cadence.New(cfg.periodUs())
	if err != nil {
		return nil, fmt.Errorf("relay: display grid: %w: %w", ErrBadConfig, err)
	}
	p.flt, err = filter.New(cfg.Filter)
	if err != nil {
		return nil, fmt.Errorf("relay: filter: %w: %w", ErrBadConfig, err)
	}
	if err := p.newFiller(); err != nil {
		return nil, err
	}
	p.out, p.held = gocv.NewMat(), gocv.NewMat()
	p.pool = make([]gocv.Mat, cfg.FrameQueue)
	p.free = make(chan *gocv.Mat, cfg.FrameQueue)
	p.frames = make(chan frameEvent, cfg.FrameQueue)
	for i := range p.pool {
		p.pool[i] = gocv.NewMatWithSize(cfg.Camera.Height, cfg.Camera.Width, gocv.MatTypeCV8UC3)
		p.free <- &p.pool[i]
	}
	p.tel = make(chan telEvent, cfg.TelemetryQueue)
	if cfg.LatencyMs != 0 {
		p.latUs, p.latKnown = int64(math.Round(cfg.LatencyMs*1000)), true
		r.setLatency(p.latUs, true)
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
	pol.CutoffConfidence = p.r.console.Cutoff() // updated per tick in missing
	f, err := predictor.NewFiller(predictor.FillerConfig{Camera: p.cfg.Camera, Policy: pol, Motion: p.flt})
	if err != nil {
		return fmt.Errorf("relay: gap filler: %w", err)
	}
	f.Now = p.cfg.Now
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
	p.out.Close()
	p.held.Close()
	for i := range p.pool {
		p.pool[i].Close()
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
		p.armTimer(timer)
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
			p.onFrame(ev)
		case te := <-p.tel:
			p.onTelemetry(te)
		case <-timer.C():
			p.drain()
			p.advance(p.cfg.Now().UnixMicro())
		}
	}
	cancel()
	p.sess.Close()
	wg.Wait()
	// Return mats still queued.
	for {
		select {
		case ev := <-p.frames:
			p.free <- ev.mat
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
func (p *pipeline) drain() {
	type item struct {
		ts int64
		f  *frameEvent
		t  *telEvent
	}
	var items []item
	for {
		select {
		case ev := <-p.frames:
			items = append(items, item{ts: ev.readyUs, f: &ev})
			continue
		case te := <-p.tel:
			items = append(items, item{ts: te.arrivalUs, t: &te})
			continue
		default:
		}
		break
	}
	sort.SliceStable(items, func(i, j int) bool { return items[i].ts < items[j].ts })
	for _, it := range items {
		if it.f != nil {
			p.onFrame(*it.f)
		} else {
			p.onTelemetry(*it.t)
		}
	}
}

// armTimer sets the timer to the deadline of the next unresolved tick.
func (p *pipeline) armTimer(t Timer) {
	t.Stop()
	if !p.haveC0 {
		t.Reset(IdleWake) // wake anyway: the liveness probe watches the loop
		return
	}
	// One microsecond after the deadline: advance fills ticks whose
	// deadline has passed, and a frame ready at the deadline is in time.
	d := time.Duration(p.deadlineUs(p.next)+1-p.cfg.Now().UnixMicro()) * time.Microsecond
	if d < 0 {
		d = 0
	}
	t.Reset(d)
}

func (p *pipeline) nominalCaptureUs(k int) int64 {
	return p.grid.CaptureUs(k)
}

func (p *pipeline) deadlineUs(k int) int64 {
	return p.nominalCaptureUs(k) + p.latUs + int64(math.Round(p.cfg.AllowanceMs*1000))
}

// onTelemetry feeds one sample to the filter (and the recording).
//
// Samples wait in pendTel until the tick whose deadline they arrived by is
// handled (feedTelemetry), exactly as the offline replay feeds them, so the
// filter sees the same samples at every tick in both and a recorded session
// replays to the same PREDICTED/STALE decisions.
//
// A sample that arrives later than the filter's history window after it was
// taken (on the display clock: vehicle time plus the nominal latency) is
// dropped and counted as "too_late": an ordered, reliable data channel
// delivers such samples in a burst after an outage, and none can change a
// tick the display still has to fill.
//
// A sample that reaches the display loop after ticks it had arrived in time
// for were filled without it (a starved CPU) is recorded as arriving just
// after the last tick filled, as late frames are (onFrame): the replay must
// give the filter the samples the display loop had.
func (p *pipeline) onTelemetry(te telEvent) {
	if p.vehicleClock && p.latKnown && telemetryTooLate(te.arrivalUs, te.sample.TimeUs, p.latUs, p.maxTelAgeUs()) {
		p.r.met.telemetryRejected.inc("too_late")
		return
	}
	if !p.haveC0 || len(p.pendTel) >= maxPendingTelemetry {
		p.feed(te)
		return
	}
	if p.next > 0 {
		if d := p.deadlineUs(p.next - 1); te.arrivalUs <= d {
			te.arrivalUs = d + 1
		}
	}
	p.pendTel = append(p.pendTel, te)
}

// telemetryTooLate reports whether a sample taken at timeUs (vehicle clock)
// that arrived at arrivalUs (receiver clock) is more than maxAgeUs late,
// latUs being the nominal receiver-minus-vehicle latency.
func telemetryTooLate(arrivalUs, timeUs, latUs, maxAgeUs int64) bool {
	return arrivalUs-(timeUs+latUs) > maxAgeUs
}

// maxTelAgeUs is the filter's history window (filter.Config.HistoryUs).
func (p *pipeline) maxTelAgeUs() int64 {
	if h := p.cfg.Filter.HistoryUs; h > 0 {
		return h
	}
	return filter.DefaultHistoryUs
}

// maxPendingTelemetry bounds the samples waiting for their tick (40 s of
// 100 Hz telemetry); beyond it samples go to the filter at once.
const maxPendingTelemetry = 4096

// feedTelemetry gives the filter every waiting sample that arrived by
// untilUs (receiver clock), in arrival order.
func (p *pipeline) feedTelemetry(untilUs int64) {
	n := 0
	for _, te := range p.pendTel {
		if te.arrivalUs <= untilUs {
			p.feed(te)
		} else {
			p.pendTel[n] = te
			n++
		}
	}
	p.pendTel = p.pendTel[:n]
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

// advance handles every tick whose deadline is before nowUs: the frame did
// not come in time, so the tick is filled. A frame ready exactly at its
// deadline is LIVE, the replay's rule (bench.Schedule.Live: arrival <=
// deadline).
func (p *pipeline) advance(nowUs int64) {
	if !p.haveC0 {
		return
	}
	for p.deadlineUs(p.next) < nowUs {
		p.missing(p.next)
		p.next++
	}
}

// onFrame handles one decoded frame.
func (p *pipeline) onFrame(ev frameEvent) {
	defer func() { p.free <- ev.mat }()
	if ev.hasShift {
		p.shift(ev.shiftUs)
	}
	if !p.haveC0 {
		p.haveC0, p.next = true, 0
	}
	if ev.vehicleClk && !p.vehicleClock {
		p.startRecording()
	}
	p.lastDelayMs = float64(ev.readyUs-ev.captureUs) / 1000
	if !p.latKnown {
		p.latSamples = append(p.latSamples, ev.readyUs-ev.captureUs)
		s := append([]int64(nil), p.latSamples...)
		sort.Slice(s, func(i, j int) bool { return s[i] < s[j] })
		p.latUs = s[len(s)/2]
		if len(s) >= LatencyFrames {
			p.latKnown = true
			p.log.Info("nominal latency estimated and frozen for this session", "latency_ms", float64(p.latUs)/1000, "frames", len(s))
		}
		p.r.setLatency(p.latUs, p.latKnown)
	}
	k := p.grid.Observe(ev.captureUs)
	// Deadlines that passed before this frame was ready (a frame ready at
	// its deadline is still in time, as in bench.Schedule.Live).
	p.advance(ev.readyUs)
	if nk, show := slotFor(k, p.next, ev.captureUs, p.grid.CaptureUs(k), p.handledUs, p.next > 0); show && nk != k {
		p.log.Debug("frame shown on the open tick next to its own", "tick", k, "shown_on", nk, "ready_before_deadline_us", p.deadlineUs(nk)-ev.readyUs)
		p.r.met.framesMovedOn.Add(1)
		k = nk
	}
	if k < p.next {
		// Late: it becomes the held frame for later gaps, but is not shown.
		p.r.met.lateFrames.Add(1)
		if _, err := p.filler.Live(*ev.mat, ev.captureUs, &p.held); err != nil {
			p.log.Warn("holding a late frame failed", "err", err)
		}
		// A frame decoded by a deadline can still reach the display loop
		// after that tick was filled (the display loop or the ingest
		// goroutine was not scheduled in between), and on a starved CPU
		// several later ticks may have been filled without it too. The
		// display had no frame until now, so the recording says it
		// arrived after the deadline of the last tick filled: the replay
		// must decide as the display did, on this tick and the later ones.
		arrivalUs := ev.readyUs
		p.log.Debug("late frame held, not shown", "tick", k, "late_us", ev.readyUs-p.deadlineUs(k),
			"last_packet_late_us", ev.lastPktUs-p.deadlineUs(k), "decode_us", ev.decodeDur.Microseconds(),
			"off_grid_us", ev.captureUs-p.grid.CaptureUs(k))
		if d := p.deadlineUs(p.next - 1); arrivalUs <= d {
			p.log.Debug("frame decoded in time reached the display after its tick was filled", "tick", k, "last_filled_tick", p.next-1, "ready_before_deadline_us", d-arrivalUs)
			arrivalUs = d + 1
		}
		p.record(func(rc *recorder) { rc.frame(p.recIndex(k), ev.captureUs, arrivalUs, ev.rtpTS, *ev.mat) })
		return
	}
	// Earlier ticks whose frames can no longer come (frames arrive in order).
	for p.next < k {
		p.missing(p.next)
		p.next++
	}
	tick, err := p.filler.Live(*ev.mat, ev.captureUs, &p.out)
	if err != nil {
		p.log.Warn("showing a live frame failed", "err", err)
		return
	}
	p.next, p.handledUs = k+1, ev.captureUs
	p.feedTelemetry(p.deadlineUs(k))
	p.emit(k, ev.captureUs, tick, &ev)
	p.record(func(rc *recorder) { rc.frame(p.recIndex(k), ev.captureUs, ev.readyUs, ev.rtpTS, *ev.mat) })
}

// missing fills tick k at its deadline.
func (p *pipeline) missing(k int) {
	p.feedTelemetry(p.deadlineUs(k))
	c := p.nominalCaptureUs(k)
	p.handledUs = c
	if p.log.Enabled(context.Background(), slog.LevelDebug) {
		p.log.Debug("tick filled without a frame", "tick", k, "after_deadline_us", p.cfg.Now().UnixMicro()-p.deadlineUs(k))
	}
	// The operator's cutoff may change at any tick.
	pol := predictor.Policy{CutoffConfidence: p.r.console.Cutoff(), MaxAgeMs: p.cfg.Policy.MaxAgeMs}
	if err := p.filler.SetPolicy(pol); err != nil {
		p.log.Warn("operator cutoff rejected; keeping the previous one", "cutoff", pol.CutoffConfidence, "err", err)
	}
	tick, err := p.filler.MissingWith(predictor.MethodGround, c, &p.out)
	switch {
	case errors.Is(err, predictor.ErrNoFrame):
		tick.State = predictor.StateStale // labelled "no picture" frame
	case errors.Is(err, predictor.ErrTargetBeforeFrame):
		// A newer frame was already shown (a frame arrived early): showing
		// an older tick now would go back in time. Record it only.
		p.recordSkipped(k, c)
		return
	case err != nil:
		p.log.Warn("filling a missing tick failed", "tick", k, "err", err)
		p.recordSkipped(k, c)
		return
	}
	p.r.met.synth.observe(tick.SynthDuration)
	p.emit(k, c, tick, nil)
}

// emit encodes the output frame and sends it with its meta to the console.
func (p *pipeline) emit(k int, captureUs int64, tick predictor.Tick, ev *frameEvent) {
	buf, err := p.out.DataPtrUint8()
	if err != nil {
		p.log.Warn("output frame unusable", "err", err)
		p.recordSkipped(k, captureUs)
		return
	}
	t0 := p.cfg.Now()
	// The encoder's timestamps only steer its rate control and must
	// increase: one tick period per output frame, across sessions too
	// (capture times can step back when a session moves onto the vehicle
	// clock or a new session starts).
	p.r.encPtsUs += int64(math.Round(p.cfg.periodUs()))
	frame, _, err := p.r.enc.EncodeBGR(p.encBuf[:0], buf, p.r.encPtsUs)
	encDur := p.cfg.Now().Sub(t0)
	if err != nil {
		p.log.Warn("encoding the output frame failed", "err", err)
		p.recordSkipped(k, captureUs)
		return
	}
	p.encBuf = frame
	p.r.met.encode.observe(encDur)
	period := time.Duration(p.cfg.periodUs() * float64(time.Microsecond))
	if err := p.r.console.WriteFrame(frame, period); err != nil && !errors.Is(err, console.ErrClosed) {
		p.log.Warn("console write failed", "err", err)
	}
	trace := p.r.tracer.fn.Load()
	var writtenAt time.Time
	if trace != nil {
		writtenAt = p.cfg.Now()
	}
	if ev != nil {
		p.r.met.addedLatency.observe(p.cfg.Now().Sub(ev.lastPktAt) - ev.decodeDur - encDur)
	}
	cutoff := p.r.console.Cutoff()
	var st console.State
	switch tick.State {
	case predictor.StateLive:
		st = console.StateLive
		p.r.met.ticksLive.Add(1)
	case predictor.StatePredicted:
		st = console.StatePredicted
		p.r.met.ticksPredicted.Add(1)
	default:
		st = console.StateStale
		p.r.met.ticksStale.Add(1)
	}
	p.refreshLink()
	conf, age := finite(tick.Confidence), finite(tick.AgeMs)
	p.meta = console.Meta{Seq: p.meta.Seq + 1, TimeUs: captureUs, State: st, AgeMs: age, Confidence: conf,
		Cutoff: cutoff, Profile: p.r.console.Profile(), Link: p.link}
	if err := p.r.console.WriteMeta(p.meta); err != nil && !errors.Is(err, console.ErrClosed) {
		p.log.Warn("console meta failed", "err", err)
	}
	p.record(func(rc *recorder) { rc.tick(p.recIndex(k), captureUs, p.deadlineUs(k), st.String(), age, conf, cutoff) })
	if trace != nil {
		tr := FrameTrace{Seq: p.meta.Seq, TickUs: captureUs, State: st, Encode: encDur, WrittenAt: writtenAt}
		if ev != nil {
			tr.LastPacketAt, tr.Decode = ev.lastPktAt, ev.decodeDur
		}
		(*trace)(tr)
	}
}

// recordSkipped records tick k as not shown. Every handled tick gets a
// ticks.csv row: the recorder writes rows in index order and waits for each
// row's tick.
func (p *pipeline) recordSkipped(k int, captureUs int64) {
	cutoff := p.r.console.Cutoff()
	p.record(func(rc *recorder) { rc.tick(p.recIndex(k), captureUs, p.deadlineUs(k), "SKIPPED", 0, 0, cutoff) })
}

// refreshLink updates the link statistics about once per second.
func (p *pipeline) refreshLink() {
	now := p.cfg.Now()
	p.link.KeyframeRequests = p.r.met.keyframeRequests.Load()
	p.link.FramesIn = p.r.met.framesIn.Load()
	p.link.DelayMs = finite(p.lastDelayMs)
	p.in.mu.Lock()
	lastPkt := p.in.lastArrival
	p.in.mu.Unlock()
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
// NOSIGNAL state covers).
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
	if p.haveC0 {
		p.grid.Shift(d)
		p.handledUs += d
	}
	if p.cfg.LatencyMs != 0 {
		// A configured latency is relative to the vehicle clock already.
		p.latUs = int64(math.Round(p.cfg.LatencyMs * 1000))
	} else {
		p.latUs -= d
	}
	for i := range p.latSamples {
		p.latSamples[i] -= d
	}
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
	if p.r.rec == nil {
		return
	}
	p.recording = true
	p.recStart = p.r.rec.nextIndex()
	p.recBase = p.recStart - p.next
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
func (p *pipeline) countRepair(r whip.RepairStats) {
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
func (p *pipeline) countDrops(st whip.SessionStats) {
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
