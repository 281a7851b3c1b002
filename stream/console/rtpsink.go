package console

import (
	"github.com/pion/rtp"

	"stopgap/stream/vp8splice"
)

// ticks90k converts nanoseconds on the egress timeline to 90 kHz RTP clock
// ticks (RFC 7741 section 4.1: VP8 uses a 90 kHz clock): ns * 90000 / 1e9 =
// ns * 9 / 100000, exact in int64 for timelines up to about 32 years.
func ticks90k(ns int64) int64 { return ns * 9 / 100000 }

// rtpWriter is the part of a pion track the sink needs.
type rtpWriter interface {
	WriteRTP(p *rtp.Packet) error
}

// rtpSink sends frames to one viewer as one RTP stream, whichever source
// they come from (vp8splice.Splicer): frames the relay encoded are
// packetised, frames forwarded from the vehicle keep their packets with
// sequence numbers, timestamps, picture IDs and TL0PICIDX rewritten.
//
// RTP timestamps of encoded frames, and of the first forwarded frame after
// them, follow the egress timeline: a frame skipped for this viewer (waiting
// for a keyframe) leaves a timestamp gap of its duration rather than
// shifting later frames; sequence numbers stay continuous because no packet
// was sent. Within a run of forwarded frames the vehicle's own timestamp
// steps are kept.
//
// Retransmissions: every packet goes through the track's interceptors,
// whose NACK responder (pion's default interceptors) keeps the last packets
// sent in a bounded buffer and answers the viewer's NACKs from it, for
// forwarded and encoded packets alike.
type rtpSink struct {
	splicer vp8splice.Splicer
	out     rtpWriter
	started bool
	startNs int64 // timeline start of the last frame sent
	pkts    []rtp.Packet

	// viewer is the viewer's number and trace the console's TraceSent
	// function (nil: no tracing), called after each frame's packets.
	viewer uint64
	trace  *sentTracer
}

// writeFrame sends the frame in b placed at startNs on the timeline. b is
// only read during the call.
func (s *rtpSink) writeFrame(b *sharedBuf, startNs, durNs int64) error {
	var step uint32
	if s.started {
		step = uint32(ticks90k(startNs) - ticks90k(s.startNs))
	}
	var err error
	if b.source() == vp8splice.SourceForwarded {
		s.pkts, err = s.splicer.Forward(s.pkts[:0], vp8splice.ForwardFrame{Parts: b.parts, RTPTimestamp: b.ts, StepTicks: step})
	} else {
		s.pkts, err = s.splicer.Encode(s.pkts[:0], b.data, step)
	}
	if err != nil {
		return err
	}
	s.started, s.startNs = true, startNs
	var firstErr error
	for i := range s.pkts {
		if err := s.out.WriteRTP(&s.pkts[i]); err != nil && firstErr == nil {
			firstErr = err
		}
	}
	if s.trace != nil {
		if fn := s.trace.fn.Load(); fn != nil && len(s.pkts) > 0 {
			s.traceFrame(*fn, b)
		}
	}
	return firstErr
}

// traceFrame reports the frame in b, just written as s.pkts, to fn.
func (s *rtpSink) traceFrame(fn func(SentFrame), b *sharedBuf) {
	f := SentFrame{Viewer: s.viewer, Num: b.num, RTPTimestamp: s.pkts[0].Timestamp, Source: b.source(), Keyframe: b.key, Frame: b.data}
	if f.Source == vp8splice.SourceForwarded {
		f.SourceRTPTimestamp = b.ts
	}
	fn(f)
}
