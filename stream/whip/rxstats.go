package whip

import "time"

// rxStats keeps the receiver-side statistics of one RTP stream as RFC 3550 appendix A describes them:
// extended highest sequence number (A.1), cumulative loss (A.3) and interarrival jitter (A.8).
// It is a pure value type fed by the session's read loop; not safe for concurrent use.
type rxStats struct {
	started  bool
	baseSeq  uint32 // first extended sequence number seen
	maxSeq   uint16 // highest sequence number seen
	cycles   uint32 // count of sequence number wraps, shifted left by 16
	received uint64
	bytes    uint64 // RTP payload octets, excluding headers and padding
	padding  uint64 // packets with an empty payload (padding only)

	clockRateHz float64
	haveTransit bool
	firstArr    time.Time // origin for arrival times in RTP units
	transit     float64   // previous relative transit time in RTP units
	jitter      float64   // RFC 3550 A.8 estimate, RTP timestamp units
}

// add records one packet: its sequence number, RTP timestamp, payload length and arrival time.
func (s *rxStats) add(seq uint16, ts uint32, payloadLen int, arrival time.Time) {
	s.received++
	s.bytes += uint64(payloadLen)
	if payloadLen == 0 {
		s.padding++
	}
	if !s.started {
		s.started = true
		s.baseSeq = uint32(seq)
		s.maxSeq = seq
	} else if d := int16(seq - s.maxSeq); d > 0 {
		// In order (possibly with a gap): a smaller value than maxSeq after moving forward is a wrap (A.1).
		if seq < s.maxSeq {
			s.cycles += 1 << 16
		}
		s.maxSeq = seq
	}
	// Older or duplicate packets (d <= 0) count as received but do not move the highest sequence number;
	// duplicates can make the loss count negative, as RFC 3550 section 6.4.1 allows.

	if s.clockRateHz <= 0 {
		return
	}
	// A.8: transit = arrival (in RTP units) - RTP timestamp; D = transit_i - transit_j; J += (|D| - J)/16.
	// Only differences of arrival matter, so arrivals are measured from the first one; float64 holds the
	// tick count exactly for far longer than any session (2^53 ticks at 90 kHz is about 3000 years).
	if !s.haveTransit {
		s.firstArr = arrival
	}
	arr := float64(arrival.Sub(s.firstArr).Nanoseconds()) * s.clockRateHz / 1e9
	tr := arr - float64(ts)
	if s.haveTransit {
		d := tr - s.transit
		// Unwrap the RTP timestamp wrap: a jump of about 2^32 ticks in transit is a wrap, not jitter.
		for d > 1<<31 {
			d -= 1 << 32
		}
		for d < -(1 << 31) {
			d += 1 << 32
		}
		if d < 0 {
			d = -d
		}
		s.jitter += (d - s.jitter) / 16
	}
	s.transit = tr
	s.haveTransit = true
}

// extendedMax returns the extended highest sequence number received (A.1).
func (s *rxStats) extendedMax() uint32 { return s.cycles + uint32(s.maxSeq) }

// lost returns the cumulative number of packets lost (A.3): expected - received, negative with duplicates.
func (s *rxStats) lost() int64 {
	if !s.started {
		return 0
	}
	expected := int64(s.extendedMax()) - int64(s.baseSeq) + 1
	return expected - int64(s.received)
}
