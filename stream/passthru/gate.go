package passthru

import (
	"sync"
	"sync/atomic"
)

// Gate is the pass-through decision of one relay, shared by the ingest
// goroutine (Offer, Decoded, Lost) and the display loop (BeginOwn,
// EndOwn). All methods are safe for concurrent use. The zero value passes
// frames through.
type Gate struct {
	// Off makes every frame go through the relay's encoder
	// (always-transcode). Set it before first use.
	Off bool

	mu      sync.Mutex
	cond    sync.Cond // on mu: own or keyWaiting changed (L set on first use)
	run     bool      // a run of forwarded frames is open
	own     bool      // the display loop is encoding and writing its own frame
	lastFwd bool      // the last frame sent to the console was forwarded
	// keyWaiting: a vehicle keyframe waits in Offer for the display
	// loop's own frame to be written; the next BeginOwn waits for it.
	keyWaiting bool
	// newestFwdUs is the capture time of the newest frame forwarded
	// (valid while haveFwdUs): an own frame showing an earlier instant is
	// refused (BeginOwnShowing).
	newestFwdUs int64
	haveFwdUs   bool
	wantKey     atomic.Bool // a viewer needs a keyframe: ask the vehicle (no lock: see ViewerWantsKeyframe)
	// urgent: the next keyframe request should not wait for the caller's
	// retry interval (see KeyframeUrgent).
	urgent   atomic.Bool
	forwards atomic.Uint64
	waited   atomic.Uint64
	refused  atomic.Uint64
	stops    [stopReasonCount]atomic.Uint64
}

// StopReason says why a run of forwarded frames ended.
type StopReason uint8

// Stop reasons. The zero value is invalid.
const (
	StopInvalid      StopReason = iota
	StopLoss                    // a frame was lost or came with references missing
	StopDecodeFailed            // the relay could not decode a forwarded frame
	StopOwnFrame                // the display loop sent a frame of its own (PREDICTED, STALE or a late frame)
	StopBadSize                 // a keyframe's picture size is not the camera's

	stopReasonCount
)

var stopReasonNames = [...]string{"invalid", "loss", "decode-failed", "own-frame", "bad-size"}

// String returns a short lower-case name such as "decode-failed".
func (r StopReason) String() string {
	if int(r) >= len(stopReasonNames) {
		return "invalid"
	}
	return stopReasonNames[r]
}

// Frame describes one complete vehicle frame whose header checked out.
type Frame struct {
	Keyframe    bool
	RefsMissing bool // frames were lost since the last keyframe
	SizeOK      bool // a keyframe's picture size is the camera's (ignored for inter frames)
	// CaptureUs is the frame's capture time on the display loop's
	// timeline, if known (HasCapture); see BeginOwnShowing.
	CaptureUs  int64
	HasCapture bool
}

// Sender sends a frame the Gate lets through (the console's ForwardFrame).
// Send must not block and may call only ViewerWantsKeyframe of the Gate.
type Sender interface {
	Send() error
}

// SenderFunc adapts a function to a Sender.
type SenderFunc func() error

// Send calls f.
func (f SenderFunc) Send() error { return f() }

// Offer decides whether frame f, complete and header-checked, is forwarded;
// if so it calls send.Send with the Gate locked, so that the display loop
// cannot start a frame of its own meanwhile, and reports true. A send error
// ends the run and reports false.
//
// A keyframe offered while the display loop writes a frame of its own
// waits until that frame is written (EndOwn: one encode, about 11 ms at
// 1280x720), and the display loop's next BeginOwn waits for the keyframe's
// send. Dropping it instead (as before) left the relay transcoding every
// real frame until the vehicle's next keyframe, and a relay that was
// behind encoded most of the time, so it missed keyframe after keyframe
// (28 to 36 of about 40 per stream in 6 s with four streams on two cores)
// and never got back to pass-through.
func (g *Gate) Offer(f Frame, send Sender) bool {
	if g.Off {
		return false
	}
	g.mu.Lock()
	defer g.mu.Unlock()
	if g.own && f.Keyframe && f.SizeOK && !f.RefsMissing {
		g.initLocked()
		g.waited.Add(1)
		g.keyWaiting = true
		for g.own {
			g.cond.Wait()
		}
		g.keyWaiting = false
		g.cond.Broadcast()
	}
	switch {
	case f.RefsMissing:
		g.stopLocked(StopLoss)
		return false
	case f.Keyframe && !f.SizeOK:
		g.stopLocked(StopBadSize)
		return false
	case g.own:
		// The display loop is writing its own frame: an inter frame
		// waits for the next keyframe (a keyframe waited above).
		return false
	case !g.run && !f.Keyframe:
		return false // transcoding until the vehicle's next keyframe
	}
	if err := send.Send(); err != nil {
		g.stopLocked(StopLoss)
		return false
	}
	g.run, g.lastFwd = true, true
	g.forwards.Add(1)
	if f.HasCapture && (!g.haveFwdUs || f.CaptureUs > g.newestFwdUs) {
		g.newestFwdUs, g.haveFwdUs = f.CaptureUs, true
	}
	return true
}

// ForgetCaptureTimes forgets the capture time of the newest frame
// forwarded: the display loop's timeline changed (a new session, or capture
// times moved onto the vehicle clock), so it cannot be compared any more.
func (g *Gate) ForgetCaptureTimes() {
	g.mu.Lock()
	g.haveFwdUs = false
	g.mu.Unlock()
}

// Decoded reports the relay's decode of the last frame offered: a failure of
// a forwarded frame ends the run (StopDecodeFailed); the console's next
// picture is the relay's keyframe.
func (g *Gate) Decoded(forwarded, ok bool) {
	if ok || !forwarded {
		return
	}
	g.mu.Lock()
	g.stopLocked(StopDecodeFailed)
	g.mu.Unlock()
}

// Lost ends the run: the assembler gave a frame up.
func (g *Gate) Lost() {
	g.mu.Lock()
	g.stopLocked(StopLoss)
	g.mu.Unlock()
}

// BeginOwn is BeginOwnShowing for a frame whose instant is not compared
// with the forwarded frames': it is never refused.
func (g *Gate) BeginOwn() (forceKey bool) {
	forceKey, _ = g.beginOwn(0, false)
	return forceKey
}

// BeginOwnShowing is called by the display loop before it encodes a frame
// of its own that shows the instant showsUs (a filled tick's target, or a
// transcoded real frame's capture time, on the timeline of Frame.CaptureUs).
// It refuses (ok false, nothing changed, no EndOwn due) when a frame
// captured after showsUs was forwarded already: the console shows that
// newer real picture, and an older picture sent after it would stand on
// screen under the meta of the next LIVE tick. Otherwise it ends the run
// (StopOwnFrame) and keeps forwarding off until EndOwn, and reports whether
// the encoder must make this frame a keyframe: the console's last frame was
// forwarded, so its decoder holds the vehicle's references, not the relay
// encoder's.
//
// A vehicle keyframe waiting in Offer goes first (a send, microseconds).
func (g *Gate) BeginOwnShowing(showsUs int64) (forceKey, ok bool) {
	return g.beginOwn(showsUs, true)
}

func (g *Gate) beginOwn(showsUs int64, compare bool) (forceKey, ok bool) {
	g.mu.Lock()
	defer g.mu.Unlock()
	g.initLocked()
	for g.keyWaiting {
		g.cond.Wait()
	}
	if compare && g.haveFwdUs && g.newestFwdUs > showsUs {
		g.refused.Add(1)
		return false, false
	}
	if g.run {
		// The vehicle's keyframe that opened this run may have come
		// from a request made just before: the next one need not wait
		// for the retry interval.
		g.urgent.Store(true)
	}
	g.stopLocked(StopOwnFrame)
	g.own = true
	forceKey = g.lastFwd
	g.lastFwd = false
	return forceKey, true
}

// EndOwn is called after the own frame was written (or given up).
func (g *Gate) EndOwn() {
	g.mu.Lock()
	g.own = false
	g.initLocked()
	g.cond.Broadcast()
	g.mu.Unlock()
}

// initLocked makes the zero Gate's condition variable usable (g.mu held).
func (g *Gate) initLocked() {
	if g.cond.L == nil {
		g.cond.L = &g.mu
	}
}

// ViewerWantsKeyframe records that a console viewer needs a keyframe (it
// joined, or asked with PLI): while frames pass through, only the vehicle
// can send one. It takes no lock: the console calls it from within the
// send of Offer (ForwardFrame asks for keyframes before it returns).
func (g *Gate) ViewerWantsKeyframe() { g.wantKey.Store(true) }

// WantKeyframe reports whether the relay should ask the vehicle for a
// keyframe now: pass-through is waiting for one to start, or a viewer needs
// one while frames pass through. The viewer's wish is cleared by the call;
// the caller repeats requests at its own interval.
func (g *Gate) WantKeyframe() bool {
	if g.Off {
		return false
	}
	g.mu.Lock()
	defer g.mu.Unlock()
	viewer := g.wantKey.Swap(false)
	return !g.run || (viewer && g.lastFwd)
}

// KeyframeUrgent reports whether the next keyframe request, while
// WantKeyframe holds, should go out without waiting for the caller's retry
// interval (the sender's own rate limit still applies): the display loop
// ended an open run. The vehicle's keyframe that opened the run may have
// answered the last request, so the retry interval, meant for requests
// that got no answer, would only keep the relay transcoding longer (and
// each transcoded 1280x720 frame costs a VP8 encode). It stays set until
// KeyframeRequested.
func (g *Gate) KeyframeUrgent() bool { return !g.Off && g.urgent.Load() }

// KeyframeRequested records that a keyframe request went out: the next one
// waits for the retry interval again.
func (g *Gate) KeyframeRequested() { g.urgent.Store(false) }

// Forwarding reports whether a run of forwarded frames is open.
func (g *Gate) Forwarding() bool {
	g.mu.Lock()
	defer g.mu.Unlock()
	return g.run
}

// Stats are the Gate's counters.
type Stats struct {
	Forwarded uint64                  // frames forwarded
	Stops     [stopReasonCount]uint64 // runs ended, by StopReason
	// WaitedKeyframes counts vehicle keyframes that waited in Offer for
	// the display loop to finish writing a frame of its own.
	WaitedKeyframes uint64
	// RefusedOwn counts own frames BeginOwnShowing refused: a newer real
	// frame had been forwarded.
	RefusedOwn uint64
}

// Stats returns the counters.
func (g *Gate) Stats() Stats {
	var s Stats
	s.Forwarded = g.forwards.Load()
	s.WaitedKeyframes = g.waited.Load()
	s.RefusedOwn = g.refused.Load()
	for i := range s.Stops {
		s.Stops[i] = g.stops[i].Load()
	}
	return s
}

// stopLocked ends an open run for reason r.
func (g *Gate) stopLocked(r StopReason) {
	if g.run {
		g.stops[r].Add(1)
	}
	g.run = false
}
