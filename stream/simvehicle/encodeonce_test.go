package simvehicle

import (
	"bytes"
	"context"
	"errors"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/stream/rtpvp8"
	"stopgap/stream/vp8"
)

// assemblingPublisher reassembles and decodes what the vehicle sends.
type assemblingPublisher struct {
	mu     sync.Mutex
	asm    *rtpvp8.Assembler
	sink   decodeSink
	frames []rtpvp8.Frame // data cloned
	seqs   []uint16
	errs   int
	kf     chan time.Time
}

func (p *assemblingPublisher) WriteRTP(pkt *rtp.Packet) error {
	p.mu.Lock()
	defer p.mu.Unlock()
	p.seqs = append(p.seqs, pkt.SequenceNumber)
	if err := p.asm.Push(pkt, time.Now()); err != nil {
		p.errs++
	}
	return nil
}
func (p *assemblingPublisher) SendTelemetry([]byte) error         { return nil }
func (p *assemblingPublisher) KeyframeRequests() <-chan time.Time { return p.kf }

// TestEncodeOnceSendsTheStoredLoop plays three loops of a short drive
// (0.4 s each, in real time: the link's delay line paces the packets) with
// EncodeOnce: every frame decodes (no loss, no decode
// error), each loop starts with a keyframe, a keyframe request is answered
// within a frame or two, loops 2 and 3 carry the compressed frames of loop 1
// byte for byte (but the keyframe that answered the request), and the RTP sequence numbers
// and timestamps go on across the loops (consecutive; one frame period at
// 90 kHz apart within a loop, at least that across the seam).
func TestEncodeOnceSendsTheStoredLoop(t *testing.T) {
	const n = 12
	rec := writeTestRecording(t, filepath.Join(t.TempDir(), "drive"), 64, 48, n, 30)
	link, err := NewLink(LinkConfig{}, nil)
	if err != nil {
		t.Fatal(err)
	}
	dec, err := vp8.NewDecoder()
	if err != nil {
		t.Fatal(err)
	}
	defer dec.Close()
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	pub := &assemblingPublisher{sink: decodeSink{dec: dec}, kf: make(chan time.Time, 1)}
	const asked = n + 5 // a keyframe request after this many frames
	pub.asm, err = rtpvp8.NewAssembler(rtpvp8.AssemblerConfig{}, rtpvp8.SinkFuncs{
		Frame: func(f rtpvp8.Frame) {
			pub.sink.OnFrame(f)
			f.Data = bytes.Clone(f.Data)
			pub.frames = append(pub.frames, f)
			if len(pub.frames) == asked {
				pub.kf <- time.Now()
			}
			if len(pub.frames) == 3*n {
				cancel()
			}
		},
		Loss: pub.sink.OnLoss,
	})
	if err != nil {
		t.Fatal(err)
	}
	veh, err := New(Config{Recording: rec, Link: link, Loop: true, EncodeOnce: true})
	if err != nil {
		t.Fatal(err)
	}
	if err := veh.Run(ctx, pub); !errors.Is(err, context.Canceled) {
		t.Fatalf("Run: %v, want context.Canceled", err)
	}
	pub.mu.Lock()
	defer pub.mu.Unlock()
	if len(pub.frames) < 3*n {
		t.Fatalf("%d frames assembled, want at least %d", len(pub.frames), 3*n)
	}
	if pub.sink.losses != 0 || pub.errs != 0 || pub.sink.decoded != len(pub.frames) {
		t.Fatalf("%d losses, %d push errors, %d of %d frames decoded", pub.sink.losses, pub.errs, pub.sink.decoded, len(pub.frames))
	}
	for i := 1; i < len(pub.seqs); i++ {
		if pub.seqs[i] != pub.seqs[i-1]+1 {
			t.Fatalf("packet %d: sequence number %d after %d", i, pub.seqs[i], pub.seqs[i-1])
		}
	}
	step := uint32(90_000 / 30)
	answer := -1 // the keyframe that answered the request
	for i := asked; i < asked+3 && answer < 0; i++ {
		if pub.frames[i].Keyframe && i%n != 0 {
			answer = i
		}
	}
	if answer < 0 {
		t.Errorf("keyframe request after frame %d: no keyframe among the next three frames", asked-1)
	}
	for i := 0; i < 3*n; i++ {
		f := pub.frames[i]
		if i%n == 0 && !f.Keyframe {
			t.Errorf("frame %d (loop %d starts): not a keyframe", i, i/n)
		}
		if i >= n && i != answer && !bytes.Equal(f.Data, pub.frames[i%n].Data) {
			t.Errorf("frame %d differs from frame %d of the first loop", i, i%n)
		}
		if i == 0 {
			continue
		}
		d := f.RTPTimestamp - pub.frames[i-1].RTPTimestamp
		switch {
		case i%n == 0 && (d < step-1 || d > 1<<31):
			// The loop seam: the loop lasts as long as the frames or the
			// telemetry, whichever ends later (package documentation).
			t.Errorf("frame %d (loop seam): RTP timestamp step %d, want at least %d", i, d, step)
		case i%n != 0 && (d < step-1 || d > step+1):
			t.Errorf("frame %d: RTP timestamp step %d, want %d", i, d, step)
		}
	}
	if st := veh.Stats(); st.FramesSkipped != 0 || st.FramesLate != 0 || st.FramesEncoded < 3*n {
		t.Errorf("stats %+v: want no frame skipped or late, at least %d sent", st, 3*n)
	}
}
