package display

import (
	"errors"
	"math"
	"testing"
)

func TestStateNamesRoundTrip(t *testing.T) {
	seen := map[string]State{}
	for _, st := range States {
		name := st.String()
		if name == StateInvalid.String() {
			t.Errorf("state %d has the invalid name", int(st))
		}
		if prev, dup := seen[name]; dup {
			t.Errorf("states %d and %d share the name %q", int(prev), int(st), name)
		}
		seen[name] = st
		if got, err := ParseState(name); err != nil || got != st {
			t.Errorf("ParseState(%q) = %v, %v; want %v", name, got, err, st)
		}
	}
	for _, bad := range []string{"", "INVALID", "live", "SKIPPED", "NO SIGNAL"} {
		if _, err := ParseState(bad); !errors.Is(err, ErrInvalidState) {
			t.Errorf("ParseState(%q): %v, want ErrInvalidState", bad, err)
		}
	}
}

func TestPolicyDecide(t *testing.T) {
	p := DefaultPolicy()
	tests := []struct {
		name        string
		here        bool
		conf, ageMs float64
		want        State
	}{
		{"frame here", true, 0, 0, StateLive},
		{"at the cutoff", false, 0.5, 100, StatePredicted},
		{"below the cutoff", false, 0.4999, 100, StateStale},
		{"at the age cap", false, 0.9, 800, StatePredicted},
		{"past the age cap", false, 0.9, 800.001, StateStale},
		{"NaN confidence", false, math.NaN(), 100, StateStale},
	}
	for _, tc := range tests {
		if got := p.Decide(tc.here, tc.conf, tc.ageMs); got != tc.want {
			t.Errorf("%s: %v, want %v", tc.name, got, tc.want)
		}
	}
	for _, bad := range []Policy{{CutoffConfidence: -0.1}, {CutoffConfidence: 1.1}, {CutoffConfidence: math.NaN()}, {MaxAgeMs: -1}, {MaxAgeMs: math.Inf(1)}} {
		if err := bad.Validate(); !errors.Is(err, ErrInvalidPolicy) {
			t.Errorf("%+v: %v, want ErrInvalidPolicy", bad, err)
		}
	}
}

// TestStateText: the text form (JSON, CSV) is String's, both ways, and an
// invalid state is neither written nor read.
func TestStateText(t *testing.T) {
	for _, st := range States {
		if !st.Valid() {
			t.Errorf("%v not Valid", st)
		}
		b, err := st.MarshalText()
		if err != nil || string(b) != st.String() {
			t.Errorf("%v.MarshalText() = %q, %v; want %q", st, b, err, st.String())
		}
		var got State
		if err := got.UnmarshalText(b); err != nil || got != st {
			t.Errorf("UnmarshalText(%q) = %v, %v; want %v", b, got, err, st)
		}
	}
	for _, bad := range []State{StateInvalid, StateNotShown + 1, -1} {
		if bad.Valid() {
			t.Errorf("State(%d) Valid", int(bad))
		}
		if b, err := bad.MarshalText(); !errors.Is(err, ErrInvalidState) || b != nil {
			t.Errorf("State(%d).MarshalText() = %q, %v; want ErrInvalidState", int(bad), b, err)
		}
	}
	keep := StateStale
	if err := keep.UnmarshalText([]byte("NO PICTURE")); !errors.Is(err, ErrInvalidState) || keep != StateStale {
		t.Errorf("UnmarshalText of a bad name: %v, %v; want ErrInvalidState and the state unchanged", keep, err)
	}
}
