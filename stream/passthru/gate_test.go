package passthru

import (
	"errors"
	"slices"
	"sync"
	"testing"
	"time"
)

// ev is one event on the gate and what it must answer.
type ev struct {
	op      string // "key", "inter", "inter-refs-missing", "key-bad-size", "decode-fail", "decode-ok", "loss", "own", "viewer", "send-fails"
	fwd     bool   // Offer's answer
	force   bool   // BeginOwn's answer
	wantKey bool   // WantKeyframe after the event
}

func TestGate(t *testing.T) {
	tests := []struct {
		name  string
		off   bool
		evs   []ev
		stops map[StopReason]uint64
	}{
		{
			name: "starts on a keyframe only and keeps forwarding",
			evs: []ev{
				{op: "inter", wantKey: true}, {op: "key", fwd: true}, {op: "decode-ok"}, {op: "inter", fwd: true}, {op: "inter", fwd: true},
			},
		},
		{
			name: "a decode failure stops it until the next keyframe; the relay's own frame is then a keyframe",
			evs: []ev{
				{op: "key", fwd: true}, {op: "inter", fwd: true}, {op: "decode-fail", wantKey: true},
				{op: "inter", wantKey: true}, {op: "own", force: true, wantKey: true}, {op: "own", wantKey: true},
				{op: "inter", wantKey: true}, {op: "key", fwd: true}, {op: "inter", fwd: true},
			},
			stops: map[StopReason]uint64{StopDecodeFailed: 1},
		},
		{
			name: "a filled tick ends the run; real frames are transcoded until the next keyframe",
			evs: []ev{
				{op: "key", fwd: true}, {op: "own", force: true, wantKey: true}, {op: "inter", wantKey: true}, {op: "own", wantKey: true},
				{op: "key", fwd: true}, {op: "own", force: true, wantKey: true},
			},
			stops: map[StopReason]uint64{StopOwnFrame: 2},
		},
		{
			name:  "loss and missing references stop it",
			evs:   []ev{{op: "key", fwd: true}, {op: "loss", wantKey: true}, {op: "key", fwd: true}, {op: "inter-refs-missing", wantKey: true}},
			stops: map[StopReason]uint64{StopLoss: 2},
		},
		{
			name:  "a keyframe of the wrong size is not forwarded",
			evs:   []ev{{op: "key", fwd: true}, {op: "key-bad-size", wantKey: true}, {op: "inter", wantKey: true}},
			stops: map[StopReason]uint64{StopBadSize: 1},
		},
		{
			name:  "a refused send ends the run",
			evs:   []ev{{op: "key", fwd: true}, {op: "send-fails", wantKey: true}},
			stops: map[StopReason]uint64{StopLoss: 1},
		},
		{
			name: "a viewer's keyframe wish is passed to the vehicle once while forwarding",
			evs:  []ev{{op: "key", fwd: true}, {op: "viewer", wantKey: true}, {op: "inter", fwd: true}},
		},
		{
			name: "always-transcode never forwards nor asks",
			off:  true,
			evs:  []ev{{op: "key"}, {op: "inter"}, {op: "own"}, {op: "own"}},
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			g := &Gate{Off: tc.off}
			sent := 0
			send := SenderFunc(func() error { sent++; return nil })
			lastFwd := false
			for i, e := range tc.evs {
				var fwd, force bool
				switch e.op {
				case "key":
					fwd = g.Offer(Frame{Keyframe: true, SizeOK: true}, send)
				case "key-bad-size":
					fwd = g.Offer(Frame{Keyframe: true}, send)
				case "inter":
					fwd = g.Offer(Frame{}, send)
				case "inter-refs-missing":
					fwd = g.Offer(Frame{RefsMissing: true}, send)
				case "send-fails":
					fwd = g.Offer(Frame{}, SenderFunc(func() error { return errors.New("queue closed") }))
				case "decode-fail":
					g.Decoded(lastFwd, false)
				case "decode-ok":
					g.Decoded(lastFwd, true)
				case "loss":
					g.Lost()
				case "own":
					force = g.BeginOwn()
					g.EndOwn()
				case "viewer":
					g.ViewerWantsKeyframe()
				default:
					t.Fatalf("unknown op %q", e.op)
				}
				if fwd != e.fwd || force != e.force {
					t.Errorf("event %d (%s): forwarded %v force keyframe %v, want %v %v", i, e.op, fwd, force, e.fwd, e.force)
				}
				if got := g.WantKeyframe(); got != e.wantKey {
					t.Errorf("event %d (%s): WantKeyframe %v, want %v", i, e.op, got, e.wantKey)
				}
				if e.op == "key" || e.op == "inter" {
					lastFwd = fwd
				}
			}
			st := g.Stats()
			for r := StopInvalid + 1; r < stopReasonCount; r++ {
				if st.Stops[r] != tc.stops[r] {
					t.Errorf("stops %v: %d, want %d", r, st.Stops[r], tc.stops[r])
				}
			}
			if int(st.Forwarded) != sent {
				t.Errorf("forwarded %d, sent %d", st.Forwarded, sent)
			}
		})
	}
}

// TestGateOwnFrameBlocksForwarding: while the display loop writes its own
// frame, no inter frame is forwarded, and a keyframe waits until EndOwn (it
// would otherwise arrive at the console between the relay's keyframe
// decision and its frame); it then starts the run, and the display loop's
// next BeginOwn comes after its send.
func TestGateOwnFrameBlocksForwarding(t *testing.T) {
	var g Gate
	var order []string
	var mu sync.Mutex
	note := func(s string) { mu.Lock(); order = append(order, s); mu.Unlock() }
	g.BeginOwn()
	if g.Offer(Frame{}, SenderFunc(func() error { return nil })) {
		t.Error("inter frame forwarded while an own frame is being written")
	}
	done := make(chan bool)
	go func() {
		done <- g.Offer(Frame{Keyframe: true, SizeOK: true}, SenderFunc(func() error { note("key sent"); return nil }))
	}()
	// Wait until the keyframe waits (counted), then end the own frame.
	for deadline := time.Now().Add(5 * time.Second); g.Stats().WaitedKeyframes == 0; time.Sleep(time.Millisecond) {
		if time.Now().After(deadline) {
			t.Fatal("the keyframe never waited")
		}
	}
	select {
	case <-done:
		t.Fatal("keyframe offer returned while an own frame is being written")
	default:
	}
	note("own ended")
	g.EndOwn()
	g.BeginOwn() // must come after the keyframe's send
	note("own begun")
	g.EndOwn()
	select {
	case ok := <-done:
		if !ok {
			t.Error("keyframe not forwarded after EndOwn")
		}
	case <-time.After(5 * time.Second):
		t.Fatal("keyframe offer never returned")
	}
	want := []string{"own ended", "key sent", "own begun"}
	if !slices.Equal(order, want) {
		t.Errorf("order %v, want %v", order, want)
	}
}

// TestGateKeyframeUrgent: the next keyframe request skips the caller's
// retry interval when the display loop ended an open run, and waits again
// once a request went out; a filled tick with no run open, or
// always-transcode, does not hurry anything.
func TestGateKeyframeUrgent(t *testing.T) {
	send := SenderFunc(func() error { return nil })
	key := Frame{Keyframe: true, SizeOK: true}
	tests := []struct {
		name   string
		off    bool
		steps  func(g *Gate)
		urgent bool
	}{
		{"nothing happened", false, func(g *Gate) {}, false},
		{"a filled tick before any run", false, func(g *Gate) { g.BeginOwn(); g.EndOwn() }, false},
		{"a filled tick ends a run", false, func(g *Gate) { g.Offer(key, send); g.BeginOwn(); g.EndOwn() }, true},
		{"an inter frame during an own frame", false, func(g *Gate) { g.BeginOwn(); g.Offer(Frame{}, send); g.EndOwn() }, false},
		{"answered by a request", false, func(g *Gate) { g.Offer(key, send); g.BeginOwn(); g.EndOwn(); g.KeyframeRequested() }, false},
		{"always-transcode", true, func(g *Gate) { g.Offer(key, send); g.BeginOwn(); g.EndOwn() }, false},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			g := &Gate{Off: tc.off}
			tc.steps(g)
			if got := g.KeyframeUrgent(); got != tc.urgent {
				t.Errorf("KeyframeUrgent %v, want %v", got, tc.urgent)
			}
		})
	}
}

func TestStopReasonString(t *testing.T) {
	for r, want := range map[StopReason]string{StopInvalid: "invalid", StopLoss: "loss", StopDecodeFailed: "decode-failed", StopOwnFrame: "own-frame", StopBadSize: "bad-size", 99: "invalid"} {
		if got := r.String(); got != want {
			t.Errorf("%d: %q, want %q", r, got, want)
		}
	}
}

// TestGateSendMayAskForKeyframe: the console asks for a keyframe from
// inside ForwardFrame (a viewer waiting for one); the send runs with the
// Gate locked, so the request must not lock it again.
func TestGateSendMayAskForKeyframe(t *testing.T) {
	var g Gate
	done := make(chan bool)
	go func() {
		done <- g.Offer(Frame{Keyframe: true, SizeOK: true}, SenderFunc(func() error { g.ViewerWantsKeyframe(); return nil }))
	}()
	select {
	case ok := <-done:
		if !ok || !g.WantKeyframe() {
			t.Errorf("forwarded %v; the viewer's keyframe wish was lost", ok)
		}
	case <-time.After(5 * time.Second):
		t.Fatal("Offer deadlocked when its send asked for a keyframe")
	}
}

// TestGateRefusesOlderOwnFrame: an own frame showing an instant before the
// newest forwarded frame's capture is refused, and changes nothing (the
// run stays open, no keyframe forced, no EndOwn due); a later instant, a
// frame without a time (BeginOwn) and any frame after ForgetCaptureTimes
// are not.
func TestGateRefusesOlderOwnFrame(t *testing.T) {
	send := SenderFunc(func() error { return nil })
	var g Gate
	g.Offer(Frame{Keyframe: true, SizeOK: true, CaptureUs: 100, HasCapture: true}, send)
	g.Offer(Frame{CaptureUs: 133, HasCapture: true}, send)
	if force, ok := g.BeginOwnShowing(120); ok || force {
		t.Errorf("own frame at 120 after a forwarded one at 133: ok %v force %v, want refused", ok, force)
	}
	if !g.Forwarding() || g.Stats().RefusedOwn != 1 {
		t.Errorf("after a refusal: forwarding %v, stats %+v; want the run open, one refused", g.Forwarding(), g.Stats())
	}
	if !g.Offer(Frame{CaptureUs: 166, HasCapture: true}, send) {
		t.Error("a refused own frame blocked forwarding")
	}
	if force, ok := g.BeginOwnShowing(200); !ok || !force {
		t.Errorf("own frame at 200: ok %v force %v, want a keyframe", ok, force)
	}
	g.EndOwn()
	g.Offer(Frame{Keyframe: true, SizeOK: true, CaptureUs: 233, HasCapture: true}, send)
	if !g.BeginOwn() {
		t.Error("BeginOwn refused or no keyframe")
	}
	g.EndOwn()
	g.Offer(Frame{Keyframe: true, SizeOK: true, CaptureUs: 300, HasCapture: true}, send)
	g.ForgetCaptureTimes()
	if _, ok := g.BeginOwnShowing(0); !ok {
		t.Error("refused after ForgetCaptureTimes")
	}
	g.EndOwn()
}
