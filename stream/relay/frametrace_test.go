package relay

import (
	"crypto/sha256"
	"sync"
	"testing"

	"stopgap/internal/display"
	"stopgap/stream/vp8"
)

// TestTraceFrames runs a session with frames 10-12 lost: the tracer sees
// every output frame once, in order (Seq 1, 2, ...), with the state the
// relay counted; LIVE frames carry their input's last-packet time and decode
// time, filled ticks none; every frame has its encode time and write time.
func TestTraceFrames(t *testing.T) {
	clock := &fakeClock{}
	r := testRelay(t, clock, "")
	var mu sync.Mutex
	var got []FrameTrace
	r.TraceFrames(func(tr FrameTrace) {
		mu.Lock()
		got = append(got, tr)
		mu.Unlock()
	})
	v := newFakeVehicle(t, clock, 30, func(i int) bool { return i >= 10 && i <= 12 })
	runSession(t, r, v)
	mu.Lock()
	defer mu.Unlock()
	st := r.Stats()
	var live, filled uint64
	for i, tr := range got {
		if tr.Seq != uint64(i+1) {
			t.Fatalf("trace %d has Seq %d, want %d", i, tr.Seq, i+1)
		}
		if tr.WrittenAt.IsZero() || tr.Encode < 0 {
			t.Errorf("trace %d: written at %v, encode %v", i, tr.WrittenAt, tr.Encode)
		}
		switch tr.State {
		case display.StateLive:
			live++
			if tr.LastPacketAt.IsZero() || tr.Decode < 0 {
				t.Errorf("LIVE trace %d: last packet at %v, decode %v", i, tr.LastPacketAt, tr.Decode)
			}
		default:
			filled++
			if !tr.LastPacketAt.IsZero() || tr.Decode != 0 {
				t.Errorf("%v trace %d carries input timing %v, %v", tr.State, i, tr.LastPacketAt, tr.Decode)
			}
		}
	}
	if live != st.TicksLive || filled != st.TicksPredicted+st.TicksStale || filled == 0 {
		t.Errorf("traced %d LIVE and %d filled frames, relay counted %+v", live, filled, st)
	}
	r.TraceFrames(nil)
	if r.tracer.fn.Load() != nil {
		t.Error("TraceFrames(nil) left a tracer installed")
	}
}

// TestTraceDecoded runs a session with frames 10-12 lost: the tracer sees
// each frame the relay decoded once, by its RTP timestamp, with the picture
// a separate decoder makes of the same frames (tolerance zero: same
// bitstream, same libvpx), and whether it was passed through as the console
// counted.
func TestTraceDecoded(t *testing.T) {
	clock := &fakeClock{}
	r := testRelay(t, clock, "")
	var mu sync.Mutex
	got := map[uint32][sha256.Size]byte{}
	forwarded := 0
	r.TraceDecoded(func(f DecodedFrame) {
		mu.Lock()
		defer mu.Unlock()
		if _, dup := got[f.RTPTimestamp]; dup {
			t.Errorf("frame %d traced twice", f.RTPTimestamp)
		}
		got[f.RTPTimestamp] = lumaHash(f.Image)
		if f.Forwarded {
			forwarded++
		}
	})
	lost := func(i int) bool { return i >= 10 && i <= 12 }
	v := newFakeVehicle(t, clock, 30, lost)
	v.mutate = func(_ int, frame []byte) []byte { return append([]byte(nil), frame...) }
	runSession(t, r, v)
	r.TraceDecoded(nil)

	dec, err := vp8.NewDecoder()
	if err != nil {
		t.Fatal(err)
	}
	defer dec.Close()
	var img vp8.Image
	want := map[uint32][sha256.Size]byte{}
	for i, frame := range v.sent {
		if lost(i) {
			dec.Lost()
			continue
		}
		if err := dec.Decode(frame, &img); err == nil {
			want[rtpTS(i)] = lumaHash(&img)
		}
	}
	mu.Lock()
	defer mu.Unlock()
	if len(got) != len(want) || len(want) < 20 {
		t.Errorf("%d frames traced, a separate decoder decoded %d", len(got), len(want))
	}
	for ts, h := range want {
		if g, ok := got[ts]; !ok {
			t.Errorf("frame %d not traced", ts)
		} else if g != h {
			t.Errorf("frame %d: traced picture differs from a separate decode", ts)
		}
	}
	if fwd := r.Console().Stats().FramesForwarded; uint64(forwarded) != fwd || fwd == 0 {
		t.Errorf("%d traced frames forwarded, the console counted %d", forwarded, fwd)
	}
	if r.decoded.fn.Load() != nil {
		t.Error("TraceDecoded(nil) left a tracer installed")
	}
}

// lumaHash is the SHA-256 of m's luma plane, row by row.
func lumaHash(m *vp8.Image) [sha256.Size]byte {
	h := sha256.New()
	for y := 0; y < m.Height; y++ {
		h.Write(m.Y[y*m.YStride : y*m.YStride+m.Width])
	}
	var s [sha256.Size]byte
	copy(s[:], h.Sum(nil))
	return s
}
