package relay

import (
	"sync"
	"testing"

	"stopgap/internal/display"
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
