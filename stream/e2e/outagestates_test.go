package e2e

import (
	"strings"
	"testing"

	"stopgap/stream/console/consoletest"
)

// TestOutageStates: the verdict on the page's state log around a cut at
// 1000 ms lasting 1500 ms. A LIVE status that expired on the page's clock
// (status-late) before the relay's first PREDICTED tick is what the page
// must do, not a stall; LIVE shown 150 ms into the outage fails whether the
// log has stalls or not.
func TestOutageStates(t *testing.T) {
	type sc = consoletest.StateChange
	start := []sc{{State: "UNKNOWN", Reason: "connecting", TMs: 10}, {State: "UNKNOWN", Reason: "no-status", TMs: 200},
		{State: "NO_PICTURE", TMs: 300}, {State: "LIVE", TMs: 400}}
	end := []sc{{State: "STALE", TMs: 1900}, {State: "LIVE", TMs: 2600}}
	with := func(mid ...sc) []sc {
		return append(append(append([]sc(nil), start...), mid...), end...)
	}
	cases := []struct {
		name string
		log  []sc
		want string // "" for a pass, else a word of the one problem
	}{
		{"prompt PREDICTED", with(sc{State: "PREDICTED", TMs: 1070}), ""},
		{"late PREDICTED, status expired first", with(sc{State: "UNKNOWN", Reason: "status-late", TMs: 1100},
			sc{State: "PREDICTED", TMs: 1160}), ""},
		{"late PREDICTED, nothing in between", with(sc{State: "PREDICTED", TMs: 1160}), "still LIVE 150 ms"},
		{"status expired only after 150 ms", with(sc{State: "UNKNOWN", Reason: "status-late", TMs: 1155},
			sc{State: "PREDICTED", TMs: 1200}), "still LIVE 150 ms"},
		{"NOT_SHOWN in between is not LIVE", with(sc{State: "NOT_SHOWN", TMs: 1090}, sc{State: "PREDICTED", TMs: 1160}), ""},
		{"LIVE again inside the outage", with(sc{State: "PREDICTED", TMs: 1070}, sc{State: "LIVE", TMs: 1400},
			sc{State: "PREDICTED", TMs: 1450}), "inside the outage"},
		{"three long stalls before the cut", append(append([]sc(nil), start...),
			sc{State: "UNKNOWN", Reason: "video-frozen", TMs: 500}, sc{State: "LIVE", TMs: 560},
			sc{State: "UNKNOWN", Reason: "meta-silent", TMs: 600}, sc{State: "LIVE", TMs: 700},
			sc{State: "UNKNOWN", Reason: "meta-silent", TMs: 800}, sc{State: "LIVE", TMs: 860},
			sc{State: "PREDICTED", TMs: 1070}, sc{State: "STALE", TMs: 1900}, sc{State: "LIVE", TMs: 2600}), "3 STATE UNKNOWN stalls"},
		{"two status-late flickers before the cut", append(append([]sc(nil), start...),
			sc{State: "UNKNOWN", Reason: "status-late", TMs: 500}, sc{State: "LIVE", TMs: 560},
			sc{State: "UNKNOWN", Reason: "status-late", TMs: 800}, sc{State: "LIVE", TMs: 860},
			sc{State: "UNKNOWN", Reason: "status-late", TMs: 1100},
			sc{State: "PREDICTED", TMs: 1120}, sc{State: "STALE", TMs: 1900}, sc{State: "LIVE", TMs: 2600}), ""},
		{"status late most of the time", append(append([]sc(nil), start...),
			sc{State: "UNKNOWN", Reason: "status-late", TMs: 500}, sc{State: "LIVE", TMs: 600},
			sc{State: "UNKNOWN", Reason: "status-late", TMs: 620}, sc{State: "LIVE", TMs: 900},
			sc{State: "PREDICTED", TMs: 1070}, sc{State: "STALE", TMs: 1900}, sc{State: "LIVE", TMs: 2600},
			sc{State: "UNKNOWN", Reason: "status-late", TMs: 2700}, sc{State: "LIVE", TMs: 2800}), "more than half the time"},
		{"empty log", nil, "empty"},
		{"no STALE", append(append([]sc(nil), start...), sc{State: "PREDICTED", TMs: 1070}, sc{State: "LIVE", TMs: 2600}),
			"do not contain PREDICTED, STALE, LIVE"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			problems, notes := outageStates(tc.log, 1000, 1000, 1500)
			switch {
			case tc.want == "" && len(problems) > 0:
				t.Errorf("problems %q, want none (notes %q)", problems, notes)
			case tc.want != "" && (len(problems) != 1 || !strings.Contains(problems[0], tc.want)):
				t.Errorf("problems %q, want one saying %q", problems, tc.want)
			}
		})
	}
}

// TestOutageStatesSlowCut: the cut was read on the page clock at 1000 ms
// before it and at 1040 ms after it (a slow round trip to the browser), so
// the link may have been cut as late as 1040 ms: LIVE is wrong only from
// 1190 ms on.
func TestOutageStatesSlowCut(t *testing.T) {
	type sc = consoletest.StateChange
	log := func(predictedMs float64) []sc {
		return []sc{{State: "UNKNOWN", Reason: "connecting", TMs: 10}, {State: "LIVE", TMs: 400},
			{State: "PREDICTED", TMs: predictedMs}, {State: "STALE", TMs: 1900}, {State: "LIVE", TMs: 2600}}
	}
	for _, tc := range []struct {
		predictedMs float64
		want        string
	}{{1160, ""}, {1185, ""}, {1200, "still LIVE 150 ms"}} {
		problems, notes := outageStates(log(tc.predictedMs), 1000, 1040, 1500)
		switch {
		case tc.want == "" && len(problems) > 0:
			t.Errorf("PREDICTED at %.0f ms: problems %q, want none (notes %q)", tc.predictedMs, problems, notes)
		case tc.want != "" && (len(problems) != 1 || !strings.Contains(problems[0], tc.want)):
			t.Errorf("PREDICTED at %.0f ms: problems %q, want one saying %q", tc.predictedMs, problems, tc.want)
		}
	}
}
