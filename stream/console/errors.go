package console

import (
	"errors"
	"fmt"
)

// Errors returned by this package. Wrapped errors add context with %w; test
// with errors.Is.
var (
	// ErrClosed is returned by methods called after Console.Close.
	ErrClosed = errors.New("console: closed")

	// ErrEmptyFrame is returned by WriteFrame for a zero-length frame.
	ErrEmptyFrame = errors.New("console: empty VP8 frame; pass the encoder's output for one frame")

	// ErrBadForward is returned by ForwardFrame when the first part does
	// not start a VP8 frame (S=1, PID=0) or carries no data: pass the parts
	// of one complete frame as the assembler delivered them.
	ErrBadForward = errors.New("console: forwarded parts do not start a VP8 frame; pass one complete frame's parts")

	// ErrBadDuration is returned by WriteFrame for a frame duration <= 0.
	ErrBadDuration = errors.New("console: frame duration must be > 0 (the display tick period)")

	// ErrBadMeta is returned by WriteMeta and Meta.AppendJSON for a message
	// with an invalid state or a non-finite number.
	ErrBadMeta = errors.New("console: invalid meta message")

	// ErrBadConfig is returned by New for an unusable Config.
	ErrBadConfig = errors.New("console: invalid config")

	// ErrWeakToken is returned by New when Config.Token is shorter than
	// MinTokenLen characters; use NewToken.
	ErrWeakToken = fmt.Errorf("console: bearer token shorter than %d characters; generate one with console.NewToken", MinTokenLen)

	// ErrCutoffOutOfLimits is wrapped by *LimitError.
	ErrCutoffOutOfLimits = errors.New("console: cutoff outside the administrator's limits")

	// ErrUnknownProfile is returned when selecting a profile that does not
	// exist without giving a cutoff to create it.
	ErrUnknownProfile = errors.New("console: unknown profile")

	// ErrBadProfileName is returned for a profile name that is empty, longer
	// than MaxProfileNameLen or uses characters other than letters, digits,
	// space, '-', '_' and '.'.
	ErrBadProfileName = errors.New("console: bad profile name")

	// ErrTooManyProfiles is returned when creating a profile would exceed
	// MaxProfiles.
	ErrTooManyProfiles = errors.New("console: too many profiles")

	// ErrBadRequest is wrapped by errors about a malformed API request body.
	ErrBadRequest = errors.New("console: bad request")

	// ErrTooManyViewers is reported (as 503) when Config.MaxViewers sessions
	// exist already.
	ErrTooManyViewers = errors.New("console: too many viewer sessions")

	// ErrBadOffer is wrapped by errors about an unusable SDP offer.
	ErrBadOffer = errors.New("console: bad SDP offer")
)

// LimitError reports a cutoff outside the administrator's limits.
// It unwraps to ErrCutoffOutOfLimits.
type LimitError struct {
	Cutoff float64 // the value asked for
	Limits Limits  // the limits in force
	Source string  // where the limits are set (Config.LimitsSource), "" if not named
}

// Error says what was asked, what is allowed and what to do.
func (e *LimitError) Error() string {
	src := ""
	if e.Source != "" {
		src = " set in " + e.Source
	}
	return fmt.Sprintf("cutoff %.3g is outside the administrator's limits [%.3g, %.3g]%s; choose a value in that range or ask the administrator to change the limits",
		e.Cutoff, e.Limits.MinCutoff, e.Limits.MaxCutoff, src)
}

// Unwrap returns ErrCutoffOutOfLimits.
func (e *LimitError) Unwrap() error { return ErrCutoffOutOfLimits }

// ProfilesFileError reports a problem with the profiles file named in
// Config.ProfilesPath. Line is 1-based, 0 when unknown.
type ProfilesFileError struct {
	Path string
	Line int
	Err  error
}

// Error names the file and line and the cause.
func (e *ProfilesFileError) Error() string {
	if e.Line > 0 {
		return fmt.Sprintf("console: profiles file %s:%d: %v (fix or delete the file)", e.Path, e.Line, e.Err)
	}
	return fmt.Sprintf("console: profiles file %s: %v (fix or delete the file)", e.Path, e.Err)
}

// Unwrap returns the cause.
func (e *ProfilesFileError) Unwrap() error { return e.Err }
