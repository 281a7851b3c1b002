package bench

import (
	"errors"
	"fmt"
)

// Sentinel errors of package bench. Functions wrap them with %w and add
// what was wrong and what to do; test with errors.Is.
var (
	// ErrEmptyImage means an image passed to a metric has no pixels.
	ErrEmptyImage = errors.New("bench: empty image")
	// ErrSizeMismatch means two images compared by a metric differ in
	// width or height. Resize or crop one of them first.
	ErrSizeMismatch = errors.New("bench: images differ in size")
	// ErrImageType means an image has a pixel type the metrics do not
	// read. Supported: 8-bit BGR, 8-bit BGRA, 8-bit gray, 32-bit float gray.
	ErrImageType = errors.New("bench: unsupported image type")
	// ErrImageTooSmall means an image is smaller than the 11x11 SSIM
	// window in at least one direction.
	ErrImageTooSmall = errors.New("bench: image smaller than the SSIM window")
	// ErrLossConfig means a LossConfig field is out of range; the
	// wrapping error is a *LossParamError naming the field.
	ErrLossConfig = errors.New("bench: invalid loss settings")
	// ErrCaptureTimes means the frame capture times given to the loss
	// simulator are not strictly increasing.
	ErrCaptureTimes = errors.New("bench: capture times not strictly increasing")
	// ErrDestExists means a report destination directory already exists
	// and is not empty, and the caller did not ask to replace it.
	ErrDestExists = errors.New("bench: report destination exists and is not empty")
	// ErrTickRow means a TickRow handed to an Accumulator is not usable
	// (unknown state, negative age, ...). The row is not counted.
	ErrTickRow = errors.New("bench: invalid tick row")
)

// LossParamError reports one out-of-range LossConfig field. It wraps
// ErrLossConfig.
type LossParamError struct {
	Field  string  // Go field name, e.g. "LossRate"
	Value  float64 // the offending value
	Reason string  // what the valid range is, in words
}

// Error implements error.
func (e *LossParamError) Error() string {
	return fmt.Sprintf("bench: loss setting %s = %v: %s", e.Field, e.Value, e.Reason)
}

// Unwrap returns ErrLossConfig.
func (e *LossParamError) Unwrap() error { return ErrLossConfig }

// ErrTuneInput means a tuning request (Tune, TuneTicks) cannot be run as
// given: no drives, no or several tolerances, one out of range, or a bad
// cutoff range; the wrapping error says what to change.
var ErrTuneInput = errors.New("bench: tune input unusable")
