package display

import (
	"fmt"
	"math"
)

// Defaults for Policy. They are design choices for this project (not
// published values): half confidence is where the 1-sigma error of the
// reference points reaches about 1.18 times the confidence scale (see
// predictor.ConfidenceModel), and 800 ms is about 24 frames at 30 fps, after
// which even a good motion estimate leaves moving traffic too far from where
// the picture shows it.
const (
	DefaultCutoffConfidence = 0.5
	DefaultMaxAgeMs         = 800.0
)

// Policy decides the state of each missing tick.
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
	if err := ValidCutoff(p.CutoffConfidence); err != nil {
		return err
	}
	if math.IsNaN(p.MaxAgeMs) || math.IsInf(p.MaxAgeMs, 0) || p.MaxAgeMs < 0 {
		return fmt.Errorf("MaxAgeMs = %g, want a finite value >= 0 ms: %w", p.MaxAgeMs, ErrInvalidPolicy)
	}
	return nil
}

// ValidCutoff reports a cutoff outside [0, 1] (or NaN), wrapping
// ErrInvalidPolicy.
func ValidCutoff(c float64) error {
	if math.IsNaN(c) || c < 0 || c > 1 {
		return fmt.Errorf("CutoffConfidence = %g, want a value in [0, 1]: %w", c, ErrInvalidPolicy)
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
