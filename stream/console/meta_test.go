package console

import (
	"encoding/json"
	"errors"
	"math"
	"strings"
	"testing"
	"unicode/utf8"
)

func sampleMeta() Meta {
	return Meta{
		Seq: 812, TimeUs: 27066666, State: StatePredicted, AgeMs: 133.5, Confidence: 0.81,
		Cutoff: 0.6, Profile: "city",
		Link: LinkStats{LossPct: 4.2, JitterMs: 11.25, DelayMs: 84, KeyframeRequests: 3, FramesIn: 790},
	}
}

func TestMetaAppendJSONRoundTrip(t *testing.T) {
	cases := []struct {
		name string
		edit func(*Meta)
	}{
		{"predicted", func(*Meta) {}},
		{"live", func(m *Meta) { m.State = StateLive; m.Confidence = 1; m.AgeMs = 0 }},
		{"stale", func(m *Meta) { m.State = StateStale; m.Confidence = 0; m.Why = "low-confidence"; m.MaxAgeMs = 800 }},
		{"tiny and huge numbers", func(m *Meta) { m.AgeMs = 1e-9; m.Link.DelayMs = 1e300; m.TimeUs = math.MinInt64 }},
		{"max counters", func(m *Meta) { m.Seq = math.MaxUint64; m.Link.FramesIn = math.MaxUint64 }},
		{"link silent", func(m *Meta) { m.Link.NoPacketsMs = 1250.5; m.Link.LossPct = 0; m.Link.JitterMs = 0 }},
		{"quote and backslash", func(m *Meta) { m.Profile = `a"b\c` }},
		{"control chars", func(m *Meta) { m.Profile = "a\nb\tc\x00\x1f" }},
		{"unicode", func(m *Meta) { m.Profile = "Straße — 街" }},
		{"empty profile", func(m *Meta) { m.Profile = "" }},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			m := sampleMeta()
			tc.edit(&m)
			b, err := m.AppendJSON(nil)
			if err != nil {
				t.Fatal(err)
			}
			var got Meta
			if err := json.Unmarshal(b, &got); err != nil {
				t.Fatalf("encoding/json cannot decode %s: %v", b, err)
			}
			if got != m {
				t.Errorf("round trip:\n got %+v\nwant %+v\njson %s", got, m, b)
			}
			// the same as encoding/json produces, field for field
			std, err := json.Marshal(m)
			if err != nil {
				t.Fatal(err)
			}
			var a, s map[string]any
			json.Unmarshal(b, &a)
			json.Unmarshal(std, &s)
			if ja, js := mustJSON(t, a), mustJSON(t, s); ja != js {
				t.Errorf("differs from encoding/json:\n ours %s\n std  %s", ja, js)
			}
		})
	}
}

func mustJSON(t *testing.T, v any) string {
	t.Helper()
	b, err := json.Marshal(v)
	if err != nil {
		t.Fatal(err)
	}
	return string(b)
}

func TestMetaInvalid(t *testing.T) {
	cases := []struct {
		name string
		edit func(*Meta)
	}{
		{"zero state", func(m *Meta) { m.State = StateInvalid }},
		{"state out of range", func(m *Meta) { m.State = 7 }},
		{"NaN age", func(m *Meta) { m.AgeMs = math.NaN() }},
		{"Inf confidence", func(m *Meta) { m.Confidence = math.Inf(1) }},
		{"NaN cutoff", func(m *Meta) { m.Cutoff = math.NaN() }},
		{"-Inf loss", func(m *Meta) { m.Link.LossPct = math.Inf(-1) }},
		{"NaN jitter", func(m *Meta) { m.Link.JitterMs = math.NaN() }},
		{"NaN delay", func(m *Meta) { m.Link.DelayMs = math.NaN() }},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			m := sampleMeta()
			tc.edit(&m)
			out, err := m.AppendJSON([]byte("keep"))
			if !errors.Is(err, ErrBadMeta) {
				t.Fatalf("err = %v, want ErrBadMeta", err)
			}
			if string(out) != "keep" {
				t.Errorf("dst changed on error: %q", out)
			}
		})
	}
}

func TestMetaAppendJSONNoAlloc(t *testing.T) {
	m := sampleMeta()
	buf := make([]byte, 0, 512)
	allocs := testing.AllocsPerRun(100, func() {
		var err error
		if buf, err = m.AppendJSON(buf[:0]); err != nil {
			t.Fatal(err)
		}
	})
	if allocs != 0 {
		t.Errorf("AppendJSON allocates %v times per call with room in dst, want 0", allocs)
	}
}

func TestStateText(t *testing.T) {
	for _, s := range []State{StateLive, StatePredicted, StateStale} {
		b, err := s.MarshalText()
		if err != nil {
			t.Fatal(err)
		}
		var got State
		if err := got.UnmarshalText(b); err != nil || got != s {
			t.Errorf("%v: round trip got %v, %v", s, got, err)
		}
	}
	if _, err := StateInvalid.MarshalText(); !errors.Is(err, ErrBadMeta) {
		t.Errorf("StateInvalid.MarshalText err = %v", err)
	}
	for _, bad := range []string{"", "live", "INVALID", "UNKNOWN"} {
		if _, err := ParseState(bad); !errors.Is(err, ErrBadMeta) {
			t.Errorf("ParseState(%q) err = %v, want ErrBadMeta", bad, err)
		}
	}
	if State(-1).String() != "INVALID" || KeyframeReason(99).String() != "invalid" || KeyframeViewerJoined.String() != "viewer-joined" {
		t.Error("String of out-of-range enums")
	}
}

// FuzzMetaProfile checks that any profile string gives valid JSON that
// decodes back to the same string (invalid UTF-8 becomes U+FFFD).
func FuzzMetaProfile(f *testing.F) {
	for _, s := range []string{"", "city", `"`, `\`, "\x00", "\xff\xfe", "a\u2028b", "Straße"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, profile string) {
		m := sampleMeta()
		m.Profile = profile
		b, err := m.AppendJSON(nil)
		if err != nil {
			t.Fatal(err)
		}
		if !json.Valid(b) {
			t.Fatalf("invalid JSON %q", b)
		}
		var got Meta
		if err := json.Unmarshal(b, &got); err != nil {
			t.Fatal(err)
		}
		want := profile
		if !utf8.ValidString(profile) {
			want = strings.ToValidUTF8(profile, "\uFFFD")
			// ToValidUTF8 merges runs of bad bytes; ours replaces each byte
			if strings.ReplaceAll(got.Profile, "\uFFFD", "") != strings.ReplaceAll(want, "\uFFFD", "") {
				t.Fatalf("profile %q decoded as %q", profile, got.Profile)
			}
			return
		}
		if got.Profile != want {
			t.Fatalf("profile %q decoded as %q", profile, got.Profile)
		}
	})
}

func jsonUnmarshal(s string, v any) error { return json.Unmarshal([]byte(s), v) }
