package predictor

import (
	"errors"
	"math"
	"testing"
)

func TestWhyStale(t *testing.T) {
	pol := Policy{CutoffConfidence: 0.6, MaxAgeMs: 800}
	noMotion := errors.New("no telemetry")
	tests := []struct {
		name    string
		tick    Tick
		picture bool
		want    StaleReason
	}{
		{"live", Tick{State: StateLive, Confidence: 1}, true, StaleReasonNone},
		{"predicted", Tick{State: StatePredicted, Confidence: 0.9, AgeMs: 100}, true, StaleReasonNone},
		{"no picture yet", Tick{State: StateStale}, false, StaleNoPicture},
		{"no motion", Tick{State: StateStale, AgeMs: 100, MotionErr: noMotion}, true, StaleNoMotion},
		{"age over cap", Tick{State: StateStale, Confidence: 0.9, AgeMs: 801}, true, StaleAgeOverCap},
		{"age NaN", Tick{State: StateStale, Confidence: 0.9, AgeMs: math.NaN()}, true, StaleAgeOverCap},
		{"low confidence", Tick{State: StateStale, Confidence: 0.59, AgeMs: 100}, true, StaleLowConfidence},
		{"confidence NaN", Tick{State: StateStale, Confidence: math.NaN(), AgeMs: 100}, true, StaleLowConfidence},
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			if got := WhyStale(pol, tt.tick, tt.picture); got != tt.want {
				t.Errorf("WhyStale = %q, want %q", got, tt.want)
			}
		})
	}
}

// TestWhyStaleAgreesWithDecide: whenever Decide says STALE for a missing
// frame, WhyStale names a reason; whenever it says PREDICTED, none.
func TestWhyStaleAgreesWithDecide(t *testing.T) {
	pol := Policy{CutoffConfidence: 0.5, MaxAgeMs: 400}
	for _, conf := range []float64{0, 0.49, 0.5, 0.51, 1, math.NaN()} {
		for _, age := range []float64{-1, 0, 399, 400, 401, math.NaN()} {
			st := pol.Decide(false, conf, age)
			why := WhyStale(pol, Tick{State: st, Confidence: conf, AgeMs: age}, true)
			if (st == StateStale) != (why != StaleReasonNone) {
				t.Errorf("conf %v age %v: Decide %v, WhyStale %q", conf, age, st, why)
			}
		}
	}
}
