package whip

import (
	"time"
)

// ntpUnixOffsetS is the number of seconds from the NTP prime epoch (1900-01-01T00:00:00Z, RFC 5905 section 6)
// to the Unix epoch (1970-01-01T00:00:00Z): 70 years of which 17 are leap years,
// (70*365 + 17) * 86400 = 2 208 988 800 s.
const ntpUnixOffsetS = 2208988800

// VideoClockRateHz is the RTP clock rate of VP8 video (RFC 7741 section 6.1: "The clock rate ... MUST be 90000").
const VideoClockRateHz = 90000

// NTPToUnixUs converts a 64-bit NTP timestamp (RFC 5905 section 6: 32-bit seconds since 1900, 32-bit fraction)
// to microseconds since the Unix epoch, rounding the fraction to the nearest microsecond.
//
// The 32-bit seconds field wraps every 2^32 s (136 years); era 0 ends on 2036-02-07T06:28:16Z. Following
// RFC 4330 section 3, a seconds field whose most significant bit is 0 is taken to be in era 1 (2036-2104)
// and one whose most significant bit is 1 in era 0 (1968-2036). Times before 1968 cannot be represented,
// which is harmless for sender reports.
func NTPToUnixUs(ntp uint64) int64 {
	sec := int64(ntp >> 32)
	if sec&0x80000000 == 0 {
		sec += 1 << 32 // era 1 (RFC 4330 section 3)
	}
	frac := ntp & 0xFFFFFFFF
	// frac / 2^32 seconds in microseconds, rounded half up; fits in 64 bits since frac*1e6 < 2^52.
	us := int64((frac*1_000_000 + 1<<31) >> 32)
	return (sec-ntpUnixOffsetS)*1_000_000 + us
}

// UnixUsToNTP converts microseconds since the Unix epoch to a 64-bit NTP timestamp (RFC 5905 section 6),
// the inverse of [NTPToUnixUs] for times between 1968 and 2104. The fraction is rounded to the nearest
// 1/2^32 s, so NTPToUnixUs(UnixUsToNTP(us)) == us for every us in range.
func UnixUsToNTP(us int64) uint64 {
	sec := us / 1_000_000
	rem := us % 1_000_000
	if rem < 0 {
		sec--
		rem += 1_000_000
	}
	ntpSec := uint64(sec+ntpUnixOffsetS) & 0xFFFFFFFF
	frac := (uint64(rem)<<32 + 500_000) / 1_000_000
	if frac > 0xFFFFFFFF { // rounding up to a whole second cannot happen for rem < 1e6, kept for safety
		frac = 0xFFFFFFFF
	}
	return ntpSec<<32 | frac
}

// SenderReport is the part of an RTCP sender report (RFC 3550 section 6.4.1) that maps the sender's RTP clock
// to its wall clock, plus the receiver-clock time at which it arrived.
type SenderReport struct {
	// SSRC is the synchronisation source the report describes.
	SSRC uint32
	// NTPTime is the sender's wall clock when the report was generated (64-bit NTP format, RFC 5905).
	NTPTime uint64
	// RTPTime is the RTP timestamp corresponding to NTPTime, in the same units as the media's RTP timestamps.
	RTPTime uint32
	// PacketCount and OctetCount are the sender's cumulative RTP packet and payload octet counts.
	PacketCount, OctetCount uint32
	// Arrival is when the report was read on the receiver (receiver clock).
	Arrival time.Time
}

// SenderTimeUs maps an RTP timestamp of the reported stream to the sender's wall clock in microseconds since
// the Unix epoch (RFC 3550 section 6.4.1: the NTP and RTP timestamps of a sender report describe the same
// instant, so a media timestamp maps by the signed RTP distance to RTPTime divided by the clock rate).
//
// The RTP distance is taken modulo 2^32 as a signed 32-bit value, so timestamps on either side of a 32-bit
// wrap map correctly as long as they lie within 2^31 ticks of the report (about 6.6 hours at 90 kHz).
// clockRateHz must be positive (VP8 uses [VideoClockRateHz]); it returns 0 otherwise. The result is rounded
// to the nearest microsecond (halves away from zero).
func (sr SenderReport) SenderTimeUs(rtpTS uint32, clockRateHz uint32) int64 {
	if clockRateHz == 0 {
		return 0
	}
	ticks := int64(int32(rtpTS - sr.RTPTime)) // signed distance modulo 2^32 handles wrap
	num := ticks * 1_000_000
	rate := int64(clockRateHz)
	var delta int64
	if num >= 0 {
		delta = (num + rate/2) / rate
	} else {
		delta = (num - rate/2) / rate
	}
	return NTPToUnixUs(sr.NTPTime) + delta
}

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
