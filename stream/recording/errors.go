package recording

import (
	"errors"
	"fmt"
)

// Errors wrapped by [*ParseError] and the [Writer]. Test with errors.Is.
var (
	// ErrEmpty reports a file with no header line.
	ErrEmpty = errors.New("file is empty; expected a header line")
	// ErrHeader reports an unusable header: empty or duplicate column name.
	ErrHeader = errors.New("bad header")
	// ErrMissingColumn reports that a required column is absent from the header.
	ErrMissingColumn = errors.New("missing required column")
	// ErrFieldCount reports a row whose number of fields differs from the header's.
	ErrFieldCount = errors.New("wrong number of fields")
	// ErrQuote reports a '"' character; the dialect has no quoting.
	ErrQuote = errors.New("quote characters are not supported")
	// ErrEmptyLine reports an empty line inside a CSV file.
	ErrEmptyLine = errors.New("empty line")
	// ErrSyntax reports a field that is not a valid number.
	ErrSyntax = errors.New("malformed number")
	// ErrBlank reports an empty field in a column that requires a value.
	ErrBlank = errors.New("required value is blank")
	// ErrNotFinite reports NaN or an infinity.
	ErrNotFinite = errors.New("value is NaN or infinite")
	// ErrNotIncreasing reports a capture or sample time not strictly greater
	// than the previous row's.
	ErrNotIncreasing = errors.New("time does not strictly increase")
	// ErrIndex reports a frame index that is negative, duplicated or not the
	// previous index plus one.
	ErrIndex = errors.New("bad frame index")
	// ErrUnknownIndex reports an arrival or truth row for a frame that is not
	// in frames.csv.
	ErrUnknownIndex = errors.New("index refers to no frame")
	// ErrMismatch reports a truth row whose capture time differs from the frame's.
	ErrMismatch = errors.New("does not match frames.csv")
	// ErrFrameFile reports a frame file that is missing, not a regular file,
	// or a path that is absolute or leaves the recording directory.
	ErrFrameFile = errors.New("bad frame file")
	// ErrVideo reports a frames.csv without a file column and no single
	// video.<ext> file in the directory.
	ErrVideo = errors.New("no frame files and no single video.<ext> file")
	// ErrCamera reports malformed or invalid camera parameters.
	ErrCamera = errors.New("bad camera parameters")
	// ErrMissingFile reports a required file absent from the directory.
	ErrMissingFile = errors.New("required file is missing")
	// ErrNoFrames reports a [Recording.FramePath] call on a video recording
	// or with an index out of range.
	ErrNoFrames = errors.New("no such frame file")
	// ErrNoImage reports a [Recording.FramePath] call on a frame recorded
	// without an image because it never arrived (blank file field).
	ErrNoImage = errors.New("frame has no image")
	// ErrExists reports that [Create] found an existing recording in the directory.
	ErrExists = errors.New("directory already holds a recording; choose a new directory")
	// ErrClosed reports a write to a closed [Writer].
	ErrClosed = errors.New("writer is closed")
	// ErrOrder reports a [Writer] call out of the order the format requires.
	ErrOrder = errors.New("out of order")
	// ErrValue reports an invalid argument to a [Writer] method.
	ErrValue = errors.New("invalid value")
	// ErrPairing reports that a live session and an onboard recording
	// cannot be paired frame by frame ([PairFrames], [*PairError]).
	ErrPairing = errors.New("session and onboard recording cannot be paired")
)

// A ParseError is returned for a problem in a recording file. It is modelled
// on encoding/csv.ParseError: File is the path as opened, Line is 1-based
// (0 if the problem concerns the whole file), Column is the 1-based field
// number in a CSV row or the 1-based byte column in camera.json (0 if
// the problem concerns the whole line). Err wraps one of the Err* values.
type ParseError struct {
	File   string // path of the file
	Line   int    // 1-based line, 0 for the whole file
	Column int    // 1-based column, 0 for the whole line
	Err    error  // underlying error, wraps an Err* value
}

// Error formats the error as "FILE line L, column C: ERR", omitting the
// parts that are zero.
func (e *ParseError) Error() string {
	switch {
	case e.Line == 0:
		return fmt.Sprintf("recording: %s: %v", e.File, e.Err)
	case e.Column == 0:
		return fmt.Sprintf("recording: %s line %d: %v", e.File, e.Line, e.Err)
	default:
		return fmt.Sprintf("recording: %s line %d, column %d: %v", e.File, e.Line, e.Column, e.Err)
	}
}

// Unwrap returns the underlying error.
func (e *ParseError) Unwrap() error { return e.Err }
