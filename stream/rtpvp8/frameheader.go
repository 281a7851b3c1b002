package rtpvp8

// FrameHeader is the uncompressed header at the start of every VP8 frame
// (RFC 6386 section 9.1): a 3-octet frame tag, and for keyframes a start
// code and the picture size.
type FrameHeader struct {
	// Keyframe is true when the inverted key frame bit P of the frame tag
	// is 0: the frame decodes without reference to other frames.
	Keyframe bool
	// Version is the 3-bit version (decoding profile) field.
	Version uint8
	// ShowFrame is the show_frame bit: the decoded frame is meant to be
	// displayed (false for frames that only update references).
	ShowFrame bool
	// FirstPartSize is the size in octets of the first partition, not
	// counting the uncompressed header.
	FirstPartSize int
	// HeaderLen is the length of the uncompressed header: 3, or 10 for a
	// keyframe.
	HeaderLen int
	// Width and Height are the picture size in pixels (keyframes only;
	// 14 bits each).
	Width, Height int
	// HorizScale and VertScale are the 2-bit upscaling codes (keyframes
	// only).
	HorizScale, VertScale uint8
}

// Lengths of the uncompressed VP8 frame header (RFC 6386 section 9.1).
const (
	frameTagLen       = 3
	keyframeHeaderLen = 10
)

// ParseFrameHeader reads the uncompressed header of a complete VP8 frame and
// checks that it is consistent: long enough, keyframe start code present,
// non-zero keyframe size, first partition inside the frame. It returns a
// [*FrameHeaderError] otherwise. It does not decode the compressed data, so a
// nil error does not promise a decodable frame.
func ParseFrameHeader(frame []byte) (FrameHeader, error) {
	var h FrameHeader
	if len(frame) < frameTagLen {
		return h, &FrameHeaderError{Len: len(frame), FirstPartSize: -1, Err: ErrShortFrame}
	}
	tag := uint32(frame[0]) | uint32(frame[1])<<8 | uint32(frame[2])<<16
	h.Keyframe = tag&1 == 0
	h.Version = uint8(tag>>1) & 7
	h.ShowFrame = tag&0x10 != 0
	h.FirstPartSize = int(tag >> 5)
	h.HeaderLen = frameTagLen
	if h.Keyframe {
		h.HeaderLen = keyframeHeaderLen
		if len(frame) < keyframeHeaderLen {
			return h, &FrameHeaderError{Len: len(frame), FirstPartSize: h.FirstPartSize, Err: ErrShortFrame}
		}
		if frame[3] != 0x9d || frame[4] != 0x01 || frame[5] != 0x2a {
			return h, &FrameHeaderError{Len: len(frame), FirstPartSize: h.FirstPartSize, Err: ErrBadStartCode}
		}
		w := uint16(frame[6]) | uint16(frame[7])<<8
		v := uint16(frame[8]) | uint16(frame[9])<<8
		h.Width, h.HorizScale = int(w&0x3fff), uint8(w>>14)
		h.Height, h.VertScale = int(v&0x3fff), uint8(v>>14)
		if h.Width == 0 || h.Height == 0 {
			return h, &FrameHeaderError{Len: len(frame), FirstPartSize: h.FirstPartSize, Err: ErrZeroSize}
		}
	}
	if h.FirstPartSize > len(frame)-h.HeaderLen {
		return h, &FrameHeaderError{Len: len(frame), FirstPartSize: h.FirstPartSize, Err: ErrBadPartitionSize}
	}
	return h, nil
}

// IsKeyframe reports whether the VP8 data of a frame's first packet (the
// payload after the descriptor of a packet with S=1 and PID=0) starts a
// keyframe: the P bit of the frame tag is 0 (RFC 7741 section 4.3, RFC 6386
// section 9.1). Empty data is not a keyframe.
func IsKeyframe(firstPacketData []byte) bool {
	return len(firstPacketData) > 0 && firstPacketData[0]&1 == 0
}
