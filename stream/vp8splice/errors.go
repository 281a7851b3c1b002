package vp8splice

import "errors"

// Errors returned by [Splicer]. On any error nothing is written and the
// Splicer's state is unchanged.
var (
	// ErrNeedKeyframe means an inter frame was offered where the
	// receiver's decoder would decode it against a reference from the
	// other source (or from no frame at all): the first frame written, the
	// first forwarded frame after relay-encoded ones and the first
	// relay-encoded frame after forwarded ones must be keyframes. Send a
	// keyframe (force the encoder's next frame to be one, or wait for the
	// sender's next keyframe and ask for it with a PLI).
	ErrNeedKeyframe = errors.New("vp8splice: a switch of source must start with a keyframe")

	// ErrEmptyFrame means a frame with no packets or no VP8 data.
	ErrEmptyFrame = errors.New("vp8splice: empty frame")

	// ErrBadFrame means the frame's VP8 frame header is inconsistent
	// (see rtpvp8.ParseFrameHeader) or a forwarded frame's packets are not
	// one frame (the first has no S=1, PID=0 descriptor). Do not send it.
	ErrBadFrame = errors.New("vp8splice: not a valid VP8 frame")

	// ErrOutOfOrder means a forwarded frame's picture ID does not come
	// after the previous forwarded frame's (a duplicate or an older frame),
	// or its RTP timestamp is before the previous one's.
	// Forward frames in the order the sender numbered them.
	ErrOutOfOrder = errors.New("vp8splice: forwarded frame is not newer than the previous one")
)
