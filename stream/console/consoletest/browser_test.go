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

func TestJSString(t *testing.T) {
	for in, want := range map[string]string{
		`caution`: `"caution"`, `a"b`: `"a\"b"`, `a\b`: `"a\\b"`, "a\nb": `"a\u000ab"`, "a\u2028b": `"a\u2028b"`,
	} {
		if got := jsString(in); got != want {
			t.Errorf("jsString(%q) = %s, want %s", in, got, want)
		}
	}
}
