package predictor

import (
	"fmt"

	"stopgap/internal/display"
)

// State says what a displayed frame is: the display package's type, named
// here for the Filler's callers. See display.State for the states.
type State = display.State

// The states, as display defines them.
const (
	StateInvalid   = display.StateInvalid
	StateLive      = display.StateLive
	StatePredicted = display.StatePredicted
	StateStale     = display.StateStale
	StateNoPicture = display.StateNoPicture
	StateNotShown  = display.StateNotShown
)

// Policy decides PREDICTED versus STALE: the display package's type, named
// here for the Filler's callers. See display.Policy.
type Policy = display.Policy

// Defaults for Policy; see display.DefaultCutoffConfidence.
const (
	DefaultCutoffConfidence = display.DefaultCutoffConfidence
	DefaultMaxAgeMs         = display.DefaultMaxAgeMs
)

// DefaultPolicy returns display.DefaultPolicy().
func DefaultPolicy() Policy { return display.DefaultPolicy() }

// Method is how a missing frame is filled. The zero value is MethodInvalid.
type Method int

const (
	// MethodInvalid is the zero value.
	MethodInvalid Method = iota
	// MethodGround warps the road (below the horizon) with the ground-plane
	// homography and the far scene with the rotation homography. The default.
	MethodGround
	// MethodRotation warps the whole frame with the rotation homography only
	// (translation ignored): a baseline.
	MethodRotation
	// MethodHold shows the last real frame unmoved: a baseline. A held frame
	// is never labelled PREDICTED; when the policy would predict, the tick is
	// STALE.
	MethodHold
)

// String returns "ground", "rotation", "hold" or "invalid".
func (m Method) String() string {
	switch m {
	case MethodGround:
		return "ground"
	case MethodRotation:
		return "rotation"
	case MethodHold:
		return "hold"
	default:
		return "invalid"
	}
}

// ParseMethod is the inverse of Method.String for valid methods.
func ParseMethod(s string) (Method, error) {
	for _, m := range []Method{MethodGround, MethodRotation, MethodHold} {
		if m.String() == s {
			return m, nil
		}
	}
	return MethodInvalid, fmt.Errorf("method %q: want ground, rotation or hold: %w", s, ErrInvalidMethod)
}
