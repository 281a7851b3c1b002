package operator

import (
	"encoding/json"
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

func TestParsePolicy(t *testing.T) {
	tests := []struct {
		name, data string
		want       func(p *Policy)
		errHas     []string // substrings of the error; nil = success
		line       int
	}{
		{name: "empty object takes defaults", data: `{}`, want: func(p *Policy) {}},
		{name: "partial", data: `{"min_cutoff": 0.3, "max_horizon_ms": 300}`, want: func(p *Policy) {
			p.MinCutoff, p.MaxHorizonMs = 0.3, 300
		}},
		{name: "allow replaces one actor", data: `{"allow": {"console": ["cutoff"]}}`, want: func(p *Policy) {
			p.Allow[ActorConsole] = []Action{ActionCutoff}
		}},
		{name: "empty list allows nothing", data: `{"allow": {"tune": []}}`, want: func(p *Policy) {
			p.Allow[ActorTune] = []Action{}
		}},
		{name: "unknown key", data: "{\n\"min_cutof\": 0.2}", errHas: []string{"policy.json", "min_cutof"}, line: 2},
		{name: "min above max", data: "{\n\"min_cutoff\": 0.9,\n\"max_cutoff\": 0.8}", errHas: []string{"min_cutoff", "above max_cutoff"}, line: 2},
		{name: "cutoff above 1", data: `{"max_cutoff": 1.5}`, errHas: []string{"max_cutoff", "[0, 1]"}},
		{name: "negative horizon", data: `{"max_horizon_ms": -1}`, errHas: []string{"max_horizon_ms"}},
		{name: "unknown actor", data: `{"allow": {"driver": ["cutoff"]}}`, errHas: []string{"unknown actor", "driver"}},
		{name: "unknown action", data: `{"allow": {"cli": ["fly"]}}`, errHas: []string{"unknown action", "fly"}},
		{name: "syntax error line", data: "{\n\"min_cutoff\": 0.2,\n}", errHas: []string{"policy.json:3"}, line: 3},
		{name: "two objects", data: `{}{}`, errHas: []string{"extra data"}},
		{name: "wrong type", data: `{"min_cutoff": "low"}`, errHas: []string{"min_cutoff"}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			got, err := ParsePolicy("policy.json", []byte(tc.data))
			if tc.errHas != nil {
				if err == nil {
					t.Fatalf("got %+v, want an error", got)
				}
				for _, s := range tc.errHas {
					if !strings.Contains(err.Error(), s) {
						t.Errorf("error %q does not mention %q", err, s)
					}
				}
				var fe *FileError
				if !errors.As(err, &fe) || !errors.Is(err, ErrBadFile) {
					t.Errorf("error %v is not a *FileError", err)
				} else if tc.line != 0 && fe.Line != tc.line {
					t.Errorf("line %d, want %d", fe.Line, tc.line)
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			want := DefaultPolicy()
			want.Path = "policy.json"
			tc.want(&want)
			if !reflect.DeepEqual(got, want) {
				t.Errorf("got %+v, want %+v", got, want)
			}
		})
	}
}

func TestLoadPolicyMissing(t *testing.T) {
	path := filepath.Join(t.TempDir(), "none.json")
	p, err := LoadPolicy(path, false)
	if err != nil || p.Path != "" || p.MinCutoff != DefaultMinCutoff {
		t.Fatalf("implicit missing file: %+v, %v; want the defaults", p, err)
	}
	if _, err := LoadPolicy(path, true); err == nil || !strings.Contains(err.Error(), path) {
		t.Fatalf("explicit missing file: %v; want an error naming %s", err, path)
	}
}

// TestChecksNameLimitAndFile: every refusal names the limit's key and the
// file, and only values past the limit are refused (bounds inclusive).
func TestChecksNameLimitAndFile(t *testing.T) {
	dir := t.TempDir()
	path := filepath.Join(dir, "policy.json")
	os.WriteFile(path, []byte(`{"min_cutoff": 0.4, "max_cutoff": 0.9, "max_horizon_ms": 300, "allow": {"tune": []}}`), 0o644)
	p, err := LoadPolicy(path, true)
	if err != nil {
		t.Fatal(err)
	}
	for _, c := range []float64{0.4, 0.65, 0.9} {
		if err := p.CheckCutoff(c); err != nil {
			t.Errorf("CheckCutoff(%v) = %v, want nil", c, err)
		}
	}
	if err := p.CheckHorizonMs(300); err != nil {
		t.Errorf("CheckHorizonMs(300) = %v", err)
	}
	refusals := []struct {
		err   error
		limit string
	}{
		{p.CheckCutoff(0.39), "min_cutoff"},
		{p.CheckCutoff(0.91), "max_cutoff"},
		{p.CheckCutoff(nan()), "min_cutoff"},
		{p.CheckHorizonMs(301), "max_horizon_ms"},
		{p.CheckAllowed(ActorConsole, ActionRemove), "allow.console"},
		{p.CheckProposal(0.5), "allow.tune"},
	}
	for _, r := range refusals {
		var pe *PolicyError
		if !errors.As(r.err, &pe) || !errors.Is(r.err, ErrRefused) {
			t.Errorf("%v: want a *PolicyError", r.err)
			continue
		}
		if pe.Limit != r.limit || !strings.Contains(r.err.Error(), r.limit) || !strings.Contains(r.err.Error(), path) {
			t.Errorf("%q: want it to name %s and %s", r.err, r.limit, path)
		}
	}
	if err := DefaultPolicy().CheckCutoff(0.1); err == nil || !strings.Contains(err.Error(), "built-in default policy") {
		t.Errorf("default policy refusal %v: want it to say it is the built-in default", err)
	}
}

// FuzzParsePolicy: whatever ParsePolicy accepts satisfies the invariants it
// documents, and writing it out and parsing it again gives the same policy.
func FuzzParsePolicy(f *testing.F) {
	f.Add([]byte(`{}`))
	f.Add([]byte(`{"max_horizon_ms": 250, "min_cutoff": 0.3, "max_cutoff": 0.95}`))
	f.Add([]byte(`{"allow": {"console": ["select", "cutoff", "cutoff"], "cli": [], "tune": ["propose", "apply"]}}`))
	f.Add([]byte("{\n \"min_cutoff\": 1e-300\n}"))
	f.Add([]byte(`{"min_cutoff": 0.6, "max_cutoff": 0.5}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		p, err := ParsePolicy("p.json", data)
		if err != nil {
			var fe *FileError
			if !errors.As(err, &fe) || fe.Path != "p.json" || fe.Line < 0 {
				t.Fatalf("error %v is not a *FileError naming p.json", err)
			}
			return
		}
		if !(p.MinCutoff >= 0 && p.MinCutoff <= p.MaxCutoff && p.MaxCutoff <= 1 && p.MaxHorizonMs > 0) {
			t.Fatalf("accepted an inconsistent policy %+v", p)
		}
		for a, acts := range p.Allow {
			for _, act := range acts {
				if !containsActor(a) || !containsAction(act) {
					t.Fatalf("accepted unknown %q/%q", a, act)
				}
			}
		}
		out, err := json.Marshal(p)
		if err != nil {
			t.Fatal(err)
		}
		q, err := ParsePolicy("p.json", out)
		if err != nil {
			t.Fatalf("re-parse of %s: %v", out, err)
		}
		if !reflect.DeepEqual(p, q) {
			t.Fatalf("round trip: %+v != %+v", p, q)
		}
	})
}
