package rtpvp8

import (
	"fmt"

	"github.com/pion/rtp"
)

// Defaults for [PacketizerConfig] fields left at zero.
const (
	// DefaultMTU is the default largest RTP packet, header included, in
	// octets (common practice for WebRTC: room for SRTP, TURN and IPv6
	// headers below a 1280-octet path MTU).
	DefaultMTU = 1200
	// DefaultMaxFramePackets is the default largest number of packets per
	// frame.
	DefaultMaxFramePackets = 1024

	rtpHeaderLen = 12 // fixed RTP header without CSRCs or extensions (RFC 3550 section 5.1)
)

// PacketizerConfig sets up a [Packetizer]. The zero value is usable: MTU
// [DefaultMTU], payload type 0, SSRC 0, 15-bit picture IDs from 0.
type PacketizerConfig struct {
	// MTU is the largest RTP packet written, header included, in octets.
	// Zero means [DefaultMTU]. At least 19 (header, longest descriptor,
	// one data octet), at most 65535.
	MTU int
	// PayloadType is the RTP payload type (dynamic, negotiated; e.g. 96).
	PayloadType uint8
	// SSRC is the RTP synchronisation source.
	SSRC uint32
	// FirstSeq is the sequence number of the first packet. RFC 3550
	// section 5.1 asks for a random start; the caller picks it.
	FirstSeq uint16
	// FirstPictureID is the picture ID of the first frame.
	FirstPictureID uint16
	// OmitPictureID leaves the picture ID out of the descriptor.
	OmitPictureID bool
	// ShortPictureID writes 7-bit picture IDs instead of 15-bit ones.
	ShortPictureID bool
	// MaxFramePackets bounds the packets one frame may need. Zero means
	// [DefaultMaxFramePackets].
	MaxFramePackets int
}

// Packetizer splits VP8 frames into RTP packets (RFC 7741 section 4) for
// sending. Each frame gets a running picture ID; its first packet has S=1 and
// PID=0, its last the RTP marker bit; the rest have S=0 and PID=0, which RFC
// 7741 allows (partitions are not split at their borders). Frames are split
// into packets of nearly equal size, so no packet is much smaller than the
// others.
//
// We write our own rather than use pion's codecs.VP8Payloader because we
// want: packets whose payloads live in one buffer reused for every frame (no
// allocation per packet after warm-up), complete RTP headers with sequence
// numbers, a choice of 7- or 15-bit picture IDs, equal packet sizes, and the
// same [Descriptor] code on both sides so that fuzzing covers both.
//
// A Packetizer is not safe for concurrent use.
type Packetizer struct {
	cfg     PacketizerConfig
	seq     uint16
	picture uint16
	buf     []byte
}

// NewPacketizer returns a Packetizer, or an error wrapping
// [ErrInvalidConfig] naming a bad field.
func NewPacketizer(cfg PacketizerConfig) (*Packetizer, error) {
	if cfg.MTU == 0 {
		cfg.MTU = DefaultMTU
	}
	if cfg.MaxFramePackets == 0 {
		cfg.MaxFramePackets = DefaultMaxFramePackets
	}
	switch {
	case cfg.MTU < rtpHeaderLen+6+1 || cfg.MTU > 65535:
		return nil, fmt.Errorf("%w: MTU is %d, want %d..65535", ErrInvalidConfig, cfg.MTU, rtpHeaderLen+7)
	case cfg.MaxFramePackets < 1:
		return nil, fmt.Errorf("%w: MaxFramePackets is %d, want a positive count", ErrInvalidConfig, cfg.MaxFramePackets)
	case cfg.PayloadType > 127:
		return nil, fmt.Errorf("%w: PayloadType is %d, want 0..127", ErrInvalidConfig, cfg.PayloadType)
	}
	p := &Packetizer{cfg: cfg, seq: cfg.FirstSeq}
	p.picture = cfg.FirstPictureID & p.pictureMask()
	return p, nil
}

func (p *Packetizer) pictureMask() uint16 {
	if p.cfg.ShortPictureID {
		return 0x7f
	}
	return 0x7fff
}

// NextSeq returns the sequence number the next packet will have.
func (p *Packetizer) NextSeq() uint16 { return p.seq }

// NextPictureID returns the picture ID the next frame will have.
func (p *Packetizer) NextPictureID() uint16 { return p.picture }

// Packetize appends to dst the RTP packets of one VP8 frame with the given
// RTP timestamp (90 kHz) and returns the extended slice. The payloads of the
// appended packets alias a buffer owned by the Packetizer, overwritten by the
// next call: marshal or copy them first. Packet headers have no CSRCs or
// extensions. On error nothing is appended and no sequence number or picture
// ID is used.
func (p *Packetizer) Packetize(dst []rtp.Packet, frame []byte, rtpTimestamp uint32) ([]rtp.Packet, error) {
	if len(frame) == 0 {
		return dst, ErrEmptyFrame
	}
	d := Descriptor{
		HasPictureID:  !p.cfg.OmitPictureID,
		WidePictureID: !p.cfg.ShortPictureID,
		PictureID:     p.picture,
	}
	dlen := d.MarshalSize()
	room := p.cfg.MTU - rtpHeaderLen - dlen
	n := (len(frame) + room - 1) / room
	if n > p.cfg.MaxFramePackets {
		return dst, fmt.Errorf("%w: %d octets need %d packets of at most %d, limit %d",
			ErrFrameTooLarge, len(frame), n, p.cfg.MTU, p.cfg.MaxFramePackets)
	}
	need := len(frame) + n*dlen
	if cap(p.buf) < need {
		p.buf = make([]byte, need)
	}
	buf := p.buf[:need]
	base, extra := len(frame)/n, len(frame)%n
	off, pos := 0, 0
	for i := 0; i < n; i++ {
		size := base
		if i < extra {
			size++
		}
		d.Start = i == 0
		w, err := d.MarshalTo(buf[pos:])
		if err != nil {
			return dst, err // not reached: fields are in range by construction
		}
		copy(buf[pos+w:], frame[off:off+size])
		dst = append(dst, rtp.Packet{
			Header: rtp.Header{
				Version:        2,
				Marker:         i == n-1,
				PayloadType:    p.cfg.PayloadType,
				SequenceNumber: p.seq,
				Timestamp:      rtpTimestamp,
				SSRC:           p.cfg.SSRC,
			},
			Payload: buf[pos : pos+w+size : pos+w+size],
		})
		p.seq++
		off += size
		pos += w + size
	}
	p.picture = (p.picture + 1) & p.pictureMask()
	return dst, nil
}
