package predictor

import (
	"fmt"
	"math"
)

// State says what a displayed frame is. The zero value is StateInvalid.
type State int

const (
	// StateInvalid is the zero value; never produced by a successful call.
	StateInvalid State = iota
	// StateLive: a real frame that arrived when it was due. Never labelled.
	StateLive
	// StatePredicted: the last real frame warped to where the camera should be
	// now. Always labelled in the pixels.
	StatePredicted
	// StateStale: the last real frame held, desaturated, dimmed and labelled
	// with a warning, because prediction was not trusted or the gap was too long.
	StateStale
)

// String returns "LIVE", "PREDICTED", "STALE" or "INVALID".
func (s State) String() string {
	switch s {
	case StateLive:
		return "LIVE"
	case StatePredicted:
		return "PREDICTED"
	case StateStale:
		return "STALE"
	default:
		return "INVALID"
	}
}

// Defaults for Policy. They are design choices for this project (not
// published values): half confidence is where the 1-sigma error of the
// reference points reaches about 1.18 times the confidence scale (see
// ConfidenceModel), and
// 800 ms is about 24 frames at 30 fps, after which even a good motion estimate
// leaves moving traffic too far from where the picture shows it.
const (
	DefaultCutoffConfidence = 0.5
	DefaultMaxAgeMs         = 800.0
)

// Policy decides the state of each displayed tick.
//
// The zero value is valid and safe: with MaxAgeMs = 0 no gap is ever filled
// with a predicted frame (every missing tick is STALE). Use DefaultPolicy for
// the documented defaults.
type Policy struct {
	// CutoffConfidence in [0, 1]: a missing frame is predicted only if the
	// confidence is at least this. Operator-tunable.
	CutoffConfidence float64
	// MaxAgeMs is the hard cap on the age of the real frame a prediction is
	// built from, milliseconds (>= 0). Beyond it the tick is STALE whatever
	// the confidence.
	MaxAgeMs float64
}

// DefaultPolicy returns Policy{DefaultCutoffConfidence, DefaultMaxAgeMs}.
func DefaultPolicy() Policy {
	return Policy{CutoffConfidence: DefaultCutoffConfidence, MaxAgeMs: DefaultMaxAgeMs}
}

// Validate reports a cutoff outside [0, 1] or a negative or non-finite age
// cap, wrapping ErrInvalidPolicy.
func (p Policy) Validate() error {
	if math.IsNaN(p.CutoffConfidence) || p.CutoffConfidence < 0 || p.CutoffConfidence > 1 {
		return fmt.Errorf("CutoffConfidence = %g, want a value in [0, 1]: %w", p.CutoffConfidence, ErrInvalidPolicy)
	}
	if !finite(p.MaxAgeMs) || p.MaxAgeMs < 0 {
		return fmt.Errorf("MaxAgeMs = %g, want a finite value >= 0 ms: %w", p.MaxAgeMs, ErrInvalidPolicy)
	}
	return nil
}

// Decide returns the state of one tick:
//
//   - StateLive if a real frame is due and here (realFrameHere);
//   - StatePredicted if it is missing, confidence >= CutoffConfidence and
//     0 <= ageMs <= MaxAgeMs;
//   - StateStale otherwise, including NaN confidence or age.
//
// Decide does not validate p; an invalid policy can only make it choose
// StateStale more often, except a negative cutoff, which Validate rejects.
func (p Policy) Decide(realFrameHere bool, confidence, ageMs float64) State {
	if realFrameHere {
		return StateLive
	}
	if confidence >= p.CutoffConfidence && ageMs >= 0 && ageMs <= p.MaxAgeMs {
		return StatePredicted
	}
	return StateStale
}

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
