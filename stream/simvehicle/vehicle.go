package simvehicle

import (
	"context"
	"crypto/rand"
	"encoding/binary"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"runtime"
	"sync"
	"sync/atomic"
	"syscall"
	"time"

	"github.com/pion/rtp"

	"stopgap/stream/recording"
	"stopgap/stream/rtpvp8"
	"stopgap/stream/telemetry"
	"stopgap/stream/vp8"
	"stopgap/stream/whip"
)

// PayloadTypeVP8 is the RTP payload type the packetiser writes; the
// Publisher replaces it with the negotiated one.
const PayloadTypeVP8 = 96

// Config configures a Vehicle. Recording is required; zero values of the
// other fields select the documented defaults.
type Config struct {
	// Recording is the drive to play (recording.Open). Its frames must be
	// image files (JPEG or PNG) of the camera.json size.
	Recording *recording.Recording
	// Link is the emulated link; nil means a perfect link on Clock.
	Link *Link
	// Loop restarts the drive from its first frame when it ends (see the
	// package documentation on the loop seam); otherwise Run returns after
	// the last frame and telemetry row left the link.
	Loop bool
	// BitrateBps, KeyframeInterval, CPUUsed and Threads configure the VP8
	// encoder (vp8.EncoderConfig; 0 = its defaults).
	BitrateBps, KeyframeInterval, CPUUsed, Threads int
	// MTU is the largest RTP packet in octets (0 = rtpvp8.DefaultMTU).
	MTU int
	// CacheFrames decodes every frame once in New and keeps the I420
	// pictures in memory (width*height*1.5 bytes per frame), so playback
	// costs only the encoder's CPU. Otherwise each frame is decoded from its
	// file just before it is due.
	CacheFrames bool
	// EncodeOnce encodes one loop of the drive in New (its first frame a
	// keyframe) and sends the stored frames at every loop, with fresh RTP
	// timestamps and sequence numbers: playback then costs the packetiser
	// and the link only, as with a real vehicle, whose encoder runs on its
	// own computer; what a benchmark measures beside it is the receiving
	// side. Every frame is also stored as a keyframe, made by a second
	// encoder, which answers a keyframe request on the next frame, as a
	// live encoder would; the stored inter frames after it were encoded
	// against the inter frame it replaces, so the decoded picture differs
	// from the encoder's by the two encodings' difference (no decode
	// error) until the next stored keyframe (KeyframeInterval frames apart
	// at most; every loop starts with one). Stats.EncodeTotal and
	// EncodeCPU count the encoding in New.
	EncodeOnce bool
	// Clock is the vehicle clock (default SystemClock). It must be the
	// Link's clock too.
	Clock Clock
	// Logger receives warnings (late frames, sink errors); default: discard.
	Logger *slog.Logger
	// OnFrame, if set, is called after each frame was encoded and handed
	// to the link, on the playback goroutine: keep it quick.
	OnFrame func(FrameInfo)
	// Onboard, if set, records every frame the camera captured (also the
	// ones playback skipped or failed to encode) and every telemetry sample
	// published, as the vehicle's own recording. The caller closes it
	// after Run returns.
	Onboard *Onboard
}

// FrameInfo describes one played frame.
type FrameInfo struct {
	// Index is the frame index in the recording; Loop counts completed
	// loops before this frame.
	Index, Loop int
	// CaptureUs is the capture time on the vehicle clock in Unix
	// microseconds (the clock telemetry t_us uses); Capture is the same
	// instant as a time.Time on the vehicle Clock.
	CaptureUs int64
	Capture   time.Time
	// RTPTimestamp is the frame's RTP timestamp (90 kHz).
	RTPTimestamp uint32
	// FirstSeq is the sequence number of its first packet; Packets the
	// number of packets; Bytes the compressed size in octets.
	FirstSeq      uint16
	Packets       int
	Bytes         int
	Keyframe      bool
	EncodeDur     time.Duration
	PacketsQueued int // packets the link accepted (the rest: delay line full)
}

// Stats are a Vehicle's counters.
type Stats struct {
	// FramesEncoded counts frames encoded and handed to the link;
	// FramesSkipped frames not encoded because playback was more than one
	// frame period late (a real camera drops them too). With
	// Config.EncodeOnce no frame is skipped: FramesLate counts the stored
	// frames handed to the link more than one frame period late.
	FramesEncoded, FramesSkipped, FramesLate uint64
	// Keyframes counts keyframes sent; KeyframeRequests the PLI/FIR
	// requests received from the relay.
	Keyframes, KeyframeRequests uint64
	// TelemetryRows counts telemetry rows encoded and handed to the link.
	TelemetryRows uint64
	// Loops counts completed loops of the drive.
	Loops uint64
	// EncodeTotal is the wall time spent in the VP8 encoder.
	EncodeTotal time.Duration
	// EncodeCPU is the CPU time of the encoder's thread spent in the VP8
	// encoder (getrusage(2) RUSAGE_THREAD around each call, the goroutine
	// locked to its thread): what the vehicle costs the process, for
	// benchmarks that measure the relay beside a simulated vehicle.
	EncodeCPU time.Duration
	// Link are the link's counters.
	Link LinkStats
}

// Publisher is what Run publishes to; *whip.Publisher implements it.
type Publisher interface {
	Sink
	KeyframeRequests() <-chan time.Time
}

// Vehicle plays a recording in real time through a Link to a Publisher.
// Create it with New; Run it once.
type Vehicle struct {
	cfg       Config
	rec       *recording.Recording
	link      *Link
	clock     Clock
	log       *slog.Logger
	cache     []*vp8.Image
	stored    []storedFrame // EncodeOnce: one loop, encoded in New
	t0Us      int64         // earliest recording time
	loopUs    int64         // loop length in recording microseconds
	periodUs  int64         // median frame interval
	rtpBase   uint32
	firstSeq  uint16
	ssrc      uint32
	startOnce sync.Once
	start     time.Time
	startCh   chan struct{}
	keyWanted atomic.Bool // EncodeOnce: a keyframe request waits for the next frame

	frames, skipped, late, keyframes, kfRequests, telemetryRows, loops atomic.Uint64
	encodeNs, encodeCPUNs                                              atomic.Int64
}

// New checks cfg and prepares the vehicle (and with CacheFrames decodes
// every frame).
func New(cfg Config) (*Vehicle, error) {
	rec := cfg.Recording
	if rec == nil {
		return nil, fmt.Errorf("%w: Recording is nil; open one with recording.Open", ErrConfig)
	}
	if len(rec.Frames) < 2 {
		return nil, fmt.Errorf("%w: %s has %d frames; need at least 2", ErrRecording, rec.Dir, len(rec.Frames))
	}
	if rec.VideoFile != "" {
		return nil, fmt.Errorf("%w: %s stores frames in %s; the simulated vehicle plays image-file recordings only (e.g. from stopgap simdrive)",
			ErrRecording, rec.Dir, rec.VideoFile)
	}
	if cfg.Clock == nil {
		cfg.Clock = SystemClock{}
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.New(slog.NewTextHandler(io.Discard, nil))
	}
	if cfg.Link == nil {
		l, err := NewLink(LinkConfig{}, cfg.Clock)
		if err != nil {
			return nil, err
		}
		cfg.Link = l
	}
	v := &Vehicle{cfg: cfg, rec: rec, link: cfg.Link, clock: cfg.Clock, log: cfg.Logger, startCh: make(chan struct{})}
	first, last := rec.Frames[0].CaptureUs, rec.Frames[len(rec.Frames)-1].CaptureUs
	v.t0Us = first
	if len(rec.Telemetry) > 0 {
		v.t0Us = min(v.t0Us, rec.Telemetry[0].TimeUs)
		last = max(last, rec.Telemetry[len(rec.Telemetry)-1].TimeUs)
	}
	v.periodUs = medianFramePeriodUs(rec.Frames)
	v.loopUs = last - v.t0Us + v.periodUs
	var rnd [10]byte
	if _, err := rand.Read(rnd[:]); err != nil {
		return nil, fmt.Errorf("simvehicle: random RTP start values: %w", err)
	}
	// RFC 3550 section 5.1: random initial timestamp and sequence number, random SSRC.
	v.rtpBase = binary.BigEndian.Uint32(rnd[0:4])
	v.ssrc = binary.BigEndian.Uint32(rnd[4:8])
	v.firstSeq = binary.BigEndian.Uint16(rnd[8:10])
	if cfg.EncodeOnce {
		if err := v.encodeLoop(); err != nil {
			return nil, err
		}
	} else if cfg.CacheFrames {
		ld := newFrameLoader(rec.Camera.Width, rec.Camera.Height)
		v.cache = make([]*vp8.Image, len(rec.Frames))
		for i := range rec.Frames {
			p, err := rec.FramePath(i)
			if err != nil {
				return nil, fmt.Errorf("%w: %w", ErrRecording, err)
			}
			v.cache[i] = &vp8.Image{}
			if err := ld.load(v.cache[i], p); err != nil {
				return nil, err
			}
		}
	}
	return v, nil
}

func medianFramePeriodUs(fr []recording.Frame) int64 {
	d := make([]int64, len(fr)-1)
	for i := range d {
		d[i] = fr[i+1].CaptureUs - fr[i].CaptureUs
	}
	// small insertion sort: frame counts are modest and this runs once
	for i := 1; i < len(d); i++ {
		for j := i; j > 0 && d[j] < d[j-1]; j-- {
			d[j], d[j-1] = d[j-1], d[j]
		}
	}
	return d[len(d)/2]
}

// storedFrame is one frame of the loop EncodeOnce encoded: as the
// sequence's encoder made it (data, a keyframe if key) and as a keyframe
// (keyData), which answers a keyframe request.
type storedFrame struct {
	data, keyData []byte
	key           bool
}

// newEncoder returns the vehicle's VP8 encoder (Config's settings).
func (v *Vehicle) newEncoder() (*vp8.Encoder, error) {
	enc, err := vp8.NewEncoder(vp8.EncoderConfig{
		Width: v.rec.Camera.Width, Height: v.rec.Camera.Height, BitrateBps: v.cfg.BitrateBps,
		FrameRateHz: 1e6 / float64(v.periodUs), KeyframeInterval: v.cfg.KeyframeInterval,
		CPUUsed: v.cfg.CPUUsed, Threads: v.cfg.Threads,
	})
	if err != nil {
		return nil, fmt.Errorf("simvehicle: %w", err)
	}
	return enc, nil
}

// encodeLoop encodes every frame of the drive once, in order, the first as
// a keyframe, with the timestamps of the first loop (Config.EncodeOnce).
func (v *Vehicle) encodeLoop() error {
	enc, err := v.newEncoder()
	if err != nil {
		return err
	}
	defer enc.Close()
	kenc, err := v.newEncoder()
	if err != nil {
		return err
	}
	defer kenc.Close()
	ld := newFrameLoader(v.rec.Camera.Width, v.rec.Camera.Height)
	img := &vp8.Image{}
	v.stored = make([]storedFrame, len(v.rec.Frames))
	var out []byte
	for i, fr := range v.rec.Frames {
		p, err := v.rec.FramePath(i)
		if err != nil {
			return fmt.Errorf("%w: %w", ErrRecording, err)
		}
		if err := ld.load(img, p); err != nil {
			return err
		}
		if i == 0 {
			enc.ForceKeyframe()
		}
		runtime.LockOSThread()
		cpu0, t0 := threadCPU(), time.Now()
		var key bool
		out, key, err = enc.Encode(out, img, v.relUs(fr.CaptureUs, 0))
		if err == nil {
			v.stored[i] = storedFrame{data: append([]byte(nil), out...), key: key}
			kenc.ForceKeyframe()
			out, _, err = kenc.Encode(out, img, v.relUs(fr.CaptureUs, 0))
			v.stored[i].keyData = append([]byte(nil), out...)
		}
		v.encodeNs.Add(int64(time.Since(t0)))
		v.encodeCPUNs.Add(int64(threadCPU() - cpu0))
		runtime.UnlockOSThread()
		if err != nil {
			return fmt.Errorf("simvehicle: encoding frame %d of the loop: %w", i, err)
		}
	}
	return nil
}

// Link returns the vehicle's link.
func (v *Vehicle) Link() *Link { return v.link }

// FramePeriod returns the median interval between the recording's frames.
func (v *Vehicle) FramePeriod() time.Duration { return time.Duration(v.periodUs) * time.Microsecond }

// Started returns a channel closed when playback started, and StartTime
// the vehicle time it started at (zero before).
func (v *Vehicle) Started() <-chan struct{} { return v.startCh }

// StartTime returns the vehicle-clock time playback started (the link's
// outage epoch), or the zero time before Run started.
func (v *Vehicle) StartTime() time.Time {
	select {
	case <-v.startCh:
		return v.start
	default:
		return time.Time{}
	}
}

// Stats returns a snapshot of the counters.
func (v *Vehicle) Stats() Stats {
	return Stats{
		FramesEncoded: v.frames.Load(), FramesSkipped: v.skipped.Load(), FramesLate: v.late.Load(),
		Keyframes: v.keyframes.Load(), KeyframeRequests: v.kfRequests.Load(),
		TelemetryRows: v.telemetryRows.Load(), Loops: v.loops.Load(),
		EncodeTotal: time.Duration(v.encodeNs.Load()), EncodeCPU: time.Duration(v.encodeCPUNs.Load()), Link: v.link.Stats(),
	}
}

// Publish connects to the WHIP endpoint with token (whip.Publish, with
// pc.WireFilter set to the link's wire filter), plays the drive, and closes
// the session when Run returns.
func (v *Vehicle) Publish(ctx context.Context, endpoint, token string, pc whip.PublishConfig) error {
	pc.WireFilter = v.link.Keep
	pub, err := whip.Publish(ctx, endpoint, token, pc)
	if err != nil {
		return err
	}
	runCtx, cancel := context.WithCancel(ctx)
	defer cancel()
	go func() {
		select {
		case <-pub.Done():
			cancel()
		case <-runCtx.Done():
		}
	}()
	err = v.Run(runCtx, pub)
	if cerr := pub.Close(); cerr != nil && err == nil {
		err = cerr
	}
	select {
	case <-pub.Done():
		if ctx.Err() == nil && errors.Is(err, context.Canceled) {
			err = fmt.Errorf("%w: the peer connection closed", ErrStopped)
		}
	default:
	}
	return err
}

// Run plays the drive into pub until it ends (without Loop) or ctx ends.
// It returns nil when the drive was played completely, ctx.Err() when ctx
// ended first, or an error wrapping ErrStopped / ErrRecording. Run may be
// called once.
func (v *Vehicle) Run(ctx context.Context, pub Publisher) error {
	first := false
	v.startOnce.Do(func() { first = true })
	if !first {
		return fmt.Errorf("%w: Run called twice", ErrConfig)
	}
	var enc *vp8.Encoder // nil with EncodeOnce: the frames are stored
	if v.stored == nil {
		var err error
		if enc, err = v.newEncoder(); err != nil {
			return err
		}
		defer enc.Close()
	}
	pk, err := rtpvp8.NewPacketizer(rtpvp8.PacketizerConfig{MTU: v.cfg.MTU, PayloadType: PayloadTypeVP8, SSRC: v.ssrc, FirstSeq: v.firstSeq})
	if err != nil {
		return fmt.Errorf("simvehicle: %w", err)
	}

	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	v.start = v.clock.Now()
	v.link.SetEpoch(v.start)
	close(v.startCh)

	var wg sync.WaitGroup
	linkErr := make(chan error, 1)
	wg.Add(3)
	go func() {
		defer wg.Done()
		linkErr <- v.link.Run(ctx, pub)
		cancel()
	}()
	go func() {
		defer wg.Done()
		for {
			select {
			case <-ctx.Done():
				return
			case <-pub.KeyframeRequests():
				v.kfRequests.Add(1)
				if enc != nil {
					enc.ForceKeyframe()
				} else {
					v.keyWanted.Store(true)
				}
			}
		}
	}()
	telErr := make(chan error, 1)
	go func() {
		defer wg.Done()
		telErr <- v.playTelemetry(ctx)
	}()
	ferr := v.playFrames(ctx, enc, pk)
	terr := <-telErr
	if ferr == nil && terr == nil {
		// let the delay line drain before stopping the link
		v.link.mu.Lock()
		last := v.link.lastRelease
		v.link.mu.Unlock()
		_ = v.clock.WaitUntil(ctx, last.Add(time.Millisecond))
	}
	cancel()
	wg.Wait()
	lerr := <-linkErr
	switch {
	case errors.Is(lerr, ErrStopped):
		return lerr
	case ferr != nil:
		return ferr
	case terr != nil:
		return terr
	}
	return nil
}

// relUs returns the playback time (microseconds since the start) of
// recording time tUs in loop n.
func (v *Vehicle) relUs(tUs int64, n int) int64 { return tUs - v.t0Us + int64(n)*v.loopUs }

func (v *Vehicle) at(rel int64) time.Time { return v.start.Add(time.Duration(rel) * time.Microsecond) }

func (v *Vehicle) playFrames(ctx context.Context, enc *vp8.Encoder, pk *rtpvp8.Packetizer) error {
	ld := newFrameLoader(v.rec.Camera.Width, v.rec.Camera.Height)
	img := &vp8.Image{}
	var out []byte
	pkts := make([]rtp.Packet, 0, 64)
	startUnixUs := v.start.UnixMicro()
	for n := 0; ; n++ {
		for i, fr := range v.rec.Frames {
			rel := v.relUs(fr.CaptureUs, n)
			due := v.at(rel)
			late := v.clock.Now().Sub(due) > time.Duration(v.periodUs)*time.Microsecond
			if v.stored != nil {
				// A stored frame is never skipped: the frames after it
				// were encoded against it. It goes out late, counted.
				if late {
					v.late.Add(1)
				}
				if err := v.clock.WaitUntil(ctx, due); err != nil {
					return err
				}
				sf := &v.stored[i]
				data, key := sf.data, sf.key
				if v.keyWanted.Swap(false) && !key {
					data, key = sf.keyData, true
				}
				v.sendFrame(i, n, rel, due, startUnixUs, data, key, 0, pk, &pkts)
				continue
			}
			if late {
				v.skipped.Add(1)
				v.recordOnboard(i, startUnixUs+rel, 0, false)
				continue
			}
			src := img
			if v.cache != nil {
				src = v.cache[i]
			} else {
				p, err := v.rec.FramePath(i)
				if err != nil {
					return fmt.Errorf("%w: %w", ErrRecording, err)
				}
				if err := ld.load(img, p); err != nil {
					return err
				}
			}
			if err := v.clock.WaitUntil(ctx, due); err != nil {
				return err
			}
			runtime.LockOSThread()
			cpu0 := threadCPU()
			t0 := time.Now()
			var key bool
			var err error
			out, key, err = enc.Encode(out, src, rel)
			dur := time.Since(t0)
			v.encodeCPUNs.Add(int64(threadCPU() - cpu0))
			runtime.UnlockOSThread()
			v.encodeNs.Add(int64(dur))
			if err != nil {
				v.log.Warn("encode failed; the next frame will be a keyframe", "frame", i, "err", err)
				v.recordOnboard(i, startUnixUs+rel, 0, false)
				continue
			}
			v.sendFrame(i, n, rel, due, startUnixUs, out, key, dur, pk, &pkts)
		}
		if !v.cfg.Loop {
			return nil
		}
		v.loops.Add(1)
	}
}

// sendFrame packetises the encoded frame i of loop n (played at rel µs
// since the start, due at due) with its RTP timestamp and hands the packets
// to the link; pkts is the packet scratch.
func (v *Vehicle) sendFrame(i, n int, rel int64, due time.Time, startUnixUs int64, out []byte, key bool, dur time.Duration,
	pk *rtpvp8.Packetizer, pkts *[]rtp.Packet) {
	ts := v.rtpBase + uint32(rel*9/100) // 90 kHz: us * 90000 / 1e6
	seq := pk.NextSeq()
	var err error
	*pkts, err = pk.Packetize((*pkts)[:0], out, ts)
	if err != nil {
		v.log.Warn("packetize failed", "frame", i, "err", err)
		v.recordOnboard(i, startUnixUs+rel, 0, false)
		return
	}
	v.recordOnboard(i, startUnixUs+rel, ts, true)
	queued := 0
	for j := range *pkts {
		if v.link.SendRTP(&(*pkts)[j]) {
			queued++
		}
	}
	v.frames.Add(1)
	if key {
		v.keyframes.Add(1)
	}
	if v.cfg.OnFrame != nil {
		v.cfg.OnFrame(FrameInfo{Index: i, Loop: n, CaptureUs: startUnixUs + rel, Capture: due,
			RTPTimestamp: ts, FirstSeq: seq, Packets: len(*pkts), Bytes: len(out), Keyframe: key,
			EncodeDur: dur, PacketsQueued: queued})
	}
}

// recordOnboard hands frame i of the drive, captured at captureUs (Unix µs),
// to the onboard recorder, if any.
func (v *Vehicle) recordOnboard(i int, captureUs int64, rtpTS uint32, sent bool) {
	if v.cfg.Onboard == nil {
		return
	}
	p, err := v.rec.FramePath(i)
	if err != nil {
		v.cfg.Onboard.fail("frame", err)
		return
	}
	v.cfg.Onboard.frame(p, captureUs, rtpTS, sent)
}

func (v *Vehicle) playTelemetry(ctx context.Context) error {
	rows := v.rec.Telemetry
	if len(rows) == 0 {
		return nil
	}
	startUnixUs := v.start.UnixMicro()
	buf := make([]byte, 0, telemetry.MaxMessageBytes)
	var seq uint32
	for n := 0; ; n++ {
		for _, r := range rows {
			rel := v.relUs(r.TimeUs, n)
			if err := v.clock.WaitUntil(ctx, v.at(rel)); err != nil {
				return err
			}
			m := telemetry.Message{TimeUs: startUnixUs + rel, SpeedMps: r.SpeedMps, YawRateRps: r.YawRateRps,
				AccelMps2: r.AccelMps2, HasAccel: r.HasAccel, SteerRad: r.SteerRad, HasSteer: r.HasSteer,
				Seq: seq, HasSeq: true}
			seq++
			var err error
			if buf, err = m.Append(buf[:0]); err != nil {
				v.log.Warn("telemetry row not encodable; skipped", "t_us", r.TimeUs, "err", err)
				continue
			}
			v.link.SendTelemetry(buf)
			v.telemetryRows.Add(1)
			if v.cfg.Onboard != nil {
				v.cfg.Onboard.sample(recording.TelemetryRow{TimeUs: m.TimeUs, SpeedMps: m.SpeedMps, YawRateRps: m.YawRateRps,
					AccelMps2: m.AccelMps2, HasAccel: m.HasAccel, SteerRad: m.SteerRad, HasSteer: m.HasSteer})
			}
		}
		if !v.cfg.Loop {
			return nil
		}
	}
}

// threadCPU returns the calling thread's user + system CPU time
// (getrusage(2) with RUSAGE_THREAD, Linux), or 0 where it is not available.
func threadCPU() time.Duration {
	const rusageThread = 1 // RUSAGE_THREAD, linux/resource.h
	var ru syscall.Rusage
	if err := syscall.Getrusage(rusageThread, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}
