package rtpvp8

import (
	"errors"
	"fmt"
)

// Errors returned by this package. Compare with [errors.Is]; most are wrapped
// in a typed error ([*DescriptorError], [*PacketError], [*FrameHeaderError])
// that carries the details.
var (
	// ErrShortDescriptor means the VP8 payload descriptor claims more
	// octets than the RTP payload has (RFC 7741 section 4.2). The packet
	// is truncated or is not VP8; drop it.
	ErrShortDescriptor = errors.New("rtpvp8: VP8 payload descriptor truncated")

	// ErrNoVP8Data means the RTP payload holds a VP8 payload descriptor but
	// no VP8 data after it. Such a packet carries nothing to decode; drop it.
	ErrNoVP8Data = errors.New("rtpvp8: no VP8 data after the payload descriptor")

	// ErrNilPacket means a nil *rtp.Packet was passed.
	ErrNilPacket = errors.New("rtpvp8: nil RTP packet")

	// ErrRTPVersion means the RTP header version is not 2 (RFC 3550
	// section 5.1). The datagram is not RTP or is corrupt; drop it.
	ErrRTPVersion = errors.New("rtpvp8: RTP version is not 2")

	// ErrPayloadTooLarge means an RTP payload is larger than
	// [AssemblerConfig.MaxPayloadBytes]. Raise the limit if the sender
	// really uses such packets.
	ErrPayloadTooLarge = errors.New("rtpvp8: RTP payload larger than the configured limit")

	// ErrFieldRange means a [Descriptor] field does not fit its bit width
	// (PartitionID > 7, PictureID > 127 for a 7-bit picture ID or > 32767,
	// TID > 3, KeyIdx > 31), so it cannot be written.
	ErrFieldRange = errors.New("rtpvp8: descriptor field out of range")

	// ErrShortBuffer means a destination buffer is too small; size it with
	// the matching MarshalSize method.
	ErrShortBuffer = errors.New("rtpvp8: destination buffer too small")

	// ErrShortFrame means a VP8 frame is shorter than its uncompressed
	// header (3 octets, 10 for a keyframe; RFC 6386 section 9.1).
	ErrShortFrame = errors.New("rtpvp8: VP8 frame shorter than its header")

	// ErrBadStartCode means a VP8 keyframe lacks the start code
	// 0x9d 0x01 0x2a (RFC 6386 section 9.1).
	ErrBadStartCode = errors.New("rtpvp8: VP8 keyframe start code missing")

	// ErrBadPartitionSize means the first partition size in the VP8 frame
	// tag runs past the end of the frame (RFC 6386 section 9.1).
	ErrBadPartitionSize = errors.New("rtpvp8: VP8 first partition size exceeds the frame")

	// ErrZeroSize means a VP8 keyframe declares a zero width or height.
	ErrZeroSize = errors.New("rtpvp8: VP8 keyframe with zero width or height")

	// ErrEmptyFrame means [Packetizer.Packetize] was given no frame data.
	ErrEmptyFrame = errors.New("rtpvp8: empty VP8 frame")

	// ErrFrameTooLarge means a frame would need more packets than
	// [PacketizerConfig.MaxPackets] allows; raise the limit or the MTU.
	ErrFrameTooLarge = errors.New("rtpvp8: frame needs too many packets")

	// ErrInvalidConfig means a configuration field is out of range; the
	// wrapping error names the field.
	ErrInvalidConfig = errors.New("rtpvp8: invalid configuration")
)

// DescriptorError reports where a VP8 payload descriptor could not be read.
// It unwraps to [ErrShortDescriptor] or [ErrNoVP8Data].
type DescriptorError struct {
	// Field names the descriptor field being read: "required octet",
	// "extension octet", "PictureID", "TL0PICIDX", "TID/Y/KEYIDX" or
	// "VP8 data".
	Field string
	// Offset is the octet offset in the RTP payload where Field starts.
	Offset int
	// Len is the length of the RTP payload.
	Len int
	// Err is the cause.
	Err error
}

// Error implements error.
func (e *DescriptorError) Error() string {
	return fmt.Sprintf("%v: %s at offset %d of a %d-octet payload", e.Err, e.Field, e.Offset, e.Len)
}

// Unwrap returns the cause.
func (e *DescriptorError) Unwrap() error { return e.Err }

// FrameHeaderError reports why a VP8 frame header (RFC 6386 section 9.1) is
// invalid. It unwraps to [ErrShortFrame], [ErrBadStartCode],
// [ErrBadPartitionSize] or [ErrZeroSize].
type FrameHeaderError struct {
	// Len is the frame length in octets.
	Len int
	// FirstPartSize is the first partition size from the frame tag, or -1
	// when the tag could not be read.
	FirstPartSize int
	// Err is the cause.
	Err error
}

// Error implements error.
func (e *FrameHeaderError) Error() string {
	return fmt.Sprintf("%v (frame of %d octets, first partition size %d)", e.Err, e.Len, e.FirstPartSize)
}

// Unwrap returns the cause.
func (e *FrameHeaderError) Unwrap() error { return e.Err }

// PacketError is returned by [Assembler.Push] for a packet it rejects as
// invalid. The packet has been counted under Reason in [Stats] and dropped;
// the assembler state is unchanged, so the caller may log and carry on.
type PacketError struct {
	// Seq is the RTP sequence number of the packet (0 for a nil packet).
	Seq uint16
	// Reason is the counter the packet was counted under.
	Reason DropReason
	// Err is the cause, e.g. a [*DescriptorError].
	Err error
}

// Error implements error.
func (e *PacketError) Error() string {
	return fmt.Sprintf("rtpvp8: packet seq %d dropped (%s): %v", e.Seq, e.Reason, e.Err)
}

// Unwrap returns the cause.
func (e *PacketError) Unwrap() error { return e.Err }

func fieldRange(field string, v, max int) error {
	return fmt.Errorf("%w: %s is %d, at most %d fits", ErrFieldRange, field, v, max)
}
