package console

import (
	"encoding/json"
	"errors"
	"math"
	"strings"
	"testing"
	"unicode/utf8"

	"stopgap/internal/display"
)

func sampleMeta() Meta {
	return Meta{
		Seq: 812, TimeUs: 27066666, State: display.StatePredicted, AgeMs: 133.5, PeriodMs: 1000.0 / 30, Confidence: 0.81,
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
		{"live", func(m *Meta) { m.State = display.StateLive; m.Confidence = 1; m.AgeMs = 0 }},
		{"stale", func(m *Meta) { m.State, m.Confidence, m.Why, m.MaxAgeMs = display.StateStale, 0, "low-confidence", 800 }},
		{"no picture", func(m *Meta) { m.State = display.StateNoPicture; m.Confidence = 0; m.AgeMs = 0 }},
		{"not shown", func(m *Meta) { m.State = display.StateNotShown; m.Confidence = 0; m.AgeMs = 0 }},
		{"tiny and huge numbers", func(m *Meta) { m.AgeMs = 1e-9; m.Link.DelayMs = 1e300; m.TimeUs = math.MinInt64 }},
		{"max counters", func(m *Meta) { m.Seq = math.MaxUint64; m.Link.FramesIn = math.MaxUint64 }},
		{"period not given", func(m *Meta) { m.PeriodMs = 0 }},
		{"slow camera", func(m *Meta) { m.PeriodMs = 250 }},
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
		{"zero state", func(m *Meta) { m.State = display.StateInvalid }},
		{"age for no picture", func(m *Meta) { m.State = display.StateNoPicture; m.AgeMs = 1 }},
		{"age for not shown", func(m *Meta) { m.State = display.StateNotShown; m.AgeMs = 33.3 }},
		{"state out of range", func(m *Meta) { m.State = 7 }},
		{"NaN age", func(m *Meta) { m.AgeMs = math.NaN() }},
		{"Inf confidence", func(m *Meta) { m.Confidence = math.Inf(1) }},
		{"NaN cutoff", func(m *Meta) { m.Cutoff = math.NaN() }},
		{"-Inf loss", func(m *Meta) { m.Link.LossPct = math.Inf(-1) }},
		{"NaN jitter", func(m *Meta) { m.Link.JitterMs = math.NaN() }},
		{"NaN delay", func(m *Meta) { m.Link.DelayMs = math.NaN() }},
		{"NaN period", func(m *Meta) { m.PeriodMs = math.NaN() }},
		{"Inf period", func(m *Meta) { m.PeriodMs = math.Inf(1) }},
		{"negative period", func(m *Meta) { m.PeriodMs = -33.3 }},
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

func TestKeyframeReasonString(t *testing.T) {
	if KeyframeReason(-1).String() != "invalid" || KeyframeReason(99).String() != "invalid" || KeyframeViewerJoined.String() != "viewer-joined" {
		t.Error("String of out-of-range enums")
	}
}

// TestMetaStateWire: every state of display.States goes on the wire as its
// String and comes back through ParseMeta and encoding/json alike.
func TestMetaStateWire(t *testing.T) {
	for _, st := range display.States {
		m := sampleMeta()
		m.State = st
		if st == display.StateNoPicture || st == display.StateNotShown {
			m.AgeMs = 0
		}
		b, err := m.AppendJSON(nil)
		if err != nil {
			t.Fatalf("%v: %v", st, err)
		}
		if want := `"state":"` + st.String() + `"`; !strings.Contains(string(b), want) {
			t.Errorf("%v: %s lacks %s", st, b, want)
		}
		got, err := ParseMeta(b)
		if err != nil || got != m {
			t.Errorf("%v: ParseMeta = %+v, %v; want %+v", st, got, err, m)
		}
		var std Meta
		if err := json.Unmarshal(b, &std); err != nil || std != m {
			t.Errorf("%v: json.Unmarshal = %+v, %v", st, std, err)
		}
	}
}

// TestParseMetaErrors: each bad message is refused with ErrBadMeta and a
// message that names the problem.
func TestParseMetaErrors(t *testing.T) {
	sample := sampleMeta()
	good, err := sample.AppendJSON(nil)
	if err != nil {
		t.Fatal(err)
	}
	withState := func(v string) string {
		return strings.Replace(string(good), `"state":"PREDICTED"`, `"state":`+v, 1)
	}
	cases := []struct {
		name, data, says string
		state            bool // also wraps display.ErrInvalidState
	}{
		{"empty", "", "empty message", false},
		{"not JSON", "{seq:1}", "not JSON", false},
		{"state lower case", withState(`"predicted"`), `"predicted"`, true},
		{"old name", withState(`"UNKNOWN"`), `"UNKNOWN"`, true},
		{"state with a space", withState(`"NO PICTURE"`), `"NO PICTURE"`, true},
		{"state as number", withState(`2`), `"state"`, false},
		{"state null", withState(`null`), "state 0", false},
		{"state missing", strings.Replace(string(good), `"state":"PREDICTED",`, "", 1), "state 0", false},
		{"unknown field", strings.Replace(string(good), `{"seq"`, `{"extra":1,"seq"`, 1), `"extra"`, false},
		{"two objects", string(good) + "{}", "data after the JSON object", false},
		{"age for NO_PICTURE", withState(`"NO_PICTURE"`), "age_ms 133.5 for NO_PICTURE", false},
		{"negative period", strings.Replace(string(good), `"period_ms":`, `"period_ms":-`, 1), "period_ms -33.3", false},
		{"period as string", strings.Replace(string(good), `"period_ms":33.333333333333336`, `"period_ms":"33"`, 1), `"period_ms"`, false},
		{"array", "[]", "", false},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			m, err := ParseMeta([]byte(tc.data))
			if !errors.Is(err, ErrBadMeta) {
				t.Fatalf("ParseMeta(%s) = %+v, %v; want ErrBadMeta", tc.data, m, err)
			}
			if m != (Meta{}) {
				t.Errorf("returned %+v with the error, want the zero Meta", m)
			}
			if !strings.Contains(err.Error(), tc.says) {
				t.Errorf("error %q does not say %q", err, tc.says)
			}
			if tc.state != errors.Is(err, display.ErrInvalidState) {
				t.Errorf("error %q: wraps display.ErrInvalidState = %v, want %v", err, !tc.state, tc.state)
			}
		})
	}
}

// FuzzParseMeta: any message gives a Meta or ErrBadMeta, never a panic; an
// accepted Meta, written again with AppendJSON, parses back equal, and
// its state is one of display.States.
func FuzzParseMeta(f *testing.F) {
	for _, st := range display.States {
		m := sampleMeta()
		m.State = st
		if st == display.StateNoPicture || st == display.StateNotShown {
			m.AgeMs = 0
		}
		b, _ := m.AppendJSON(nil)
		f.Add(b)
	}
	for _, s := range []string{``, `{}`, `null`, `[]`, `{"state":"LIVE"}`, `{"state":"NO_PICTURE","age_ms":0}`,
		`{"state":"NO_PICTURE","age_ms":5}`, `{"state":"NOT_SHOWN","STATE":"LIVE"}`, `{"state":"INVALID"}`, `{"seq":1}{}`} {
		f.Add([]byte(s))
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		m, err := ParseMeta(data)
		if err != nil {
			if !errors.Is(err, ErrBadMeta) {
				t.Fatalf("error %v does not wrap ErrBadMeta", err)
			}
			return
		}
		if !m.State.Valid() {
			t.Fatalf("accepted state %d", int(m.State))
		}
		b, err := m.AppendJSON(nil)
		if err != nil {
			t.Fatalf("accepted %+v cannot be written: %v", m, err)
		}
		back, err := ParseMeta(b)
		if err != nil {
			t.Fatalf("written form %s refused: %v", b, err)
		}
		// encoding/json already turned invalid UTF-8 into U+FFFD, so the
		// profile, like every other field, must come back as it was.
		if back != m {
			t.Fatalf("round trip changed the message:\n%+v\n%+v\n%s", m, back, b)
		}
	})
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
