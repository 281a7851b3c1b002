package console

import (
	"bytes"
	"errors"
	"sync"
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/internal/display"
	"stopgap/stream/rtpvp8"
	"stopgap/stream/vp8splice"
)

// keyFrame and deltaFrame are minimal VP8 frames with consistent headers
// (RFC 6386 section 9.1): frame tag with show_frame=1 and a first partition
// of 1 octet; a key frame has P=0 and the start code 9d 01 2a, then 14-bit
// width and height (here 320 x 180, little endian).
var (
	keyFrame   = []byte{0x30, 0x00, 0x00, 0x9d, 0x01, 0x2a, 0x40, 0x01, 0xb4, 0x00, 0xaa}
	deltaFrame = []byte{0x31, 0x00, 0x00, 0x11, 0x22, 0x33, 0x44, 0x55, 0x66, 0x77}
)

func TestVP8IsKeyframe(t *testing.T) {
	cases := []struct {
		name  string
		frame []byte
		want  bool
	}{
		{"key", keyFrame, true},
		{"delta", deltaFrame, false},
		{"key tag but no start code", []byte{0x50, 0x01, 0x00, 0x9d, 0x01, 0x2b, 0, 0, 0, 0}, false},
		{"too short", keyFrame[:9], false},
		{"empty", nil, false},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			if got := vp8IsKeyframe(tc.frame); got != tc.want {
				t.Errorf("vp8IsKeyframe = %v, want %v", got, tc.want)
			}
		})
	}
}

// fakeSink records what a viewer sent; block makes sendVideo wait.
type fakeSink struct {
	mu      sync.Mutex
	frames  [][]byte
	fwd     []bool // the frame was forwarded (else encoded by the relay)
	starts  []int64
	metas   []string
	block   chan struct{} // if set, sendVideo waits for it to close
	entered chan struct{} // if set, signalled when sendVideo starts
	got     chan struct{}
}

func newFakeSink() *fakeSink { return &fakeSink{got: make(chan struct{}, 1000)} }

func (s *fakeSink) sendVideo(b *sharedBuf, startNs, durNs int64) error {
	if s.entered != nil {
		s.entered <- struct{}{}
	}
	if s.block != nil {
		<-s.block
	}
	s.mu.Lock()
	s.frames = append(s.frames, append([]byte(nil), b.data...))
	s.fwd = append(s.fwd, len(b.parts) > 0)
	s.starts = append(s.starts, startNs)
	s.mu.Unlock()
	s.got <- struct{}{}
	return nil
}

func (s *fakeSink) sendMeta(msg []byte) error {
	s.mu.Lock()
	s.metas = append(s.metas, string(msg))
	s.mu.Unlock()
	return nil
}

type fakeClock struct{ t time.Time }

func (c *fakeClock) now() time.Time { return c.t }

type reasonLog struct {
	mu sync.Mutex
	rs []KeyframeReason
}

func (l *reasonLog) add(r KeyframeReason) { l.mu.Lock(); l.rs = append(l.rs, r); l.mu.Unlock() }
func (l *reasonLog) get() []KeyframeReason {
	l.mu.Lock()
	defer l.mu.Unlock()
	return append([]KeyframeReason(nil), l.rs...)
}

func waitN(t *testing.T, ch chan struct{}, n int) {
	t.Helper()
	for i := 0; i < n; i++ {
		select {
		case <-ch:
		case <-time.After(5 * time.Second):
			t.Fatalf("only %d of %d frames arrived", i, n)
		}
	}
}

const tick = 33333333 * time.Nanosecond // 30 fps

func TestEgressNewViewerStartsAtKeyframe(t *testing.T) {
	clk := &fakeClock{t: time.Unix(1000, 0)}
	var reasons reasonLog
	e := newEgress(clk.now, 200*time.Millisecond, reasons.add)
	sink := newFakeSink()
	v := newViewer(1, sink, 8, 8)
	if !e.add(v) {
		t.Fatal("add failed")
	}
	if got := reasons.get(); len(got) != 1 || got[0] != KeyframeViewerJoined {
		t.Fatalf("reasons after join = %v, want [viewer-joined]", got)
	}
	// deltas before the keyframe are skipped; a retry is asked 200 ms later
	for i := 0; i < 8; i++ {
		if err := e.writeFrame(deltaFrame, tick); err != nil {
			t.Fatal(err)
		}
		clk.t = clk.t.Add(tick)
	}
	if got := reasons.get(); len(got) != 2 || got[1] != KeyframeRetry {
		t.Fatalf("reasons after 8 deltas (267 ms) = %v, want [viewer-joined retry]", got)
	}
	e.writeFrame(keyFrame, tick)
	e.writeFrame(deltaFrame, tick)
	waitN(t, sink.got, 2)
	e.remove(v)
	if len(sink.frames) != 2 || !vp8IsKeyframe(sink.frames[0]) {
		t.Fatalf("viewer got %d frames, first key=%v; want key then delta", len(sink.frames), len(sink.frames) > 0 && vp8IsKeyframe(sink.frames[0]))
	}
	if want := int64(8 * tick); sink.starts[0] != want {
		t.Errorf("keyframe placed at %d ns on the timeline, want %d (skipped frames keep their time)", sink.starts[0], want)
	}
	st := e.stats()
	if st.FramesIn != 10 || st.FramesSkipped != 8 || st.FramesSent != 2 || st.FramesDropped != 0 || st.KeyframeRequests != 2 {
		t.Errorf("stats = %+v", st)
	}
}

// TestEgressSlowViewerNeverBlocks: a viewer whose sender is stuck fills its
// queue; WriteFrame keeps returning, drops and counts, asks for a keyframe,
// and the viewer resumes at a keyframe, not at a delta frame that would
// decode against a missing reference. A second, healthy viewer gets all.
func TestEgressSlowViewerNeverBlocks(t *testing.T) {
	clk := &fakeClock{t: time.Unix(1000, 0)}
	var reasons reasonLog
	e := newEgress(clk.now, 200*time.Millisecond, reasons.add)
	slow, fast := newFakeSink(), newFakeSink()
	slow.block = make(chan struct{})
	slow.entered = make(chan struct{}, 100)
	vs, vf := newViewer(1, slow, 4, 4), newViewer(2, fast, 64, 64)
	e.add(vs)
	e.add(vf)
	e.writeFrame(keyFrame, tick)
	<-slow.entered            // the sender now holds the keyframe and is stuck
	for i := 0; i < 19; i++ { // 4 fit in the queue, the 5th drops, the rest wait for a keyframe
		if err := e.writeFrame(deltaFrame, tick); err != nil {
			t.Fatal(err)
		}
	}
	st := e.stats()
	if st.FramesDropped != 1 || st.FramesSkipped != 14 {
		t.Errorf("after 20 frames with a stuck viewer: dropped %d skipped %d, want 1 and 14", st.FramesDropped, st.FramesSkipped)
	}
	rs := reasons.get()
	if len(rs) < 3 || rs[2] != KeyframeQueueDrop {
		t.Errorf("reasons = %v, want a queue-drop request after the joins", rs)
	}
	close(slow.block) // sender unstuck: it drains the 5 queued frames
	waitN(t, slow.got, 5)
	e.writeFrame(deltaFrame, tick) // still skipped
	e.writeFrame(keyFrame, tick)   // resumes here
	waitN(t, slow.got, 1)
	waitN(t, fast.got, 22)
	e.remove(vs)
	e.remove(vf)
	if n := len(slow.frames); n != 6 || !vp8IsKeyframe(slow.frames[5]) {
		t.Errorf("slow viewer got %d frames, last key=%v; want 5 queued + the keyframe", n, vp8IsKeyframe(slow.frames[n-1]))
	}
	if len(fast.frames) != 22 {
		t.Errorf("fast viewer got %d frames, want 22", len(fast.frames))
	}
}

func TestEgressMetaFanOut(t *testing.T) {
	e := newEgress(time.Now, time.Second, nil)
	if _, ok := e.appendLastMeta(nil); ok {
		t.Fatal("last meta before any")
	}
	a, b := newFakeSink(), newFakeSink()
	va, vb := newViewer(1, a, 8, 8), newViewer(2, b, 8, 8)
	e.add(va)
	e.add(vb)
	m := sampleMeta()
	for i := 0; i < 3; i++ {
		m.Seq = uint64(i)
		if err := e.writeMeta(&m); err != nil {
			t.Fatal(err)
		}
	}
	m.State = display.StateInvalid
	if err := e.writeMeta(&m); !errors.Is(err, ErrBadMeta) {
		t.Errorf("invalid meta err = %v", err)
	}
	e.remove(va)
	e.remove(vb)
	want, _ := (&Meta{Seq: 2, TimeUs: 27066666, State: display.StatePredicted, AgeMs: 133.5, PeriodMs: sampleMeta().PeriodMs, Confidence: 0.81, Cutoff: 0.6,
		Profile: "city", Link: sampleMeta().Link}).AppendJSON(nil)
	for _, s := range []*fakeSink{a, b} {
		if len(s.metas) != 3 || s.metas[2] != string(want) {
			t.Errorf("viewer got %q, want 3 messages ending %s", s.metas, want)
		}
	}
	if last, ok := e.appendLastMeta(nil); !ok || string(last) != string(want) {
		t.Errorf("last meta = %s", last)
	}
}

func TestEgressErrors(t *testing.T) {
	e := newEgress(time.Now, time.Second, nil)
	if err := e.writeFrame(nil, tick); !errors.Is(err, ErrEmptyFrame) {
		t.Errorf("empty: %v", err)
	}
	if err := e.writeFrame(keyFrame, 0); !errors.Is(err, ErrBadDuration) {
		t.Errorf("zero duration: %v", err)
	}
	e.close()
	if err := e.writeFrame(keyFrame, tick); !errors.Is(err, ErrClosed) {
		t.Errorf("after close: %v", err)
	}
	m := sampleMeta()
	if err := e.writeMeta(&m); !errors.Is(err, ErrClosed) {
		t.Errorf("meta after close: %v", err)
	}
	if e.add(newViewer(1, newFakeSink(), 1, 1)) {
		t.Error("add after close succeeded")
	}
}

// capture collects RTP packets.
type capture struct{ pkts []*rtp.Packet }

func (c *capture) WriteRTP(p *rtp.Packet) error {
	q := p.Clone() // the sink reuses its packets and payload buffer
	c.pkts = append(c.pkts, q)
	return nil
}

// encoded returns a pooled-like buffer holding a frame encoded by the relay.
func encoded(frame []byte) *sharedBuf { return &sharedBuf{data: frame} }

// forwarded returns a buffer holding frame as the vehicle's packets of at
// most size octets of VP8 data each, with 7-bit picture ID pid and RTP
// timestamp ts.
func forwarded(frame []byte, size int, pid uint16, ts uint32) *sharedBuf {
	b := &sharedBuf{data: frame, ts: ts}
	for off := 0; off < len(frame); off += size {
		end := min(off+size, len(frame))
		d := rtpvp8.Descriptor{Start: off == 0, HasPictureID: true, PictureID: pid}
		b.parts = append(b.parts, rtpvp8.Part{Desc: d, Marker: end == len(frame), Data: frame[off:end]})
	}
	return b
}

// TestRTPSinkTimestamps: RTP timestamps follow the timeline at 90 kHz
// (RFC 7741 section 4.1); a skipped frame leaves a gap of its duration while
// sequence numbers stay continuous; a large frame is split over packets that
// share a timestamp with the marker bit on the last (RFC 3550 section 5.1).
// Forwarded frames keep their packets and the vehicle's timestamp steps,
// and the numbering runs on across the switches.
func TestRTPSinkTimestamps(t *testing.T) {
	var c capture
	s := rtpSink{splicer: vp8splice.Splicer{MTU: rtpMTU, PayloadType: 96, SSRC: 1, FirstSeq: 100}, out: &c}
	big := make([]byte, 3000)
	copy(big, keyFrame)
	d := int64(40 * time.Millisecond) // 3600 ticks exactly
	steps := []struct {
		frame *sharedBuf
		start int64
	}{
		{encoded(big), 0}, {encoded(deltaFrame), d}, {encoded(deltaFrame), 3 * d}, // frame at 2*d skipped
		{forwarded(big, 1000, 5, 50000), 4 * d}, {forwarded(deltaFrame, 6, 6, 53003), 5 * d}, // the vehicle's step: 3003
		{encoded(big), 6 * d},
	}
	for _, st := range steps {
		if err := s.writeFrame(st.frame, st.start, d); err != nil {
			t.Fatal(err)
		}
	}
	wantTs := []uint32{0, 0, 0, 3600, 10800, 14400, 14400, 14400, 17403, 17403, 21003, 21003, 21003}
	wantMarker := []bool{false, false, true, true, true, false, false, true, false, true, false, false, true}
	if len(c.pkts) != len(wantTs) {
		t.Fatalf("%d packets, want %d", len(c.pkts), len(wantTs))
	}
	ts0 := c.pkts[0].Timestamp
	for i, p := range c.pkts {
		if got := p.Timestamp - ts0; got != wantTs[i] {
			t.Errorf("packet %d: timestamp +%d, want +%d", i, got, wantTs[i])
		}
		if p.SequenceNumber != uint16(100+i) {
			t.Errorf("packet %d: seq %d, want %d", i, p.SequenceNumber, 100+i)
		}
		if p.Marker != wantMarker[i] {
			t.Errorf("packet %d: marker %v, want %v", i, p.Marker, wantMarker[i])
		}
	}
	// The forwarded keyframe kept the vehicle's three packets and data.
	for i, want := range [][]byte{big[:1000], big[1000:2000], big[2000:]} {
		var desc rtpvp8.Descriptor
		n, err := desc.Unmarshal(c.pkts[5+i].Payload)
		if err != nil || !bytes.Equal(c.pkts[5+i].Payload[n:], want) {
			t.Errorf("forwarded packet %d: %v, data changed", i, err)
		}
	}
	// 30 frames of 1/30 s (33333333 ns each) end at 89999 ticks: the
	// cumulative conversion loses less than one tick however long it runs.
	if got := ticks90k(30 * int64(time.Second/30)); got != 89999 {
		t.Errorf("ticks90k(30 frames) = %d, want 89999", got)
	}
	if ticks90k(int64(time.Second)) != 90000 || ticks90k(int64(time.Hour)) != 324000000 {
		t.Error("ticks90k of 1 s or 1 h")
	}
}

// TestEgressSwitchesSourceOnKeyframes: a viewer gets forwarded and encoded
// frames in one stream but changes source only at a keyframe; an inter frame
// from the other source is skipped and a keyframe asked for
// (KeyframeSourceSwitch), so its decoder never decodes against a reference
// from the other encoder.
func TestEgressSwitchesSourceOnKeyframes(t *testing.T) {
	clk := &fakeClock{t: time.Unix(1000, 0)}
	var reasons reasonLog
	e := newEgress(clk.now, 200*time.Millisecond, reasons.add)
	sink := newFakeSink()
	v := newViewer(1, sink, 16, 16)
	e.add(v)
	fwd := func(frame []byte) error {
		return e.forwardFrame(forwarded(frame, 4, 1, 0).parts, 0, tick)
	}
	steps := []struct {
		forward bool
		frame   []byte
		sent    bool
	}{
		{true, deltaFrame, false}, // waits for a keyframe after joining
		{true, keyFrame, true},
		{true, deltaFrame, true},
		{false, deltaFrame, false}, // encoded inter after forwarded: skipped
		{false, deltaFrame, false},
		{false, keyFrame, true},
		{false, deltaFrame, true},
		{true, deltaFrame, false}, // forwarded inter after encoded: skipped
		{true, keyFrame, true},
	}
	want := 0
	for i, st := range steps {
		var err error
		if st.forward {
			err = fwd(st.frame)
		} else {
			err = e.writeFrame(st.frame, tick)
		}
		if err != nil {
			t.Fatalf("step %d: %v", i, err)
		}
		if st.sent {
			want++
		}
	}
	waitN(t, sink.got, want)
	e.remove(v)
	j := 0
	for i, st := range steps {
		if !st.sent {
			continue
		}
		if !bytes.Equal(sink.frames[j], st.frame) || sink.fwd[j] != st.forward {
			t.Errorf("step %d: viewer frame %d is %x forwarded=%v, want %x forwarded=%v", i, j, sink.frames[j], sink.fwd[j], st.frame, st.forward)
		}
		j++
	}
	rs := reasons.get()
	if len(rs) < 2 || rs[1] != KeyframeSourceSwitch {
		t.Errorf("keyframe reasons %v, want viewer-joined then source-switch", rs)
	}
	st := e.stats()
	if st.FramesIn != 9 || st.FramesForwarded != 5 || st.FramesSkipped != 4 || st.FramesSent != 5 {
		t.Errorf("stats %+v", st)
	}
	if err := e.forwardFrame(forwarded(deltaFrame, 4, 1, 0).parts[1:], 0, tick); !errors.Is(err, ErrBadForward) {
		t.Errorf("parts without a frame start: %v, want ErrBadForward", err)
	}
}
