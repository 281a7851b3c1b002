package camera

import (
	"errors"
	"fmt"
)

// Errors of this package. Test with errors.Is.
var (
	// ErrInvalid reports a Camera that fails [Camera.ValidateIntrinsics] or
	// [Camera.Validate]; the wrapping [*Error] names the JSON key.
	ErrInvalid = errors.New("invalid camera")

	// ErrFile reports a camera.json that is not one JSON object of the
	// known keys with a number for each: malformed JSON, an unknown,
	// repeated or missing key, a value that is not a number, data after the
	// object, or a file too large. The wrapping [*ParseError] has the line
	// and column.
	ErrFile = errors.New("malformed camera file")

	// ErrBehindCamera reports a point that is on or behind the camera's image
	// plane (camera z <= 0) and so has no pixel.
	ErrBehindCamera = errors.New("point is not in front of the camera")
)

// Error is the one error type of both validation levels. It names the
// offending JSON key (the key of camera.json, also for a Camera built in
// code) and wraps [ErrInvalid].
type Error struct {
	Key    string  // JSON key, e.g. "height_m"
	Value  float64 // offending value
	Reason string  // what is wrong and what to do
}

// Error formats the error as "invalid camera: KEY = VALUE: REASON".
func (e *Error) Error() string {
	return fmt.Sprintf("%v: %s = %v: %s", ErrInvalid, e.Key, e.Value, e.Reason)
}

// Unwrap returns [ErrInvalid].
func (e *Error) Unwrap() error { return ErrInvalid }

// A ParseError is a problem in a camera.json file, modelled on
// encoding/csv.ParseError: File is the name the caller gave, Line and Column
// are 1-based (Column counts bytes) and point at the key or value at fault,
// or at the end of the object for missing keys; both are 0 when the problem
// concerns the whole file (an empty or oversized file). Err wraps [ErrFile]
// or is an [*Error] (a value the validation refused).
type ParseError struct {
	File   string
	Line   int
	Column int
	Err    error
}

// Error formats the error as "camera: FILE line L, column C: ERR", omitting
// the parts that are zero or empty.
func (e *ParseError) Error() string {
	where := e.File
	if where == "" {
		where = "camera.json"
	}
	if e.Line == 0 {
		return fmt.Sprintf("camera: %s: %v", where, e.Err)
	}
	return fmt.Sprintf("camera: %s line %d, column %d: %v", where, e.Line, e.Column, e.Err)
}

// Unwrap returns the underlying error.
func (e *ParseError) Unwrap() error { return e.Err }
