package ingest

import "time"

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
