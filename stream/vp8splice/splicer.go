package vp8splice

import (
	"fmt"

	"github.com/pion/rtp"

	"stopgap/stream/rtpvp8"
)

// Source tells where a written frame came from.
type Source uint8

// Sources. The zero value is invalid.
const (
	// SourceInvalid is the zero value; no frame has it.
	SourceInvalid Source = iota
	// SourceForwarded: a sender's frame, forwarded packet by packet.
	SourceForwarded
	// SourceEncoded: a frame the relay encoded itself.
	SourceEncoded
)

// String returns "forwarded", "encoded" or "invalid".
func (s Source) String() string {
	switch s {
	case SourceForwarded:
		return "forwarded"
	case SourceEncoded:
		return "encoded"
	}
	return "invalid"
}

// pictureIDMask keeps picture IDs to 15 bits: the Splicer always writes the
// long form (RFC 7741 section 4.2, M=1), so a sender's 7-bit picture IDs are
// widened and the receiver sees one numbering.
const pictureIDMask = 0x7fff

// Splicer writes frames from the two sources as one RTP stream. Every output
// packet gets the next sequence number; every frame an RTP timestamp after
// the previous frame's and the next picture ID (15 bits); TL0PICIDX, where
// the sender wrote one, continues from the last frame written.
//
// Forwarded frames keep the sender's timing: within a run of forwarded
// frames (from a keyframe to the frame before the next keyframe or switch)
// the output timestamp is the sender's plus a fixed offset, set at the run's
// keyframe, and the picture ID advances by the sender's own step (a sender
// that skipped a picture ID keeps the gap, which tells the receiver a frame
// is missing). Keyframes and encoded frames are placed by the caller's step.
//
// The zero value is ready to use: sequence numbers and picture IDs start at
// FirstSeq and FirstPictureID.
type Splicer struct {
	// SSRC and PayloadType are written on every packet (a WebRTC track
	// rewrites both per connection anyway).
	SSRC        uint32
	PayloadType uint8
	// FirstSeq is the sequence number of the first packet (RFC 3550
	// section 5.1 asks for a random start; the caller picks it), and
	// FirstPictureID the picture ID of the first frame.
	FirstSeq       uint16
	FirstPictureID uint16
	// MTU is the largest packet an encoded frame is split into, header
	// included (0 means rtpvp8.DefaultMTU). Forwarded packets keep the
	// sender's size plus at most 3 octets (a picture ID added or widened).
	MTU int

	started bool
	last    Source
	seq     uint16 // next sequence number
	ts      uint32 // RTP timestamp of the last frame written
	pid     uint16 // picture ID of the last frame written
	tl0     uint8  // TL0PICIDX of the last frame written (counted when absent)

	// The current run of forwarded frames: sender's timestamp and picture
	// ID of its last frame, and the offsets applied.
	tsOff     uint32
	inTS      uint32
	inPID     uint16
	inHasPID  bool
	inWidePID bool
	tl0Off    uint8

	pkt *rtpvp8.Packetizer
	buf []byte // payloads of the last frame written
}

// Last returns the source of the last frame written (SourceInvalid before
// the first).
func (s *Splicer) Last() Source { return s.last }

// NextSeq returns the sequence number of the next packet.
func (s *Splicer) NextSeq() uint16 {
	if !s.started {
		return s.FirstSeq
	}
	return s.seq
}

// ForwardFrame is one sender's frame to forward.
type ForwardFrame struct {
	// Parts are the frame's packets in order, as the sender wrote them
	// (rtpvp8.Frame.Parts). They are read during the call only.
	Parts []rtpvp8.Part
	// RTPTimestamp is the sender's RTP timestamp of the frame (90 kHz).
	RTPTimestamp uint32
	// StepTicks is the time from the previous frame written to this one,
	// in 90 kHz ticks (at least 1 is used). It places a keyframe, which
	// starts a run of forwarded frames; later frames of the run follow the
	// sender's timestamps.
	StepTicks uint32
}

// Forward appends to dst the packets of one forwarded frame and returns the
// extended slice. The first frame of a run of forwarded frames (the first
// frame written, or the first after encoded frames) must be a keyframe, else
// the error wraps ErrNeedKeyframe. Packet payloads alias a buffer owned by
// the Splicer, valid until its next call: marshal or copy them first. The
// marker bit is set on the last packet only, whatever the sender did.
func (s *Splicer) Forward(dst []rtp.Packet, f ForwardFrame) ([]rtp.Packet, error) {
	if len(f.Parts) == 0 {
		return dst, ErrEmptyFrame
	}
	first := &f.Parts[0]
	if !first.Desc.FrameStart() || len(first.Data) == 0 {
		return dst, fmt.Errorf("%w: the first packet does not start a frame (S=1, PID=0)", ErrBadFrame)
	}
	key := rtpvp8.IsKeyframe(first.Data)
	if s.last != SourceForwarded && !key {
		return dst, fmt.Errorf("%w: forwarded inter frame after %s frames", ErrNeedKeyframe, s.last)
	}
	// A keyframe starts a new run even among forwarded frames: it needs
	// nothing before it, and a sender that restarted (a new session) has
	// new timestamps and picture IDs to re-anchor on.
	newRun := s.last != SourceForwarded || key
	d := first.Desc
	var ts uint32
	var pid uint16
	switch {
	case newRun:
		ts = s.nextTS(f.StepTicks)
		pid = s.nextPID(1)
	default:
		step, err := s.pidStep(d)
		if err != nil {
			return dst, err
		}
		if d := int32(f.RTPTimestamp - s.inTS); d < 0 {
			return dst, fmt.Errorf("%w: RTP timestamp %d after %d", ErrOutOfOrder, f.RTPTimestamp, s.inTS)
		}
		ts = f.RTPTimestamp + s.tsOff
		pid = s.nextPID(step)
	}
	tl0 := s.tl0 + 1 // a new run, or a sender that writes no TL0PICIDX
	if d.HasTL0PicIdx && !newRun {
		tl0 = d.TL0PicIdx + s.tl0Off
	}

	// Payloads: each part's descriptor with the new picture ID and
	// TL0PICIDX, then its data untouched.
	need := 0
	for i := range f.Parts {
		if len(f.Parts[i].Data) == 0 {
			return dst, fmt.Errorf("%w: packet %d has no VP8 data", ErrBadFrame, i)
		}
		need += 6 + len(f.Parts[i].Data)
	}
	if cap(s.buf) < need {
		s.buf = make([]byte, need)
	}
	buf := s.buf[:need]
	pos := 0
	seq := s.NextSeq()
	n0 := len(dst)
	for i := range f.Parts {
		p := &f.Parts[i]
		od := p.Desc
		od.HasPictureID, od.WidePictureID, od.PictureID = true, true, pid
		if od.HasTL0PicIdx {
			od.TL0PicIdx = tl0
		}
		w, err := od.MarshalTo(buf[pos:])
		if err != nil {
			return dst[:n0], fmt.Errorf("%w: packet %d: %w", ErrBadFrame, i, err)
		}
		n := copy(buf[pos+w:], p.Data)
		dst = append(dst, rtp.Packet{
			Header: rtp.Header{
				Version:        2,
				Marker:         i == len(f.Parts)-1,
				PayloadType:    s.PayloadType,
				SequenceNumber: seq,
				Timestamp:      ts,
				SSRC:           s.SSRC,
			},
			Payload: buf[pos : pos+w+n : pos+w+n],
		})
		seq++
		pos += w + n
	}

	// Commit.
	if newRun {
		s.tsOff = ts - f.RTPTimestamp
		if d.HasTL0PicIdx {
			s.tl0Off = tl0 - d.TL0PicIdx
		}
	}
	s.inHasPID, s.inWidePID, s.inPID, s.inTS = d.HasPictureID, d.WidePictureID, d.PictureID, f.RTPTimestamp
	s.commit(SourceForwarded, seq, ts, pid, tl0)
	return dst, nil
}

// Encode appends to dst the packets of one frame the relay encoded, placed
// stepTicks (90 kHz, at least 1 is used) after the previous frame written,
// and returns the extended slice. The first encoded frame after forwarded
// ones (and the first frame written) must be a keyframe, else the error
// wraps ErrNeedKeyframe: force the encoder's next frame to be one. Payloads
// alias a buffer owned by the Splicer, valid until its next call.
func (s *Splicer) Encode(dst []rtp.Packet, frame []byte, stepTicks uint32) ([]rtp.Packet, error) {
	if len(frame) == 0 {
		return dst, ErrEmptyFrame
	}
	h, err := rtpvp8.ParseFrameHeader(frame)
	if err != nil {
		return dst, fmt.Errorf("%w: %w", ErrBadFrame, err)
	}
	if s.last != SourceEncoded && !h.Keyframe {
		return dst, fmt.Errorf("%w: encoded inter frame after %s frames", ErrNeedKeyframe, s.last)
	}
	if s.pkt == nil {
		// Sequence numbers and picture IDs of the packetiser are
		// overwritten below; only its splitting is used.
		if s.pkt, err = rtpvp8.NewPacketizer(rtpvp8.PacketizerConfig{MTU: s.MTU}); err != nil {
			return dst, fmt.Errorf("vp8splice: MTU: %w", err)
		}
	}
	n0 := len(dst)
	dst, err = s.pkt.Packetize(dst, frame, 0)
	if err != nil {
		return dst[:n0], err
	}
	ts, pid, tl0 := s.nextTS(stepTicks), s.nextPID(1), s.tl0+1
	seq := s.NextSeq()
	for i := n0; i < len(dst); i++ {
		p := &dst[i]
		var d rtpvp8.Descriptor
		if _, err := d.Unmarshal(p.Payload); err != nil {
			return dst[:n0], err // not reached: our own packetiser wrote it
		}
		d.PictureID = pid
		if _, err := d.MarshalTo(p.Payload); err != nil {
			return dst[:n0], err // not reached: same size, fields in range
		}
		p.SequenceNumber, p.Timestamp, p.SSRC, p.PayloadType = seq, ts, s.SSRC, s.PayloadType
		seq++
	}
	s.commit(SourceEncoded, seq, ts, pid, tl0)
	return dst, nil
}

func (s *Splicer) commit(src Source, seq uint16, ts uint32, pid uint16, tl0 uint8) {
	s.started, s.last = true, src
	s.seq, s.ts, s.pid, s.tl0 = seq, ts, pid, tl0
}

// nextTS returns the timestamp step ticks after the last frame's.
func (s *Splicer) nextTS(step uint32) uint32 {
	if !s.started {
		return 0
	}
	return s.ts + max(step, 1)
}

// nextPID returns the picture ID step after the last frame's.
func (s *Splicer) nextPID(step uint16) uint16 {
	if !s.started {
		return s.FirstPictureID & pictureIDMask
	}
	return (s.pid + step) & pictureIDMask
}

// pidStep returns how far the sender's picture ID d advanced from the
// previous forwarded frame's: by the picture IDs when both have them in the
// same width (a step beyond half their range is a frame older than the last:
// ErrOutOfOrder), else one frame.
func (s *Splicer) pidStep(d rtpvp8.Descriptor) (uint16, error) {
	if !d.HasPictureID || !s.inHasPID || d.WidePictureID != s.inWidePID {
		return 1, nil
	}
	mask := uint16(0x7f)
	if d.WidePictureID {
		mask = pictureIDMask
	}
	step := (d.PictureID - s.inPID) & mask
	if step == 0 || step > mask/2 {
		return 0, fmt.Errorf("%w: picture ID %d after %d", ErrOutOfOrder, d.PictureID, s.inPID)
	}
	return step, nil
}
