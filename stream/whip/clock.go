package whip

import (
	"time"
)

// DefaultOffsetWindow is the sliding window [OffsetEstimator] uses when its Window is zero. Ten seconds keeps
// the minimum fresh enough to follow slow drift between two free-running clocks while still containing many
// uncongested packets (common practice for minimum-filter delay estimators).
const DefaultOffsetWindow = 10 * time.Second

// maxOffsetSamples bounds the memory of an [OffsetEstimator]; past it, the oldest candidates are discarded early.
const maxOffsetSamples = 4096

// OffsetEstimator estimates the relation between the sender (vehicle) clock and the receiver clock from pairs
// (capture time on the sender clock, arrival time on the receiver clock).
//
// For each packet, arrival - capture = offset + delay, where offset is receiver clock minus sender clock and
// delay is the true one-way delay (network plus sender-side queuing). The two are not separately observable
// from one-way measurements: only their sum is. The estimator therefore reports
//
//   - [OffsetEstimator.BaseUs]: the minimum of (arrival - capture) over a sliding window of arrivals, i.e.
//     offset + the smallest delay seen in the window (the "base" delay of an uncongested path); and
//   - [OffsetEstimator.ExcessUs]: (arrival - capture) - BaseUs for one packet, the delay above that base,
//     which is observable without synchronised clocks (queuing, jitter, retransmission).
//
// If the two clocks are synchronised (same host, or both disciplined by NTP/PTP to well below the delays of
// interest), BaseUs is the base one-way delay itself. Otherwise it is only useful to map a sender time into
// receiver time ("earliest plausible arrival") via [OffsetEstimator.ToReceiverUs].
//
// The zero value is ready to use with [DefaultOffsetWindow]. An OffsetEstimator is not safe for concurrent use.
type OffsetEstimator struct {
	// Window is the length of the sliding window over arrival times; zero means DefaultOffsetWindow.
	Window time.Duration

	// q is a monotonic deque (non-decreasing diffUs from head to tail) of samples within the window;
	// q[head] holds the minimum. Add is amortised O(1).
	q    []offsetSample
	head int
}

type offsetSample struct {
	arrivalUs, diffUs int64
}

// Add records one packet: captureUs on the sender clock and arrivalUs on the receiver clock, both in
// microseconds. Arrivals should be non-decreasing; an arrival earlier than the newest one is still used for
// the minimum but does not expire anything.
func (e *OffsetEstimator) Add(captureUs, arrivalUs int64) {
	diff := arrivalUs - captureUs
	// Drop candidates that can never be the minimum again: they are older and not smaller.
	for len(e.q) > e.head && e.q[len(e.q)-1].diffUs >= diff {
		e.q = e.q[:len(e.q)-1]
	}
	e.q = append(e.q, offsetSample{arrivalUs: arrivalUs, diffUs: diff})
	e.expire(arrivalUs)
	if len(e.q)-e.head > maxOffsetSamples {
		e.head++
	}
	// Compact when the dead prefix dominates, so the backing array stays bounded.
	if e.head > 0 && e.head >= len(e.q)/2 {
		n := copy(e.q, e.q[e.head:])
		e.q = e.q[:n]
		e.head = 0
	}
}

func (e *OffsetEstimator) expire(nowUs int64) {
	w := e.Window
	if w <= 0 {
		w = DefaultOffsetWindow
	}
	limit := nowUs - w.Microseconds()
	// Keep at least the newest sample so the estimate never becomes empty once fed.
	for len(e.q)-e.head > 1 && e.q[e.head].arrivalUs < limit {
		e.head++
	}
}

// BaseUs returns min(arrival - capture) over the window in microseconds: clock offset plus base one-way delay
// (see the type documentation). ok is false before the first Add.
func (e *OffsetEstimator) BaseUs() (baseUs int64, ok bool) {
	if len(e.q) == e.head {
		return 0, false
	}
	return e.q[e.head].diffUs, true
}

// ExcessUs returns how much later than the best packet in the window a packet with the given capture and
// arrival times arrived, in microseconds: (arrival - capture) - BaseUs. It is observable without synchronised
// clocks. It can be negative for a packet not yet added that beats the window minimum. ok is false before
// the first Add.
func (e *OffsetEstimator) ExcessUs(captureUs, arrivalUs int64) (excessUs int64, ok bool) {
	base, ok := e.BaseUs()
	if !ok {
		return 0, false
	}
	return arrivalUs - captureUs - base, true
}

// ToReceiverUs maps a sender-clock time to the receiver clock as captureUs + BaseUs: the earliest time at which
// something captured then could have arrived. ok is false before the first Add.
func (e *OffsetEstimator) ToReceiverUs(captureUs int64) (receiverUs int64, ok bool) {
	base, ok := e.BaseUs()
	if !ok {
		return 0, false
	}
	return captureUs + base, true
}
