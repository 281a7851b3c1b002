package console

import (
	"bytes"
	"sync"
	"testing"
	"time"

	"stopgap/stream/vp8splice"
)

// sinkViewer sends a viewer's frames through an rtpSink, as a session does.
type sinkViewer struct {
	s   *rtpSink
	got chan struct{}
}

func (v sinkViewer) sendVideo(b *sharedBuf, startNs, durNs int64) error {
	defer func() { v.got <- struct{}{} }()
	return v.s.writeFrame(b, startNs, durNs)
}

func (v sinkViewer) sendMeta([]byte) error { return nil }

// TestTraceSent: the tracer reports every frame a viewer was sent, after
// its packets, with the RTP timestamp of those packets, the frame's number
// in the egress (a frame skipped for the viewer leaves a gap), its source
// and keyframe flag, the vehicle's timestamp of a forwarded frame and its
// VP8 data.
func TestTraceSent(t *testing.T) {
	var c capture
	var tr sentTracer
	var mu sync.Mutex
	var got []SentFrame
	fn := func(f SentFrame) {
		mu.Lock()
		defer mu.Unlock()
		f.Frame = append([]byte(nil), f.Frame...)
		got = append(got, f)
	}
	tr.fn.Store(&fn)
	sink := &rtpSink{splicer: vp8splice.Splicer{MTU: rtpMTU, PayloadType: 96, SSRC: 1}, out: &c, viewer: 7, trace: &tr}
	e := newEgress(func() time.Time { return time.Unix(1000, 0) }, time.Second, nil)
	v := newViewer(7, sinkViewer{s: sink, got: make(chan struct{}, 16)}, 16, 16)
	e.add(v)
	fwd := func(frame []byte, pid uint16, ts uint32) {
		t.Helper()
		if err := e.forwardFrame(forwarded(frame, 4, pid, ts).parts, ts, tick); err != nil {
			t.Fatal(err)
		}
	}
	enc := func(frame []byte) {
		t.Helper()
		if err := e.writeFrame(frame, tick); err != nil {
			t.Fatal(err)
		}
	}
	fwd(keyFrame, 1, 50000)
	fwd(deltaFrame, 2, 53003)
	enc(deltaFrame) // an inter frame from the other source: skipped
	enc(keyFrame)
	enc(deltaFrame)
	waitN(t, v.sink.(sinkViewer).got, 4)
	e.remove(v)

	want := []SentFrame{
		{Viewer: 7, Num: 1, Source: vp8splice.SourceForwarded, Keyframe: true, SourceRTPTimestamp: 50000, Frame: keyFrame},
		{Viewer: 7, Num: 2, Source: vp8splice.SourceForwarded, SourceRTPTimestamp: 53003, Frame: deltaFrame},
		{Viewer: 7, Num: 4, Source: vp8splice.SourceEncoded, Keyframe: true, Frame: keyFrame},
		{Viewer: 7, Num: 5, Source: vp8splice.SourceEncoded, Frame: deltaFrame},
	}
	if len(got) != len(want) {
		t.Fatalf("%d frames traced, want %d: %+v", len(got), len(want), got)
	}
	// Each traced timestamp is its frame's packets' timestamp.
	var pktTS []uint32
	for i, p := range c.pkts {
		if i == 0 || p.Timestamp != c.pkts[i-1].Timestamp {
			pktTS = append(pktTS, p.Timestamp)
		}
	}
	if len(pktTS) != len(want) {
		t.Fatalf("%d frames on the wire, want %d", len(pktTS), len(want))
	}
	for i, w := range want {
		g := got[i]
		w.RTPTimestamp = pktTS[i]
		if g.Viewer != w.Viewer || g.Num != w.Num || g.RTPTimestamp != w.RTPTimestamp || g.Source != w.Source ||
			g.Keyframe != w.Keyframe || g.SourceRTPTimestamp != w.SourceRTPTimestamp || !bytes.Equal(g.Frame, w.Frame) {
			t.Errorf("frame %d traced as %+v, want %+v", i, g, w)
		}
	}

	// No tracer: nothing is called.
	tr.fn.Store(nil)
	n := len(got)
	if err := sink.writeFrame(encoded(deltaFrame), 10*int64(tick), int64(tick)); err != nil {
		t.Fatal(err)
	}
	if len(got) != n {
		t.Error("a frame was traced after the tracer was removed")
	}
}
