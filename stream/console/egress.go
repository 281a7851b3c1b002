package console

import (
	"sync"
	"sync/atomic"
	"time"

	"stopgap/stream/rtpvp8"
	"stopgap/stream/vp8splice"
)

// sharedBuf is an immutable byte buffer shared by all viewers of one frame or
// meta message. It is reference counted and returns to its pool when the
// last holder releases it, so the steady-state per-frame path does not
// allocate.
//
// A frame the relay encoded is data. A forwarded frame is parts, the
// vehicle's packets, whose Data slices point into data, and ts, the
// vehicle's RTP timestamp. num is the frame's number in the order frames
// reached the egress (from 1) and key whether it is a keyframe.
type sharedBuf struct {
	num   uint64
	key   bool
	data  []byte
	parts []rtpvp8.Part
	ts    uint32
	refs  atomic.Int32
	pool  *sync.Pool
}

func (b *sharedBuf) release() {
	if b.refs.Add(-1) == 0 {
		b.data = b.data[:0]
		b.parts = b.parts[:0]
		b.pool.Put(b)
	}
}

// source tells which source the frame in b is from.
func (b *sharedBuf) source() vp8splice.Source {
	if len(b.parts) > 0 {
		return vp8splice.SourceForwarded
	}
	return vp8splice.SourceEncoded
}

// videoItem is one queued frame for one viewer. startNs/durNs place it on
// the egress timeline (nanoseconds since the first WriteFrame).
type videoItem struct {
	buf     *sharedBuf
	startNs int64
	durNs   int64
}

// viewerSink is what a viewer sends to. sendVideo and sendMeta are called
// from the viewer's own goroutines, never concurrently with themselves; the
// frame and the byte slices are only valid during the call.
type viewerSink interface {
	sendVideo(frame *sharedBuf, startNs, durNs int64) error
	sendMeta(msg []byte) error
}

// viewer is one connected receiver with its bounded queues.
type viewer struct {
	num    uint64
	sink   viewerSink
	videoQ chan videoItem
	metaQ  chan *sharedBuf
	wg     sync.WaitGroup

	// guarded by egress.mu
	waitKey    bool             // drop delta frames until the next keyframe
	lastKeyReq time.Time        // last keyframe request made for this viewer
	last       vp8splice.Source // source of the last frame queued

	sent, dropped, skipped, metaSent, metaDropped, sendErrors atomic.Uint64
}

func newViewer(num uint64, sink viewerSink, videoQ, metaQ int) *viewer {
	return &viewer{num: num, sink: sink, videoQ: make(chan videoItem, videoQ), metaQ: make(chan *sharedBuf, metaQ)}
}

// start runs the two sender goroutines until the queues are closed.
func (v *viewer) start() {
	v.wg.Add(2)
	go func() {
		defer v.wg.Done()
		for it := range v.videoQ {
			if err := v.sink.sendVideo(it.buf, it.startNs, it.durNs); err != nil {
				v.sendErrors.Add(1)
			} else {
				v.sent.Add(1)
			}
			it.buf.release()
		}
	}()
	go func() {
		defer v.wg.Done()
		for b := range v.metaQ {
			if err := v.sink.sendMeta(b.data); err != nil {
				v.metaDropped.Add(1)
			} else {
				v.metaSent.Add(1)
			}
			b.release()
		}
	}()
}

// Stats are cumulative egress counters.
type Stats struct {
	Viewers          int    // connected viewers now
	Sessions         int    // sessions now, half-open included
	FramesIn         uint64 // frames passed to WriteFrame and ForwardFrame
	FramesForwarded  uint64 // of which passed to ForwardFrame
	FramesSent       uint64 // frames handed to viewers' RTP senders (all viewers)
	FramesDropped    uint64 // frames dropped because a viewer's queue was full
	FramesSkipped    uint64 // delta frames not sent because the viewer waited for a keyframe (or the source switched on one)
	MetaIn           uint64 // messages passed to WriteMeta
	MetaSent         uint64 // messages sent on data channels (all viewers)
	MetaDropped      uint64 // messages dropped: queue full, channel not open or backed up
	SendErrors       uint64 // RTP send errors
	KeyframeRequests uint64 // calls made to Config.KeyframeNeeded
}

// egress fans frames and meta messages out to viewers without blocking the
// caller.
type egress struct {
	now      func() time.Time
	retry    time.Duration
	keyframe func(KeyframeReason)

	mu         sync.Mutex
	viewers    []*viewer
	timelineNs int64
	closed     bool
	lastMeta   []byte // last encoded meta message, reused

	pool             sync.Pool
	framesIn, metaIn atomic.Uint64
	framesForwarded  atomic.Uint64
	keyReqs          atomic.Uint64
	gone             Stats // counters of viewers that left, guarded by mu
}

func newEgress(now func() time.Time, retry time.Duration, keyframe func(KeyframeReason)) *egress {
	e := &egress{now: now, retry: retry, keyframe: keyframe}
	e.pool.New = func() any { return &sharedBuf{pool: &e.pool} }
	return e
}

// getBuf returns a pooled buffer holding a copy of data with one reference.
func (e *egress) getBuf(data []byte) *sharedBuf {
	b := e.pool.Get().(*sharedBuf)
	b.data = append(b.data[:0], data...)
	b.refs.Store(1)
	return b
}

// request calls the keyframe callback once per reason bit set in mask.
func (e *egress) request(mask uint32) {
	for r := KeyframeViewerJoined; r <= keyframeReasonLast; r++ {
		if mask&(1<<uint(r)) != 0 {
			e.keyReqs.Add(1)
			if e.keyframe != nil {
				e.keyframe(r)
			}
		}
	}
}

// add starts v and makes it receive from the next keyframe on; it asks for
// a keyframe (KeyframeViewerJoined). It returns false after close.
func (e *egress) add(v *viewer) bool {
	e.mu.Lock()
	if e.closed {
		e.mu.Unlock()
		return false
	}
	v.waitKey = true
	v.lastKeyReq = e.now()
	v.start()
	e.viewers = append(e.viewers, v)
	e.mu.Unlock()
	e.request(1 << uint(KeyframeViewerJoined))
	return true
}

// remove detaches v, closes its queues and waits for its senders to finish.
// It is a no-op for a viewer not attached.
func (e *egress) remove(v *viewer) {
	e.mu.Lock()
	found := false
	for i, w := range e.viewers {
		if w == v {
			e.viewers = append(e.viewers[:i], e.viewers[i+1:]...)
			found = true
			break
		}
	}
	if found {
		close(v.videoQ)
		close(v.metaQ)
	}
	e.mu.Unlock()
	if !found {
		return
	}
	v.wg.Wait()
	e.mu.Lock()
	e.gone.FramesSent += v.sent.Load()
	e.gone.FramesDropped += v.dropped.Load()
	e.gone.FramesSkipped += v.skipped.Load()
	e.gone.MetaSent += v.metaSent.Load()
	e.gone.MetaDropped += v.metaDropped.Load()
	e.gone.SendErrors += v.sendErrors.Load()
	e.mu.Unlock()
}

// count returns the number of attached viewers.
func (e *egress) count() int {
	e.mu.Lock()
	defer e.mu.Unlock()
	return len(e.viewers)
}

// writeFrame queues frame, encoded by the relay, for every viewer; see
// Console.WriteFrame.
func (e *egress) writeFrame(frame []byte, dur time.Duration) error {
	if len(frame) == 0 {
		return ErrEmptyFrame
	}
	if dur <= 0 {
		return ErrBadDuration
	}
	return e.queue(vp8IsKeyframe(frame), dur, func(b *sharedBuf) {
		b.data = append(b.data[:0], frame...)
	})
}

// forwardFrame queues the vehicle's frame parts for every viewer; see
// Console.ForwardFrame.
func (e *egress) forwardFrame(parts []rtpvp8.Part, rtpTS uint32, dur time.Duration) error {
	if len(parts) == 0 {
		return ErrEmptyFrame
	}
	if dur <= 0 {
		return ErrBadDuration
	}
	if !parts[0].Desc.FrameStart() || len(parts[0].Data) == 0 {
		return ErrBadForward
	}
	err := e.queue(rtpvp8.IsKeyframe(parts[0].Data), dur, func(b *sharedBuf) {
		b.data, b.parts = b.data[:0], b.parts[:0]
		for _, p := range parts {
			b.data = append(b.data, p.Data...)
		}
		off := 0
		for _, p := range parts {
			q := p
			q.Data = b.data[off : off+len(p.Data) : off+len(p.Data)]
			off += len(p.Data)
			b.parts = append(b.parts, q)
		}
		b.ts = rtpTS
	})
	if err == nil {
		e.framesForwarded.Add(1)
	}
	return err
}

// queue hands one frame to every viewer, fill writing it into a pooled
// buffer (called only if someone watches). A viewer decodes a frame only
// against references from the same source: a viewer that waits for a
// keyframe, or whose last frame came from the other source, skips inter
// frames until a keyframe.
func (e *egress) queue(key bool, dur time.Duration, fill func(*sharedBuf)) error {
	var mask uint32
	e.mu.Lock()
	if e.closed {
		e.mu.Unlock()
		return ErrClosed
	}
	num := e.framesIn.Add(1)
	start := e.timelineNs
	e.timelineNs += int64(dur)
	if len(e.viewers) > 0 {
		now := e.now()
		buf := e.getBuf(nil)
		fill(buf)
		buf.num, buf.key = num, key
		src := buf.source()
		for _, v := range e.viewers {
			if !key && !v.waitKey && v.last != src && v.last != vp8splice.SourceInvalid {
				// An inter frame from the other source (the egress
				// caller switched without a keyframe): wait for one.
				v.waitKey = true
				v.lastKeyReq = now
				mask |= 1 << uint(KeyframeSourceSwitch)
			}
			if v.waitKey {
				if !key {
					v.skipped.Add(1)
					if now.Sub(v.lastKeyReq) >= e.retry {
						v.lastKeyReq = now
						mask |= 1 << uint(KeyframeRetry)
					}
					continue
				}
				v.waitKey = false
			}
			buf.refs.Add(1)
			select {
			case v.videoQ <- videoItem{buf: buf, startNs: start, durNs: int64(dur)}:
				v.last = src
			default:
				// A decoder that misses a frame decodes the following delta
				// frames against the wrong reference: skip to a keyframe.
				buf.refs.Add(-1)
				v.dropped.Add(1)
				v.waitKey = true
				v.lastKeyReq = now
				mask |= 1 << uint(KeyframeQueueDrop)
			}
		}
		buf.release()
	}
	e.mu.Unlock()
	e.request(mask)
	return nil
}

// writeMeta encodes m once and queues it for every viewer.
func (e *egress) writeMeta(m *Meta) error {
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.closed {
		return ErrClosed
	}
	out, err := m.AppendJSON(e.lastMeta[:0])
	if err != nil {
		return err
	}
	e.lastMeta = out
	e.metaIn.Add(1)
	if len(e.viewers) == 0 {
		return nil
	}
	buf := e.getBuf(out)
	for _, v := range e.viewers {
		buf.refs.Add(1)
		select {
		case v.metaQ <- buf:
		default:
			buf.refs.Add(-1)
			v.metaDropped.Add(1)
		}
	}
	buf.release()
	return nil
}

// appendLastMeta appends the last meta message to dst; ok is false if none.
func (e *egress) appendLastMeta(dst []byte) ([]byte, bool) {
	e.mu.Lock()
	defer e.mu.Unlock()
	if len(e.lastMeta) == 0 {
		return dst, false
	}
	return append(dst, e.lastMeta...), true
}

// stats sums the counters of current and departed viewers.
func (e *egress) stats() Stats {
	e.mu.Lock()
	s := e.gone
	vs := append([]*viewer(nil), e.viewers...)
	e.mu.Unlock()
	s.Viewers = len(vs)
	for _, v := range vs {
		s.FramesSent += v.sent.Load()
		s.FramesDropped += v.dropped.Load()
		s.FramesSkipped += v.skipped.Load()
		s.MetaSent += v.metaSent.Load()
		s.MetaDropped += v.metaDropped.Load()
		s.SendErrors += v.sendErrors.Load()
	}
	s.FramesIn = e.framesIn.Load()
	s.FramesForwarded = e.framesForwarded.Load()
	s.MetaIn = e.metaIn.Load()
	s.KeyframeRequests = e.keyReqs.Load()
	return s
}

// close detaches all viewers; later writes return ErrClosed.
func (e *egress) close() {
	e.mu.Lock()
	e.closed = true
	vs := append([]*viewer(nil), e.viewers...)
	e.mu.Unlock()
	for _, v := range vs {
		e.remove(v)
	}
}

// vp8IsKeyframe reports whether frame starts with a VP8 key frame header:
// frame tag bit 0 (P) is 0 and bytes 3..5 are the start code 9d 01 2a
// (RFC 6386 section 9.1).
func vp8IsKeyframe(frame []byte) bool {
	return len(frame) >= 10 && frame[0]&1 == 0 && frame[3] == 0x9d && frame[4] == 0x01 && frame[5] == 0x2a
}
