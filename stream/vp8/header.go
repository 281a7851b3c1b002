package vp8

import "fmt"

// FrameType tells a VP8 keyframe from an inter frame. The zero value is
// FrameTypeInvalid.
type FrameType int

const (
	// FrameTypeInvalid is the zero value; no valid frame has it.
	FrameTypeInvalid FrameType = iota
	// FrameTypeKey is a keyframe (intra frame): decodable on its own,
	// resets all reference frames.
	FrameTypeKey
	// FrameTypeInter is an inter frame: needs the reference frames left
	// by earlier frames.
	FrameTypeInter
)

// String returns "key", "inter" or "invalid".
func (t FrameType) String() string {
	switch t {
	case FrameTypeKey:
		return "key"
	case FrameTypeInter:
		return "inter"
	default:
		return "invalid"
	}
}

// Header is the uncompressed data chunk at the start of every VP8 frame
// (RFC 6386 section 9.1).
type Header struct {
	// Type is FrameTypeKey or FrameTypeInter.
	Type FrameType
	// Version is the 3-bit version number (0..3; higher values are
	// reserved and rejected).
	Version int
	// ShowFrame tells whether the frame is meant for display.
	ShowFrame bool
	// FirstPartSize is the size in bytes of the first partition, which
	// follows the 3-byte tag (and, for keyframes, the 7 bytes of start
	// code and size).
	FirstPartSize int
	// Width and Height are the picture size in pixels (keyframes only;
	// 0 for inter frames).
	Width, Height int
	// HorizScale and VertScale are the 2-bit upscaling hints of a
	// keyframe (informative; the decoder does not apply them).
	HorizScale, VertScale int
}

// Sizes from RFC 6386 section 9.1.
const (
	tagLen         = 3  // frame tag
	keyHeaderLen   = 10 // frame tag + start code + width + height
	maxDimension   = 16383
	keyStartCode0  = 0x9d
	keyStartCode1  = 0x01
	keyStartCode2  = 0x2a
	maxVersionSpec = 3
)

// ParseHeader reads the uncompressed header of a VP8 frame (RFC 6386
// section 9.1) without decoding it. It checks the length, the version, the
// keyframe start code 0x9d 0x01 0x2a, a non-zero keyframe size, and that the
// first partition fits in frame. It does not allocate on success.
//
// Frame tag layout (3 bytes, little endian): bit 0 is 0 for a keyframe,
// bits 1-3 the version, bit 4 show_frame, bits 5-23 the first partition
// size. A keyframe then has the start code and two little-endian 16-bit
// fields whose low 14 bits are width and height and top 2 bits the scale.
func ParseHeader(frame []byte) (Header, error) {
	var h Header
	if len(frame) == 0 {
		return h, ErrEmptyFrame
	}
	if len(frame) < tagLen {
		return h, fmt.Errorf("%w: %d bytes, the frame tag alone is %d", ErrShortFrame, len(frame), tagLen)
	}
	tag := uint32(frame[0]) | uint32(frame[1])<<8 | uint32(frame[2])<<16
	key := tag&1 == 0
	h.Version = int(tag>>1) & 7
	h.ShowFrame = tag>>4&1 == 1
	h.FirstPartSize = int(tag >> 5)
	hdr := tagLen
	if key {
		h.Type = FrameTypeKey
		hdr = keyHeaderLen
		if len(frame) < keyHeaderLen {
			return h, fmt.Errorf("%w: keyframe of %d bytes, its header is %d", ErrShortFrame, len(frame), keyHeaderLen)
		}
		if frame[3] != keyStartCode0 || frame[4] != keyStartCode1 || frame[5] != keyStartCode2 {
			return h, fmt.Errorf("%w: keyframe start code is % x, want 9d 01 2a", ErrBadHeader, frame[3:6])
		}
		w := int(frame[6]) | int(frame[7])<<8
		ht := int(frame[8]) | int(frame[9])<<8
		h.Width, h.HorizScale = w&0x3fff, w>>14
		h.Height, h.VertScale = ht&0x3fff, ht>>14
		if h.Width == 0 || h.Height == 0 {
			return h, fmt.Errorf("%w: keyframe size %dx%d", ErrBadHeader, h.Width, h.Height)
		}
	} else {
		h.Type = FrameTypeInter
	}
	if h.Version > maxVersionSpec {
		return h, fmt.Errorf("%w: version %d is reserved (0..3 allowed)", ErrBadHeader, h.Version)
	}
	if h.FirstPartSize == 0 {
		return h, fmt.Errorf("%w: first partition size is 0", ErrBadHeader)
	}
	if h.FirstPartSize > len(frame)-hdr {
		return h, fmt.Errorf("%w: first partition needs %d bytes, only %d follow the %d-byte header",
			ErrTruncated, h.FirstPartSize, len(frame)-hdr, hdr)
	}
	return h, nil
}

// IsKeyframe reports whether frame starts with a valid VP8 keyframe header.
// It is a cheap check for packetisers and relays (no decoding).
func IsKeyframe(frame []byte) bool {
	h, err := ParseHeader(frame)
	return err == nil && h.Type == FrameTypeKey
}
