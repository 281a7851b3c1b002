package whip

import (
	"sync"
	"time"

	"github.com/pion/interceptor"
	"github.com/pion/interceptor/pkg/twcc"
)

// FeedbackInterval is how often the relay sends transport-wide congestion control feedback while media
// flows (the interval pion's generator uses by default; senders expect about this).
const FeedbackInterval = 100 * time.Millisecond

// FeedbackResumeSilence is how long the media must have been silent for its next packet to get its
// congestion control feedback at once rather than at the next FeedbackInterval tick. After an outage
// the sender has had no feedback for the whole silence: its bandwidth estimator and pacer hold back
// (a browser lowers its target bitrate and frame rate, and its congestion window keeps packets queued)
// until feedback reports what arrived. The keyframe the relay asks for then is encoded and paced out
// at that lowered rate; feedback at once lets the sender recover up to one interval sooner.
const FeedbackResumeSilence = FeedbackInterval

// resumeFeedback drives the transport-wide congestion control generator's send times (it is the
// generator's ticker): a tick every FeedbackInterval, and one at once when a media packet arrives after
// FeedbackResumeSilence without one. It is also the interceptor that sees the packets; it must be added
// to the registry after the generator, so the generator has recorded a packet before the tick it
// causes (the generator records each packet before it reads its next tick).
//
// One resumeFeedback serves one PeerConnection. Its zero value is not usable; create it with
// newResumeFeedback.
type resumeFeedback struct {
	interceptor.NoOp
	clock Clock
	ch    chan time.Time // capacity 1: a tick not yet read is not doubled

	mu      sync.Mutex
	timer   Stopper
	every   time.Duration
	stopped bool
	last    time.Time // arrival of the newest media packet
	resumes uint64    // packets that got their feedback at once
}

func newResumeFeedback(c Clock) *resumeFeedback {
	return &resumeFeedback{clock: c, ch: make(chan time.Time, 1)}
}

// ticker is the generator's twcc.TickerFactory.
func (f *resumeFeedback) ticker(d time.Duration) twcc.Ticker {
	f.mu.Lock()
	f.every, f.stopped = d, false
	f.armLocked()
	f.mu.Unlock()
	return f
}

// Ch implements twcc.Ticker.
func (f *resumeFeedback) Ch() <-chan time.Time { return f.ch }

// Stop implements twcc.Ticker.
func (f *resumeFeedback) Stop() {
	f.mu.Lock()
	f.stopped = true
	if f.timer != nil {
		f.timer.Stop()
		f.timer = nil
	}
	f.mu.Unlock()
}

func (f *resumeFeedback) armLocked() {
	if f.stopped || f.every <= 0 {
		return
	}
	if f.timer != nil {
		f.timer.Stop()
	}
	f.timer = f.clock.AfterFunc(f.every, f.onTimer)
}

func (f *resumeFeedback) onTimer() {
	f.mu.Lock()
	defer f.mu.Unlock()
	if f.stopped {
		return
	}
	f.tickLocked()
	f.armLocked()
}

// tickLocked offers the generator a tick; one already waiting is enough.
func (f *resumeFeedback) tickLocked() {
	select {
	case f.ch <- f.clock.Now():
	default:
	}
}

// onPacket notes a media packet's arrival; after a silence it ticks at once and restarts the interval.
func (f *resumeFeedback) onPacket() {
	now := f.clock.Now()
	f.mu.Lock()
	defer f.mu.Unlock()
	silent := !f.last.IsZero() && now.Sub(f.last) >= FeedbackResumeSilence
	f.last = now
	if !silent || f.stopped || f.every <= 0 {
		return
	}
	f.resumes++
	f.tickLocked()
	f.armLocked()
}

// BindRemoteStream implements interceptor.Interceptor: every packet read through it counts.
func (f *resumeFeedback) BindRemoteStream(_ *interceptor.StreamInfo, reader interceptor.RTPReader) interceptor.RTPReader {
	return interceptor.RTPReaderFunc(func(b []byte, a interceptor.Attributes) (int, interceptor.Attributes, error) {
		n, attr, err := reader.Read(b, a)
		if err == nil {
			f.onPacket()
		}
		return n, attr, err
	})
}

// NewInterceptor implements interceptor.Factory; one resumeFeedback serves one PeerConnection.
func (f *resumeFeedback) NewInterceptor(string) (interceptor.Interceptor, error) { return f, nil }

// Close implements interceptor.Interceptor.
func (f *resumeFeedback) Close() error {
	f.Stop()
	return nil
}

// resumed returns how many packets got their feedback at once.
func (f *resumeFeedback) resumed() uint64 {
	f.mu.Lock()
	defer f.mu.Unlock()
	return f.resumes
}
