// Package rtpstats keeps the receiver statistics of an RTP stream as RFC 3550
// appendix A defines them, for receiver reports and link figures: extended
// highest sequence number (A.1), cumulative and interval loss (A.3) and
// interarrival jitter (A.8). Both ingests of the relay (WHIP and plain
// RTP/UDP) use it.
package rtpstats

import "time"

// Receiver keeps the receiver statistics of one RTP stream. The zero value is
// ready for a 90 kHz stream. Not safe for concurrent use.
type Receiver struct {
	// ClockRateHz is the stream's RTP clock rate; 0 means 90000 (video,
	// RFC 7741 section 6.1).
	ClockRateHz float64

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

// Add records one packet: its sequence number, RTP timestamp, payload length
// (0 for padding only) and arrival time. Older and duplicate packets count as
// received but do not move the highest sequence number.
func (s *Receiver) Add(seq uint16, ts uint32, payloadLen int, arrival time.Time) {
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
	rate := s.ClockRateHz
	if rate <= 0 {
		rate = 90000
	}
	arr := float64(arrival.Sub(s.firstArr).Nanoseconds()) * rate / 1e9
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

// ExtendedMax returns the extended highest sequence number (A.1).
func (s *Receiver) ExtendedMax() uint32 { return s.cycles + uint32(s.maxSeq) }

// Expected returns the number of packets expected so far (A.3).
func (s *Receiver) Expected() int64 {
	if !s.started {
		return 0
	}
	return int64(s.ExtendedMax()) - int64(s.baseSeq) + 1
}

// Lost returns cumulative loss (A.3); duplicates can make it negative.
func (s *Receiver) Lost() int64 { return s.Expected() - int64(s.received) }

// FractionLost returns the 8-bit fraction lost since the previous call and
// starts a new interval (A.3).
func (s *Receiver) FractionLost() uint8 {
	exp := uint32(s.Expected())
	expInt := int64(exp) - int64(s.expectedPrior)
	recInt := int64(s.received) - int64(s.receivedPrior)
	s.expectedPrior, s.receivedPrior = exp, s.received
	lostInt := expInt - recInt
	if expInt <= 0 || lostInt <= 0 {
		return 0
	}
	return uint8((lostInt << 8) / expInt)
}

// CumulativeLost24 clamps the cumulative loss to the signed 24-bit field of a
// reception report (RFC 3550 section 6.4.1), as a two's complement value.
func (s *Receiver) CumulativeLost24() uint32 {
	l := s.Lost()
	if l > 0x7fffff {
		l = 0x7fffff
	}
	if l < -0x800000 {
		l = -0x800000
	}
	return uint32(l) & 0xffffff
}

// Received returns the number of packets recorded, padding included.
func (s *Receiver) Received() uint64 { return s.received }

// Bytes returns the payload octets received (no headers, no padding).
func (s *Receiver) Bytes() uint64 { return s.bytes }

// Padding returns the number of packets with an empty payload.
func (s *Receiver) Padding() uint64 { return s.padding }

// JitterRTP returns the interarrival jitter estimate (A.8) in RTP timestamp
// units.
func (s *Receiver) JitterRTP() float64 { return s.jitter }
