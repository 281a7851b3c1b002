package ros2

import (
	"errors"
	"fmt"
)

// Errors returned by this package. Test with errors.Is; the wrapping error
// names the file, record, topic or field at fault.
var (
	// ErrCDR reports a CDR payload that cannot be decoded: an unknown
	// encapsulation, a payload that ends early, a length larger than what
	// is left, a string without its terminating NUL, or trailing bytes.
	ErrCDR = errors.New("bad CDR payload")
	// ErrMCAP reports an MCAP file that cannot be read: bad magic, a
	// truncated or corrupt record, a chunk whose CRC does not match, a
	// message on a channel that was never declared.
	ErrMCAP = errors.New("bad MCAP file")
	// ErrTopic reports a topic selection that does not fit the file: no
	// such topic, a topic of an unsupported type, or no topic at all for
	// frames or telemetry.
	ErrTopic = errors.New("unusable topic")
	// ErrMessage reports a message whose content cannot go into a
	// recording: an image in an unsupported encoding, a camera model we
	// do not have, times that go backwards, sizes that disagree.
	ErrMessage = errors.New("unusable message")
	// ErrMount reports a camera mount that cannot be derived: no transform
	// chain from the base frame to the camera frame, or a rotation our
	// camera model cannot express (yaw).
	ErrMount = errors.New("unusable camera mount")
)

// CDRError says where a CDR payload went wrong. It unwraps to [ErrCDR].
type CDRError struct {
	Field  string // the field being read, e.g. "header.frame_id"
	Offset int    // byte offset in the payload, counting the 4-byte header
	Reason string // what was wrong
}

func (e *CDRError) Error() string {
	return fmt.Sprintf("%v: field %s at byte %d: %s", ErrCDR, e.Field, e.Offset, e.Reason)
}

// Unwrap returns [ErrCDR].
func (e *CDRError) Unwrap() error { return ErrCDR }

// RecordError names the MCAP record at fault. It unwraps to the cause.
type RecordError struct {
	File   string // the MCAP file
	Record string // the record kind: "header", "schema", "channel", "message", "chunk", ...
	Index  int    // 0-based index of the record among all records read so far
	Topic  string // for a message, its topic, if known
	Err    error
}

func (e *RecordError) Error() string {
	where := fmt.Sprintf("%s: record %d (%s)", e.File, e.Index, e.Record)
	if e.Topic != "" {
		where += " on " + e.Topic
	}
	return where + ": " + e.Err.Error()
}

// Unwrap returns the cause.
func (e *RecordError) Unwrap() error { return e.Err }
