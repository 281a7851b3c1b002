package simvehicle

import "errors"

// Errors returned by this package. Compare with errors.Is; they are wrapped
// with context.
var (
	// ErrConfig reports an invalid Config or LinkConfig field; the message
	// names the field and says what to change.
	ErrConfig = errors.New("simvehicle: invalid configuration")

	// ErrRecording reports a recording the vehicle cannot play: no frames,
	// a video-file recording (only image-file frames are supported), or a
	// frame image that does not decode or has the wrong size. The message
	// names the file.
	ErrRecording = errors.New("simvehicle: recording unusable")

	// ErrStopped is returned by Vehicle.Run when the Sink reported that the
	// session ended (for example the relay closed the WHIP session).
	ErrStopped = errors.New("simvehicle: publishing session ended")
)
