package bench

import (
	"errors"
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
	// ErrDestExists means a report destination directory already exists
	// and is not empty, and the caller did not ask to replace it.
	ErrDestExists = errors.New("bench: report destination exists and is not empty")
	// ErrTickRow means a TickRow handed to an Accumulator is not usable
	// (unknown state, negative age, ...). The row is not counted.
	ErrTickRow = errors.New("bench: invalid tick row")
)

// ErrTuneInput means a tuning request (Tune, TuneTicks) cannot be run as
// given: no drives, no or several tolerances, one out of range, or a bad
// cutoff range; the wrapping error says what to change.
var ErrTuneInput = errors.New("bench: tune input unusable")
