package rtpudp

import "time"

// rxStats keeps receiver statistics of one RTP stream as RFC 3550 appendix A
// describes them: extended highest sequence number (A.1), cumulative and
// interval loss (A.3) and interarrival jitter (A.8). Not safe for concurrent
// use; the session guards it with its mutex.
type rxStats struct {
	started  bool
	baseSeq  uint32 // first sequence number seen (extended)
	maxSeq   uint16
	cycles   uint32 // wraps << 16
	received uint64
	bytes    uint64 // payload octets (no header, no padding)
	padding  uint64 // packets with an empty payload

	// Interval state for receiver reports (A.3).
	expectedPrior uint32
	receivedPrior uint64

	haveTransit bool
	firstArr    time.Time
	transit     float64 // previous relative transit, 90 kHz units
	jitter      float64 // A.8 estimate, 90 kHz units
}

// clockRateHz is the RTP clock of VP8 (RFC 7741 section 6.1).
const clockRateHz = 90000

// add records one packet.
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
		if seq < s.maxSeq { // moved forward across 65535 -> 0: a wrap, not loss (A.1)
			s.cycles += 1 << 16
		}
		s.maxSeq = seq
	}
	// A.8: D(i-1,i) = (R_i - R_j) - (S_i - S_j); J += (|D| - J)/16, in RTP units.
	if !s.haveTransit {
		s.firstArr = arrival
	}
	arr := float64(arrival.Sub(s.firstArr).Nanoseconds()) * clockRateHz / 1e9
	tr := arr - float64(ts)
	if s.haveTransit {
		d := tr - s.transit
		for d > 1<<31 { // a 32-bit timestamp wrap is not jitter
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

// extendedMax returns the extended highest sequence number (A.1).
func (s *rxStats) extendedMax() uint32 { return s.cycles + uint32(s.maxSeq) }

// expected returns the number of packets expected so far (A.3).
func (s *rxStats) expected() int64 {
	if !s.started {
		return 0
	}
	return int64(s.extendedMax()) - int64(s.baseSeq) + 1
}

// lost returns cumulative loss (A.3); duplicates can make it negative.
func (s *rxStats) lost() int64 { return s.expected() - int64(s.received) }

// fractionLost returns the 8-bit fraction lost since the previous call and
// starts a new interval (A.3).
func (s *rxStats) fractionLost() uint8 {
	exp := uint32(s.expected())
	expInt := int64(exp) - int64(s.expectedPrior)
	recInt := int64(s.received) - int64(s.receivedPrior)
	s.expectedPrior, s.receivedPrior = exp, s.received
	lostInt := expInt - recInt
	if expInt <= 0 || lostInt <= 0 {
		return 0
	}
	return uint8((lostInt << 8) / expInt)
}

// cumulativeLost24 clamps the cumulative loss to the signed 24-bit field of a
// reception report (RFC 3550 section 6.4.1), as a two's complement value.
func (s *rxStats) cumulativeLost24() uint32 {
	l := s.lost()
	if l > 0x7fffff {
		l = 0x7fffff
	}
	if l < -0x800000 {
		l = -0x800000
	}
	return uint32(l) & 0xffffff
}
