package calib

import (
	"errors"
	"fmt"
)

// Errors returned by this package; the wrapping [*ParseError] names the
// file, line and key. Test with errors.Is.
var (
	// ErrFormat reports a file that is none of the supported layouts, or
	// is malformed YAML or XML.
	ErrFormat = errors.New("not a readable calibration file")
	// ErrMissing reports a required entry that is absent: the image size,
	// the camera matrix or its data.
	ErrMissing = errors.New("required calibration entry is missing")
	// ErrValue reports an entry with a bad value: a matrix of the wrong
	// shape or element type, a number that does not parse or is not
	// finite, a camera matrix with skew, or a distortion model stopgap's
	// camera model does not have.
	ErrValue = errors.New("bad calibration value")
)

// ParseError locates a problem in a calibration file.
type ParseError struct {
	File string // file name as given
	Line int    // 1-based line, 0 if unknown
	Key  string // the entry, e.g. "camera_matrix.data"; "" if none
	Err  error
}

func (e *ParseError) Error() string {
	s := e.File
	if e.Line > 0 {
		s += fmt.Sprintf(":%d", e.Line)
	}
	if e.Key != "" {
		s += ": " + e.Key
	}
	return s + ": " + e.Err.Error()
}

// Unwrap returns the cause.
func (e *ParseError) Unwrap() error { return e.Err }
