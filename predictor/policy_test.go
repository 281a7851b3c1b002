package predictor

import (
	"errors"
	"math"
	"testing"
)

func TestStateString(t *testing.T) {
	for s, want := range map[State]string{StateInvalid: "INVALID", StateLive: "LIVE", StatePredicted: "PREDICTED", StateStale: "STALE", State(42): "INVALID"} {
		if got := s.String(); got != want {
			t.Errorf("State(%d) = %q want %q", int(s), got, want)
		}
	}
}

func TestPolicyDecide(t *testing.T) {
	p := Policy{CutoffConfidence: 0.5, MaxAgeMs: 800}
	nan := math.NaN()
	cases := []struct {
		name string
		here bool
		conf float64
		age  float64
		want State
	}{
		{"real frame here", true, 0, 5000, StateLive},
		{"real frame here even if confidence NaN", true, nan, 0, StateLive},
		{"missing, confident, young", false, 0.9, 100, StatePredicted},
		{"missing, exactly at cutoff", false, 0.5, 100, StatePredicted},
		{"missing, just below cutoff", false, 0.4999, 100, StateStale},
		{"missing, exactly at age cap", false, 0.9, 800, StatePredicted},
		{"missing, just over age cap", false, 0.9, 800.001, StateStale},
		{"missing, NaN confidence", false, nan, 100, StateStale},
		{"missing, NaN age", false, 0.9, nan, StateStale},
		{"missing, negative age", false, 0.9, -1, StateStale},
		{"missing, zero age", false, 1, 0, StatePredicted},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			if got := p.Decide(tc.here, tc.conf, tc.age); got != tc.want {
				t.Fatalf("Decide(%v,%g,%g) = %v want %v", tc.here, tc.conf, tc.age, got, tc.want)
			}
		})
	}
	// The zero Policy never predicts a gap (age > 0).
	if got := (Policy{}).Decide(false, 1, 1); got != StateStale {
		t.Fatalf("zero policy: %v", got)
	}
	// Cutoff 1 predicts only at full confidence; cutoff 0 whenever age allows.
	if got := (Policy{CutoffConfidence: 1, MaxAgeMs: 800}).Decide(false, 0.999, 10); got != StateStale {
		t.Fatalf("cutoff 1: %v", got)
	}
	if got := (Policy{CutoffConfidence: 0, MaxAgeMs: 800}).Decide(false, 0, 10); got != StatePredicted {
		t.Fatalf("cutoff 0: %v", got)
	}
}

func TestPolicyValidate(t *testing.T) {
	cases := []struct {
		p  Policy
		ok bool
	}{
		{DefaultPolicy(), true},
		{Policy{}, true},
		{Policy{CutoffConfidence: 1, MaxAgeMs: 1}, true},
		{Policy{CutoffConfidence: -0.1, MaxAgeMs: 800}, false},
		{Policy{CutoffConfidence: 1.1, MaxAgeMs: 800}, false},
		{Policy{CutoffConfidence: math.NaN(), MaxAgeMs: 800}, false},
		{Policy{CutoffConfidence: 0.5, MaxAgeMs: -1}, false},
		{Policy{CutoffConfidence: 0.5, MaxAgeMs: math.Inf(1)}, false},
	}
	for _, tc := range cases {
		err := tc.p.Validate()
		if (err == nil) != tc.ok || (err != nil && !errors.Is(err, ErrInvalidPolicy)) {
			t.Errorf("%+v: got %v, want ok=%v", tc.p, err, tc.ok)
		}
	}
}

func TestMethodRoundTrip(t *testing.T) {
	for _, m := range []Method{MethodGround, MethodRotation, MethodHold} {
		got, err := ParseMethod(m.String())
		if err != nil || got != m {
			t.Errorf("%v: got %v %v", m, got, err)
		}
	}
	if _, err := ParseMethod("magic"); !errors.Is(err, ErrInvalidMethod) {
		t.Errorf("bad method: %v", err)
	}
	if MethodInvalid.String() != "invalid" {
		t.Errorf("zero method string %q", MethodInvalid.String())
	}
}
