package predictor

import (
	"errors"

	"stopgap/internal/camera"
	"stopgap/internal/display"
)

// Sentinel errors. Every error returned by this package wraps one of them, so
// callers can test with errors.Is.
var (
	// ErrInvalidCamera reports a Camera that fails Validate. The wrapping
	// *camera.Error names the JSON key. It is camera.ErrInvalid (Camera is
	// camera's type).
	ErrInvalidCamera = camera.ErrInvalid

	// ErrInvalidMotion reports a filter.Motion with non-finite values, a
	// covariance with a negative or non-finite diagonal, or T1 before T0.
	ErrInvalidMotion = errors.New("predictor: invalid motion")

	// ErrInvalidPolicy reports a Policy whose cutoff is outside [0, 1] or whose
	// age cap is not positive.
	// It is display.ErrInvalidPolicy (Policy is display's type).
	ErrInvalidPolicy = display.ErrInvalidPolicy

	// ErrInvalidConfig reports a bad option (band width, confidence scale,
	// reference distances, missing motion source).
	ErrInvalidConfig = errors.New("predictor: invalid configuration")

	// ErrFrameFormat reports an input frame whose size or type does not match
	// the camera (frames must be gocv.MatTypeCV8UC3, Camera.Width x Camera.Height).
	ErrFrameFormat = errors.New("predictor: frame does not match camera")

	// ErrSingular reports a homography that cannot be inverted or is not finite.
	ErrSingular = errors.New("predictor: singular or non-finite homography")

	// ErrBehindCamera reports a point that is on or behind the camera's image
	// plane (camera z <= 0) and so has no pixel. It is
	// camera.ErrBehindCamera, which the projections of Camera return.
	ErrBehindCamera = camera.ErrBehindCamera

	// ErrNoFrame reports a gap tick before any real frame has been seen. The
	// Filler still writes a labelled "no picture" frame to dst.
	ErrNoFrame = errors.New("predictor: no real frame received yet")

	// ErrTargetBeforeFrame reports a gap tick whose target time is earlier than
	// the capture time of the frame being held; the tick is refused and dst is
	// left untouched.
	ErrTargetBeforeFrame = errors.New("predictor: target time is before the last real frame")

	// ErrClosed reports use of a Synthesizer or Filler after Close.
	ErrClosed = errors.New("predictor: use after Close")

	// ErrInvalidMethod reports a Method outside the defined values.
	ErrInvalidMethod = errors.New("predictor: invalid method")

	// ErrTimeOrder reports a frame given to EgoMotion.Observe that is not
	// newer than the previous one.
	ErrTimeOrder = errors.New("predictor: frame not after the previous one")
)
