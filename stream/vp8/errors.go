package vp8

import (
	"errors"
	"fmt"
)

// Errors returned by this package. Test for them with errors.Is; most are
// wrapped with context. Unless noted otherwise, every error from
// Decoder.Decode also puts the decoder into the waiting-for-keyframe state
// (see Decoder.NeedKeyframe): the caller should request a keyframe (RTCP PLI)
// at once.
var (
	// ErrEmptyFrame means Decode or ParseHeader got zero bytes.
	ErrEmptyFrame = errors.New("vp8: empty frame")

	// ErrShortFrame means the input ends inside the frame header: 3 bytes
	// for an inter frame, 10 for a keyframe (RFC 6386 section 9.1).
	ErrShortFrame = errors.New("vp8: frame shorter than its header")

	// ErrBadHeader means the frame header is invalid: reserved version,
	// wrong keyframe start code, zero width or height.
	ErrBadHeader = errors.New("vp8: invalid frame header")

	// ErrTruncated means the first partition size in the header runs past
	// the end of the input: the frame lost bytes on the way.
	ErrTruncated = errors.New("vp8: frame truncated")

	// ErrFrameTooLarge means the input is longer than
	// DecoderConfig.MaxFrameBytes.
	ErrFrameTooLarge = errors.New("vp8: frame larger than the configured limit")

	// ErrSizeTooLarge means a keyframe declares a picture larger than
	// DecoderConfig.MaxWidth x MaxHeight.
	ErrSizeTooLarge = errors.New("vp8: picture size above the configured limit")

	// ErrSizeChanged means a keyframe declares a size other than the one
	// the decoder locked on its first keyframe (see
	// DecoderConfig.AllowSizeChange). Returned as a *SizeError.
	ErrSizeChanged = errors.New("vp8: picture size changed")

	// ErrNeedKeyframe means an inter frame arrived while the decoder waits
	// for a keyframe (after a loss, an error, or at the start). The frame
	// was not decoded. Returned unwrapped so the per-frame path does not
	// allocate.
	ErrNeedKeyframe = errors.New("vp8: waiting for a keyframe: inter frame dropped; request a keyframe (PLI)")

	// ErrCorrupt means libvpx decoded the frame but flagged the picture as
	// corrupt (VP8D_GET_FRAME_CORRUPTED). Returned inside a *CodecError.
	ErrCorrupt = errors.New("vp8: decoded picture is corrupt")

	// ErrCodec means a libvpx call failed. Returned inside a *CodecError
	// that carries libvpx's status code and detail text.
	ErrCodec = errors.New("vp8: libvpx call failed")

	// ErrNotShown is not a failure: the frame decoded without error but is
	// marked not-for-display (show_frame = 0), so dst is unchanged. The
	// decoder stays in step and does NOT enter the waiting state.
	ErrNotShown = errors.New("vp8: frame decoded but not for display")

	// ErrClosed means the Decoder or Encoder was used after Close. It does
	// not change the decoder state.
	ErrClosed = errors.New("vp8: codec is closed")

	// ErrNilImage means a nil *Image was passed where one is required.
	ErrNilImage = errors.New("vp8: nil image")

	// ErrImageSize means an input or output buffer does not match the
	// picture size (plane too short, stride too small, BGR buffer shorter
	// than width*height*3, or an encoder input of the wrong size).
	ErrImageSize = errors.New("vp8: image size mismatch")

	// ErrConfig means an EncoderConfig or DecoderConfig field is out of range.
	ErrConfig = errors.New("vp8: invalid configuration")

	// ErrTimestamp means Encoder.Encode got a timestamp not after the
	// previous one.
	ErrTimestamp = errors.New("vp8: timestamp not increasing")
)

// CodecError reports a failure inside libvpx, or a picture libvpx flagged as
// corrupt. errors.Is(err, ErrCodec) or errors.Is(err, ErrCorrupt) tells which.
type CodecError struct {
	// Op is the operation that failed: "decode", "encode", "init",
	// "set bitrate".
	Op string
	// Code is the vpx_codec_err_t libvpx returned (0 = VPX_CODEC_OK when
	// the call succeeded but the picture was flagged corrupt).
	Code int
	// Message is libvpx's text for Code (vpx_codec_error).
	Message string
	// Detail is libvpx's detail text (vpx_codec_error_detail), often
	// empty.
	Detail string
	// Keyframe tells whether the failing input was a keyframe.
	Keyframe bool
	// Err is ErrCodec or ErrCorrupt.
	Err error
}

// Error implements error.
func (e *CodecError) Error() string {
	kind := "inter frame"
	if e.Keyframe {
		kind = "keyframe"
	}
	msg := fmt.Sprintf("vp8: %s %s: ", e.Op, kind)
	if errors.Is(e.Err, ErrCorrupt) {
		msg += "picture flagged corrupt by libvpx (VP8D_GET_FRAME_CORRUPTED)"
	} else {
		msg += fmt.Sprintf("libvpx error %d (%s)", e.Code, e.Message)
	}
	if e.Detail != "" {
		msg += ": " + e.Detail
	}
	if e.Op == "decode" {
		msg += "; dropping inter frames until a keyframe decodes: request one (PLI)"
	}
	return msg
}

// Unwrap returns ErrCodec or ErrCorrupt.
func (e *CodecError) Unwrap() error { return e.Err }

// SizeError reports a keyframe whose size the decoder will not accept.
// errors.Is(err, ErrSizeChanged) or errors.Is(err, ErrSizeTooLarge) tells why.
type SizeError struct {
	// Width and Height are the size declared by the rejected keyframe,
	// in pixels.
	Width, Height int
	// WantWidth and WantHeight are the locked size (ErrSizeChanged) or the
	// limits (ErrSizeTooLarge), in pixels.
	WantWidth, WantHeight int
	// Err is ErrSizeChanged or ErrSizeTooLarge.
	Err error
}

// Error implements error.
func (e *SizeError) Error() string {
	if errors.Is(e.Err, ErrSizeChanged) {
		return fmt.Sprintf("vp8: keyframe is %dx%d but the stream started at %dx%d: "+
			"create a new Decoder for the new size or set DecoderConfig.AllowSizeChange",
			e.Width, e.Height, e.WantWidth, e.WantHeight)
	}
	return fmt.Sprintf("vp8: keyframe is %dx%d, above the limit %dx%d: "+
		"raise DecoderConfig.MaxWidth/MaxHeight if the sender is trusted",
		e.Width, e.Height, e.WantWidth, e.WantHeight)
}

// Unwrap returns ErrSizeChanged or ErrSizeTooLarge.
func (e *SizeError) Unwrap() error { return e.Err }
