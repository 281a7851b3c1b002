package relay

import (
	"context"
	"errors"
	"sync"
	"sync/atomic"
	"time"

	"stopgap/filter"
	"stopgap/stream/ingest"
	"stopgap/stream/passthru"
	"stopgap/stream/rtpvp8"
	"stopgap/stream/telemetry"
	"stopgap/stream/vp8"
	"stopgap/stream/whip"
)

// frameEvent is one decoded frame handed from the ingest to the display loop.
// pic belongs to the pipeline's pool; the display loop returns it.
type frameEvent struct {
	pic        *picture
	captureUs  int64 // vehicle clock (or anchored, see vehicleClock)
	readyUs    int64 // receiver clock: decoded (and converted to BGR if the ingest does that, see picture)
	lastPktUs  int64 // receiver clock: arrival of the frame's last packet
	readyAt    time.Time
	lastPktAt  time.Time
	decodeDur  time.Duration
	shiftUs    int64 // first frame on the vehicle clock: add to the session timeline
	hasShift   bool
	vehicleClk bool   // captureUs is on the vehicle clock (a sender report was used)
	rtpTS      uint32 // the frame's RTP timestamp (90 kHz), recorded for pairing
	// forwarded: the frame's packets went to the console as they were
	// (pass-through, stopgap/stream/passthru) at forwardedAt, before the
	// decode; the display loop sends its meta only.
	forwarded   bool
	forwardedAt time.Time
	// superseded: set by the display loop for a LIVE frame that was not
	// passed through while a newer vehicle keyframe was (pipeline.onFrame);
	// it is not sent, only its meta.
	superseded bool
}

// telEvent is one decoded telemetry sample.
type telEvent struct {
	sample    filter.Sample
	arrivalUs int64
}

// frameIngest turns the session's RTP packets into decoded frames. It runs on its
// own goroutine; only the mutex-guarded parts are touched from the expiry timer.
type frameIngest struct {
	p   *pipeline
	mu  sync.Mutex // guards asm, dec, lastKeyReq, linkBack, ptBackoff, anchor state
	asm *rtpvp8.Assembler
	dec *vp8.Decoder
	img vp8.Image // decodes a frame no picture of the pool is free for

	// lastKeyReq is when the latest keyframe request went out (one refused
	// by the session's rate limit does not count: nothing was sent).
	lastKeyReq time.Time
	// linkBack is set when packets resume after a silence and cleared by
	// the next decoded frame; meanwhile requests repeat every
	// linkBackRetry (see runTimers).
	linkBack bool
	// ptBackoff spaces the requests made for pass-through alone.
	ptBackoff   passThroughBackoff
	lastArrival time.Time // arrival of the latest packet
	// telSeenNs is the arrival of the sender's last telemetry message
	// (pipeline.lastTelNs) as the timer saw it during the current video
	// silence (backFromTelemetry); zero while video flows.
	telSeenNs int64
	// lastArrivalNs is lastArrival in Unix nanoseconds (0: none yet), for
	// the display loop's link statistics without in.mu: the ingest holds
	// in.mu through each frame's decode, and every meta message waited
	// for it.
	lastArrivalNs atomic.Int64
	fwd           forwardSender
	// The capture timeline: RTP timestamp refTS was captured at refUs
	// (arrival-anchored until the first sender report, then on the
	// vehicle clock); later timestamps are unwrapped from it.
	haveAnchor     bool
	refTS          uint32
	refUs          int64
	lastTS         uint32 // newest RTP timestamp seen
	lastExt        int64  // its distance from refTS in 90 kHz ticks, unwrapped
	onVehicle      bool
	anchoredFrames int
}

func newIngest(p *pipeline) (*frameIngest, error) {
	in := &frameIngest{p: p}
	dec, err := vp8.NewDecoderConfig(vp8.DecoderConfig{MaxWidth: p.cfg.Camera.Width, MaxHeight: p.cfg.Camera.Height})
	if err != nil {
		return nil, err
	}
	in.dec = dec
	// A keyframe at 1280x720 spans 50-100 packets: the reorder window must
	// cover a whole one, or a hole in it is given up before its repair.
	acfg := rtpvp8.AssemblerConfig{ReorderPackets: reorderPackets}
	if rs, ok := p.sess.(repairSpanner); ok {
		acfg.RepairWait = rs.RepairSpan()
	}
	in.asm, err = rtpvp8.NewAssembler(acfg, rtpvp8.SinkFuncs{Frame: in.onFrame, Loss: in.onLoss})
	if err != nil {
		dec.Close()
		return nil, err
	}
	return in, nil
}

// reorderPackets is the assembler's reorder window: half its packet buffer.
const reorderPackets = rtpvp8.DefaultMaxPackets / 2

// repairSpanner is implemented by an ingest session that asks for missing
// packets (*whip.Session): RepairSpan says how long a missing packet may
// still arrive as a retransmission. The assembler waits that long before it
// gives the frame up and a keyframe is requested; sessions without it use
// the assembler's plain reordering policy.
type repairSpanner interface {
	RepairSpan() time.Duration
}

func (in *frameIngest) close() { in.dec.Close() }

// runRTP reads packets until the session or ctx ends.
func (in *frameIngest) runRTP(ctx context.Context) error {
	for {
		pkt, arrival, err := in.p.sess.ReadRTP(ctx)
		if err != nil {
			if errors.Is(err, whip.ErrSessionClosed) {
				return nil
			}
			return err
		}
		in.mu.Lock()
		// The first packet after a silence of at least the keyframe retry
		// interval: what was sent meanwhile is lost (the WHIP session does
		// not ask for a gap after such a silence) or, if it was short, a
		// keyframe is still the fastest way back; requests sent during the
		// silence were probably lost with the link. So ask at once.
		// If the sender's telemetry announced the link's return
		// (backFromTelemetry), the request went out already.
		if !in.lastArrival.IsZero() && arrival.Sub(in.lastArrival) >= in.p.cfg.KeyframeRetry {
			now := in.p.cfg.Now()
			in.linkBack = true
			if now.Sub(in.lastKeyReq) >= linkBackRetry(in.p.cfg.KeyframeRetry) {
				in.requestKeyframeLocked(now, keyLinkBack)
			}
		}
		in.lastArrival = arrival
		in.lastArrivalNs.Store(arrival.UnixNano())
		if err := in.asm.Push(pkt, arrival); err != nil {
			var pe *rtpvp8.PacketError
			reason := "malformed"
			if errors.As(err, &pe) {
				reason = pe.Reason.String()
			}
			in.p.r.met.rtpDropped.inc(reason)
		}
		in.mu.Unlock()
	}
}

// runTimers expires missing packets and repeats keyframe requests.
func (in *frameIngest) runTimers(ctx context.Context) {
	const every = 20 * time.Millisecond
	t := in.p.cfg.NewTimer(every)
	defer t.Stop()
	for {
		select {
		case <-ctx.Done():
			return
		case <-in.p.sess.Done():
			return
		case <-t.C():
		}
		now := in.p.cfg.Now()
		in.mu.Lock()
		if rs, ok := in.p.sess.(repairSpanner); ok {
			if err := in.asm.SetRepairWait(rs.RepairSpan()); err != nil {
				in.p.log.Warn("repair wait rejected", "err", err)
			}
		}
		in.asm.Expire(now)
		// During a silence the periodic requests would be lost with the
		// link, and each would use up the session's rate limit
		// (whip.Config.MinKeyframeInterval) that the request made on the
		// first packet after it needs: none is sent until packets resume.
		silent := !in.lastArrival.IsZero() && now.Sub(in.lastArrival) >= in.p.cfg.KeyframeRetry
		in.timerRequestsLocked(now, silent)
		wait := every
		if silent {
			wait = silentPoll
		} else {
			in.telSeenNs = 0
		}
		in.mu.Unlock()
		t.Reset(wait)
	}
}

// timerRequestsLocked sends the keyframe requests the expiry timer owes at
// now (in.mu held): none during a video silence unless the sender's
// telemetry says the link is back; after it, repeats every linkBackRetry;
// else a retry while the decoder needs a keyframe, or one the pass-through
// gate wants.
func (in *frameIngest) timerRequestsLocked(now time.Time, silent bool) {
	// A keyframe that began arriving after the last request is its
	// answer on its way (a sender paces its packets out over tens of
	// milliseconds): asking again would only make the sender encode and
	// pace out a second one behind it. Given up, it stops counting.
	answering := in.asm.KeyframeArriving(in.lastKeyReq)
	switch {
	case silent && in.backFromTelemetry():
		in.linkBack = true
		in.requestKeyframeLocked(now, keyLinkBackTelemetry)
	case silent:
	case in.linkBack && !answering && now.Sub(in.lastKeyReq) >= linkBackRetry(in.p.cfg.KeyframeRetry):
		in.requestKeyframeLocked(now, keyLinkBackRepeat)
	case in.dec.NeedKeyframe() && !answering && now.Sub(in.lastKeyReq) >= in.p.cfg.KeyframeRetry:
		in.requestKeyframeLocked(now, keyRetry)
	case in.p.r.gate.WantKeyframe() && !answering:
		// Pass-through resumes on the vehicle's next keyframe, and a
		// console viewer can only start on one. Urgent: the display
		// loop ended a run (passthru.Gate.KeyframeUrgent); until the
		// next keyframe every real frame costs the relay an encode.
		// While no run is open the requests are spaced
		// (passThroughBackoff); a viewer's, with a run open, are not.
		retry := in.p.cfg.KeyframeRetry
		if in.p.r.gate.Forwarding() {
			if now.Sub(in.lastKeyReq) >= retry {
				in.requestKeyframeLocked(now, keyViewer)
			}
			return
		}
		if in.ptBackoff.due(now, in.lastKeyReq, retry, in.p.r.gate.KeyframeUrgent()) {
			in.requestKeyframeLocked(now, keyPassThrough)
			// lastKeyReq moved: the request counts as made (sent, or
			// failed other than by the session's rate limit).
			if in.lastKeyReq.Equal(now) {
				in.ptBackoff.sent(retry)
			}
		}
	}
}

// silentPoll is how often the expiry timer runs during a video silence, to
// see the sender's telemetry return (backFromTelemetry).
const silentPoll = 5 * time.Millisecond

// backFromTelemetry reports, during a video silence, whether the sender's
// telemetry resumed after a silence of its own of at least the keyframe
// retry interval: the whole link was down and is back. A vehicle sends
// telemetry more often than frames (50 Hz against 30), so the keyframe
// request goes out before the first frame's packets arrive. Telemetry that
// kept flowing while only the video stopped does not count. Only telemetry:
// RTCP reports come about once a second, and one that got through during a
// long outage would take the session's keyframe request rate limit from the
// request the link's real return needs.
func (in *frameIngest) backFromTelemetry() bool {
	last := in.p.lastTelNs.Load()
	prev := in.telSeenNs
	in.telSeenNs = last
	return prev != 0 && time.Duration(last-prev) >= in.p.cfg.KeyframeRetry
}

// linkBackRetry is the keyframe request repeat interval while the link is
// just back: half the usual retry. The first request after a silence is
// often lost, because the way back to the sender can return a little later
// than the way in (the test's network reopens one direction after the
// other; radio links do too), and waiting the full retry interval for the
// second one delayed the first LIVE tick after a 3 s outage by about
// 200 ms. The session's own rate limit (whip.Config.MinKeyframeInterval,
// 100 ms by default) still applies.
func linkBackRetry(retry time.Duration) time.Duration { return retry / 2 }

// requestKeyframeLocked sends a PLI now. in.mu is held. A request refused
// by the session's rate limit leaves lastKeyReq alone: the retry interval
// counts from the last PLI that went out, so a refusal never postpones the
// next attempt.
// Any request sent also answers an urgent wish of the pass-through gate.
func (in *frameIngest) requestKeyframeLocked(now time.Time, why keyframeReason) {
	if err := in.p.sess.RequestKeyframe(); err != nil {
		in.p.r.met.keyframeRequestsFailed.Add(1)
		in.p.log.Debug("keyframe request not sent", "why", why.String(), "err", err)
		if !errors.Is(err, whip.ErrKeyframeRateLimited) {
			in.lastKeyReq = now
		}
		return
	}
	in.lastKeyReq = now
	in.p.r.gate.KeyframeRequested()
	in.p.r.met.keyframeRequests[why].Add(1)
	in.p.log.Debug("keyframe requested", "why", why.String())
}

// onLoss is called by the assembler (in.mu held).
func (in *frameIngest) onLoss(l rtpvp8.Loss) {
	in.p.r.gate.Lost()
	in.p.r.met.losses.Add(1)
	in.dec.Lost()
	in.p.log.Debug("frame loss", "reason", l.Reason.String(), "missing_packets", l.Missing)
	in.requestKeyframeLocked(in.p.cfg.Now(), keyLoss)
}

// onFrame forwards a complete frame to the console if the pass-through gate
// says so, then decodes it (in.mu held) and hands it to the display.
func (in *frameIngest) onFrame(f rtpvp8.Frame) {
	p := in.p
	fwd, fwdAt := in.forward(f)
	// The decoder must see every frame (the next ones reference it); with
	// no free picture the frame is decoded into the ingest's scratch and
	// dropped after.
	var pic *picture
	select {
	case pic = <-p.free:
	default:
	}
	dst := &in.img
	if pic != nil {
		dst, pic.hasBGR = &pic.img, false
	}
	release := func() {
		if pic != nil {
			p.free <- pic
		}
	}
	t0 := p.cfg.Now()
	err := in.dec.Decode(f.Data, dst)
	p.r.gate.Decoded(fwd, err == nil || errors.Is(err, vp8.ErrNotShown))
	if err != nil {
		release()
		if errors.Is(err, vp8.ErrNotShown) {
			return
		}
		p.r.met.decodeErrors.Add(1)
		if !errors.Is(err, vp8.ErrNeedKeyframe) {
			// A real decode failure is a loss; an inter frame rejected while
			// waiting for a keyframe is a consequence of an earlier one.
			p.r.met.losses.Add(1)
			p.log.Debug("decode error", "err", err)
		}
		// A rejected inter frame while waiting needs no new request unless
		// the last one is old; a real decode error asks at once.
		if !errors.Is(err, vp8.ErrNeedKeyframe) || t0.Sub(in.lastKeyReq) >= p.cfg.KeyframeRetry {
			in.requestKeyframeLocked(t0, keyDecode)
		}
		return
	}
	in.linkBack = false
	if dst.Width != p.cfg.Camera.Width || dst.Height != p.cfg.Camera.Height {
		release()
		p.r.met.decodeErrors.Add(1)
		p.log.Warn("decoded picture size differs from the camera; check camera.json", "width", dst.Width, "height", dst.Height, "err", ErrFrameSize)
		return
	}
	if fn := p.r.decoded.fn.Load(); fn != nil {
		(*fn)(DecodedFrame{RTPTimestamp: f.RTPTimestamp, Forwarded: fwd, Image: dst})
	}
	if pic == nil {
		p.r.met.framesDropped.Add(1)
		return
	}
	// A frame the relay encodes (not passed through), or one the
	// recording or the ego-motion reads, is converted now; one that passed
	// through waits until a gap needs it (see deferred).
	if !fwd || p.needBGR {
		if err := pic.toBGR(); err != nil {
			release()
			p.r.met.decodeErrors.Add(1)
			p.log.Warn("converting a decoded frame failed", "err", err)
			return
		}
	}
	ready := p.cfg.Now()
	ev := frameEvent{pic: pic, readyAt: ready, readyUs: ready.UnixMicro(), lastPktAt: f.ArrivalLast,
		lastPktUs: f.ArrivalLast.UnixMicro(), decodeDur: ready.Sub(t0), forwarded: fwd, forwardedAt: fwdAt}
	in.captureTime(f, &ev)
	p.r.met.framesIn.Add(1)
	p.r.met.decode.observe(ev.decodeDur)
	p.frames <- ev // never blocks: at most len(pool) pictures exist
}

// forward offers the frame to the pass-through gate, which sends it to the
// console's viewers at once if the run of forwarded frames allows (see
// stopgap/stream/passthru for the rule); it reports whether it did and when.
// The frame is complete and its VP8 header checked (the assembler's
// delivery); its decode follows.
func (in *frameIngest) forward(f rtpvp8.Frame) (bool, time.Time) {
	p := in.p
	gf := passthru.Frame{Keyframe: f.Keyframe, RefsMissing: f.RefsMissing,
		SizeOK: f.Width == p.cfg.Camera.Width && f.Height == p.cfg.Camera.Height}
	gf.CaptureUs, gf.HasCapture = in.peekCaptureUs(f.RTPTimestamp)
	in.fwd = forwardSender{in: in, parts: f.Parts, rtpTS: f.RTPTimestamp}
	ok := p.r.gate.Offer(gf, &in.fwd)
	in.ptBackoff.forwarded(ok, in.fwd.at)
	if ok {
		p.r.met.addedLatency.observe(in.fwd.at.Sub(f.ArrivalLast))
	}
	at := in.fwd.at
	in.fwd = forwardSender{}
	return ok, at
}

// forwardSender is the passthru.Sender of the frame being offered; the
// ingest keeps one, so forwarding allocates nothing.
type forwardSender struct {
	in    *frameIngest
	parts []rtpvp8.Part
	rtpTS uint32
	at    time.Time // when ForwardFrame returned
}

// Send passes the frame's packets to the console.
func (s *forwardSender) Send() error {
	p := s.in.p
	period := time.Duration(p.cfg.periodUs() * float64(time.Microsecond))
	err := p.r.console.ForwardFrame(s.parts, s.rtpTS, period)
	s.at = p.cfg.Now()
	return err
}

// captureTime maps the frame's RTP timestamp to the vehicle clock.
//
// The first RTCP sender report places the RTP timeline on the vehicle clock
// once; after that, capture times follow the RTP timestamps alone (90 kHz,
// unwrapped frame to frame). Later reports are not re-applied: a sender's
// report pairs its clock with the RTP time of the moment it SENDS, so each
// one carries that moment's encode and pacing delay, and re-mapping every
// frame through the newest report made capture times jump by tens of
// milliseconds and frames land on the wrong display tick. Drift between the
// vehicle's media clock and its wall clock is parts per million: negligible
// over a session.
func (in *frameIngest) captureTime(f rtpvp8.Frame, ev *frameEvent) {
	p := in.p
	if !in.haveAnchor {
		in.haveAnchor = true
		in.refTS, in.lastTS, in.lastExt = f.RTPTimestamp, f.RTPTimestamp, 0
		in.refUs = f.ArrivalLast.UnixMicro()
	}
	if !in.onVehicle {
		if sr, ok := p.sess.SenderReport(); ok {
			in.onVehicle = true
			veh := sr.SenderTimeUs(in.refTS, ingest.VideoClockRateHz)
			if in.anchoredFrames > 0 {
				ev.hasShift = true
				ev.shiftUs = veh - in.refUs
				p.log.Info("first RTCP sender report: capture times are now on the vehicle clock", "shift_ms", float64(ev.shiftUs)/1000)
			}
			in.refUs = veh
		} else {
			if in.anchoredFrames == 0 {
				p.log.Info("no RTCP sender report yet: capture times are anchored to the first frame's arrival until one arrives")
			}
			in.anchoredFrames++
		}
	}
	// Unwrap: the step from the newest timestamp is a signed 32-bit RTP
	// distance, so the timeline survives the 32-bit wrap (13 h at 90 kHz).
	ext := in.lastExt + int64(int32(f.RTPTimestamp-in.lastTS))
	if ext > in.lastExt {
		in.lastTS, in.lastExt = f.RTPTimestamp, ext
	}
	ev.captureUs = in.refUs + ticksToUs(ext)
	ev.vehicleClk = in.onVehicle
	ev.rtpTS = f.RTPTimestamp
}

// peekCaptureUs returns the capture time captureTime will give a frame
// with RTP timestamp ts, without changing the timeline; ok is false before
// the first frame and when this frame is the one that moves the timeline
// onto the vehicle clock (the first sender report has come). in.mu is held.
func (in *frameIngest) peekCaptureUs(ts uint32) (us int64, ok bool) {
	if !in.haveAnchor {
		return 0, false
	}
	if !in.onVehicle {
		if _, sr := in.p.sess.SenderReport(); sr {
			return 0, false
		}
	}
	return in.refUs + ticksToUs(in.lastExt+int64(int32(ts-in.lastTS))), true
}

// ticksToUs converts 90 kHz ticks to microseconds, rounding to nearest.
func ticksToUs(t int64) int64 {
	if t >= 0 {
		return (t*100 + 4) / 9
	}
	return -((-t*100 + 4) / 9)
}

// runTelemetry decodes telemetry messages and queues samples for the display.
func (p *pipeline) runTelemetry(ctx context.Context) {
	ch := p.sess.Telemetry()
	for {
		select {
		case <-ctx.Done():
			return
		case tb, ok := <-ch:
			if !ok {
				return
			}
			p.lastTelNs.Store(tb.Arrival.UnixNano())
			m, err := telemetry.Decode(tb.Data)
			if err != nil {
				p.r.met.telemetryRejected.inc("decode_" + telemetry.ReasonOf(err).String())
				continue
			}
			select {
			case p.tel <- telEvent{sample: m.ToSample(), arrivalUs: tb.Arrival.UnixMicro()}:
			default:
				p.r.met.telemetryRejected.inc("queue_full")
			}
		}
	}
}
