package display

import "fmt"

// State says what was on screen for one display tick. The zero value is
// StateInvalid. String gives the one spelling every table, metric label and
// console message uses.
type State int

const (
	// StateInvalid is the zero value; never the state of a decided tick.
	StateInvalid State = iota
	// StateLive: a real frame that arrived when it was due. Never labelled.
	StateLive
	// StatePredicted: the last real frame warped to where the camera should
	// be now. Always labelled in the pixels.
	StatePredicted
	// StateStale: the last real frame held, desaturated, dimmed and labelled
	// with a warning, because prediction was not trusted or the gap was too
	// long.
	StateStale
	// StateNoPicture: a tick before any real frame of the session (or of
	// its timeline, after the relay moved onto the vehicle clock): a
	// labelled frame with no picture in it. It has no age.
	StateNoPicture
	// StateNotShown: a tick the relay decided but could not put on screen
	// (a newer frame was already shown, or the output frame could not be
	// made or encoded). The operator saw the previous output a while
	// longer; the recording keeps the row so rows stay one per tick.
	StateNotShown
)

// States lists the valid states in their documented order.
var States = [...]State{StateLive, StatePredicted, StateStale, StateNoPicture, StateNotShown}

// String returns "LIVE", "PREDICTED", "STALE", "NO_PICTURE", "NOT_SHOWN" or
// "INVALID".
func (s State) String() string {
	switch s {
	case StateLive:
		return "LIVE"
	case StatePredicted:
		return "PREDICTED"
	case StateStale:
		return "STALE"
	case StateNoPicture:
		return "NO_PICTURE"
	case StateNotShown:
		return "NOT_SHOWN"
	default:
		return "INVALID"
	}
}

// Synthetic reports whether a tick in state s showed a picture made by
// stopgap rather than a real frame as it arrived (everything but LIVE).
func (s State) Synthetic() bool { return s != StateLive }

// Valid reports whether s is one of States.
func (s State) Valid() bool { return s >= StateLive && s <= StateNotShown }

// MarshalText returns s.String(), the wire form in JSON and text formats; it
// fails for an invalid state, wrapping ErrInvalidState.
func (s State) MarshalText() ([]byte, error) {
	if !s.Valid() {
		return nil, fmt.Errorf("state %d: only LIVE, PREDICTED, STALE, NO_PICTURE and NOT_SHOWN are written: %w", int(s), ErrInvalidState)
	}
	return []byte(s.String()), nil
}

// UnmarshalText parses the wire form with ParseState; on error *s is left
// unchanged.
func (s *State) UnmarshalText(b []byte) error {
	v, err := ParseState(string(b))
	if err != nil {
		return err
	}
	*s = v
	return nil
}

// ParseState is the inverse of State.String for valid states.
func ParseState(s string) (State, error) {
	for _, st := range States {
		if st.String() == s {
			return st, nil
		}
	}
	return StateInvalid, fmt.Errorf("state %q: want one of LIVE, PREDICTED, STALE, NO_PICTURE, NOT_SHOWN: %w", s, ErrInvalidState)
}
