package console

import (
	"github.com/pion/rtp"
)

// ticks90k converts nanoseconds on the egress timeline to 90 kHz RTP clock
// ticks (RFC 7741 section 4.1: VP8 uses a 90 kHz clock): ns * 90000 / 1e9 =
// ns * 9 / 100000, exact in int64 for timelines up to about 32 years.
func ticks90k(ns int64) int64 { return ns * 9 / 100000 }

// rtpWriter is the part of a pion track the sink needs.
type rtpWriter interface {
	WriteRTP(p *rtp.Packet) error
}

// rtpSink packetises frames for one viewer. RTP timestamps follow the egress
// timeline, so a frame skipped for this viewer (waiting for a keyframe)
// leaves a timestamp gap of its duration rather than shifting later frames;
// sequence numbers stay continuous because no packet was sent.
type rtpSink struct {
	packetizer rtp.Packetizer
	out        rtpWriter
	started    bool
	endNs      int64 // timeline end of the last frame sent
}

// writeFrame sends frame placed at [startNs, startNs+durNs) on the timeline.
// frame is only read during the call.
func (s *rtpSink) writeFrame(frame []byte, startNs, durNs int64) error {
	if s.started && startNs > s.endNs {
		s.packetizer.SkipSamples(uint32(ticks90k(startNs) - ticks90k(s.endNs)))
	}
	s.started = true
	s.endNs = startNs + durNs
	pkts := s.packetizer.Packetize(frame, uint32(ticks90k(startNs+durNs)-ticks90k(startNs)))
	var firstErr error
	for _, p := range pkts {
		if err := s.out.WriteRTP(p); err != nil && firstErr == nil {
			firstErr = err
		}
	}
	return firstErr
}
