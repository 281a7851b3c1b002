package relay

import "errors"

// Errors returned by this package. Most are wrapped with context; compare with
// errors.Is.
var (
	// ErrBadConfig reports an unusable Config field; the wrapping error names
	// the field and what to do.
	ErrBadConfig = errors.New("relay: invalid configuration")
	// ErrClosed is returned by Run and Serve after the relay was shut down.
	ErrClosed = errors.New("relay: closed")
	// ErrFrameSize reports a decoded picture whose size differs from the
	// camera's; the frame is counted as missing. Check camera.json.
	ErrFrameSize = errors.New("relay: decoded picture size differs from the camera size")
	// ErrNoSession: an operator command arrived while no vehicle session
	// is served; it was dropped (a new session starts from telemetry).
	ErrNoSession = errors.New("relay: no vehicle session to command")
)
