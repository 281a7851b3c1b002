package consoletest

import (
	"slices"
	"testing"
)

func TestWithoutStalls(t *testing.T) {
	cases := []struct {
		name       string
		log        []StateChange
		want       []string
		wantStalls int
	}{
		{"clean", []StateChange{{State: "UNKNOWN", Reason: "connecting"}, {State: "LIVE"}, {State: "PREDICTED"}},
			[]string{"UNKNOWN", "LIVE", "PREDICTED"}, 0},
		{"stall inside a state merges", []StateChange{{State: "UNKNOWN", Reason: "connecting"}, {State: "LIVE"},
			{State: "UNKNOWN", Reason: "video-frozen"}, {State: "LIVE"}, {State: "STALE"}},
			[]string{"UNKNOWN", "LIVE", "STALE"}, 1},
		{"stall across a change", []StateChange{{State: "LIVE"}, {State: "UNKNOWN", Reason: "meta-silent"}, {State: "PREDICTED"}},
			[]string{"LIVE", "PREDICTED"}, 1},
		{"late status after LIVE, then silence", []StateChange{{State: "UNKNOWN", Reason: "connecting"}, {State: "LIVE"},
			{State: "UNKNOWN", Reason: "status-late"}, {State: "UNKNOWN", Reason: "meta-silent"}, {State: "PREDICTED"}},
			[]string{"UNKNOWN", "LIVE", "PREDICTED"}, 2},
		{"other UNKNOWN reasons stay", []StateChange{{State: "LIVE"}, {State: "UNKNOWN", Reason: "bad-state"}, {State: "LIVE"}},
			[]string{"LIVE", "UNKNOWN", "LIVE"}, 0},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			got, stalls := WithoutStalls(tc.log)
			if !slices.Equal(got, tc.want) || len(stalls) != tc.wantStalls {
				t.Errorf("got %v with %d stalls, want %v with %d", got, len(stalls), tc.want, tc.wantStalls)
			}
		})
	}
}

func TestShownMs(t *testing.T) {
	log := []StateChange{{State: "UNKNOWN", Reason: "connecting", TMs: 0}, {State: "LIVE", TMs: 100},
		{State: "UNKNOWN", Reason: "status-late", TMs: 300}, {State: "LIVE", TMs: 350},
		{State: "UNKNOWN", Reason: "status-late", TMs: 900}}
	late := func(c StateChange) bool { return c.Reason == "status-late" }
	for _, tc := range []struct{ from, to, want float64 }{
		{0, 1000, 150},   // 50 ms, and the last 100 ms up to toMs
		{0, 900, 50},     // the last entry starts at toMs
		{320, 1000, 130}, // cut at fromMs
		{0, 320, 20},     // cut at toMs
		{400, 800, 0},
	} {
		if got := ShownMs(log, late, tc.from, tc.to); got != tc.want {
			t.Errorf("ShownMs(%v..%v) = %v, want %v", tc.from, tc.to, got, tc.want)
		}
	}
	if got := ShownMs(nil, late, 0, 100); got != 0 {
		t.Errorf("empty log: %v", got)
	}
}

func TestJSString(t *testing.T) {
	for in, want := range map[string]string{
		`caution`: `"caution"`, `a"b`: `"a\"b"`, `a\b`: `"a\\b"`, "a\nb": `"a\u000ab"`, "a\u2028b": `"a\u2028b"`,
	} {
		if got := jsString(in); got != want {
			t.Errorf("jsString(%q) = %s, want %s", in, got, want)
		}
	}
}
