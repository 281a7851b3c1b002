package console

import "fmt"

// State is the state of one output frame as the relay decided it.
// The zero value is StateInvalid and is never sent.
type State int

// Frame states. Their String forms are the wire values of Meta.State.
const (
	StateInvalid   State = iota // not a valid state
	StateLive                   // a real frame from the vehicle
	StatePredicted              // synthetic: last real frame warped to now; labelled
	StateStale                  // too uncertain to predict: old frame, desaturated
)

var stateNames = [...]string{"INVALID", "LIVE", "PREDICTED", "STALE"}

// String returns "LIVE", "PREDICTED", "STALE" or "INVALID".
func (s State) String() string {
	if s < 0 || int(s) >= len(stateNames) {
		return "INVALID"
	}
	return stateNames[s]
}

// Valid reports whether s is LIVE, PREDICTED or STALE.
func (s State) Valid() bool { return s >= StateLive && s <= StateStale }

// ParseState parses the wire form ("LIVE", "PREDICTED", "STALE").
func ParseState(s string) (State, error) {
	for i := StateLive; i <= StateStale; i++ {
		if stateNames[i] == s {
			return i, nil
		}
	}
	return StateInvalid, fmt.Errorf("%w: state %q is not LIVE, PREDICTED or STALE", ErrBadMeta, s)
}

// MarshalText returns the wire form; it fails for an invalid state.
func (s State) MarshalText() ([]byte, error) {
	if !s.Valid() {
		return nil, fmt.Errorf("%w: state %d", ErrBadMeta, int(s))
	}
	return []byte(s.String()), nil
}

// UnmarshalText parses the wire form.
func (s *State) UnmarshalText(b []byte) error {
	v, err := ParseState(string(b))
	if err != nil {
		return err
	}
	*s = v
	return nil
}

// KeyframeReason says why the console asks the egress encoder for a keyframe.
// The zero value is KeyframeInvalid and is never passed.
type KeyframeReason int

// Reasons for a keyframe request.
const (
	KeyframeInvalid       KeyframeReason = iota // not a valid reason
	KeyframeViewerJoined                        // a viewer connected; it can only start decoding at a keyframe
	KeyframeViewerRequest                       // a viewer sent RTCP PLI or FIR
	KeyframeQueueDrop                           // a frame was dropped for a slow viewer; its decoder needs a fresh start
	KeyframeRetry                               // still waiting for a keyframe 200 ms (Config.KeyframeRetry) after asking
	KeyframeSourceSwitch                        // an encoded inter frame followed forwarded frames: the viewer's decoder would mix references

	keyframeReasonLast = KeyframeSourceSwitch
)

var keyframeReasonNames = [...]string{"invalid", "viewer-joined", "viewer-request", "queue-drop", "retry", "source-switch"}

// String returns a short lower-case name such as "viewer-joined".
func (r KeyframeReason) String() string {
	if r < 0 || int(r) >= len(keyframeReasonNames) {
		return "invalid"
	}
	return keyframeReasonNames[r]
}
