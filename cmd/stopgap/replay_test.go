package main

import (
	"bytes"
	"math"
	"strings"
	"testing"

	"stopgap/bench"
)

// TestPrintSummaryNoBareNaN: a replay that could score no missing tick
// prints dashes and the line saying why, never NaN.
func TestPrintSummaryNoBareNaN(t *testing.T) {
	nan := bench.Float(math.NaN())
	s := bench.Summary{TicksTotal: 557, TicksMissing: 139, LiveTicks: 418, StaleTicks: 139, SynthMsP50: nan, SynthMsP99: nan,
		TicksUnscored: 139, UnscoredNote: "139 of 139 missing ticks could not be scored: ...",
		Pairing: &bench.PairingReport{Decisions: "decisions: the replay agrees with the relay's recorded state on 557 of 557 ticks"}}
	for _, m := range bench.Methods() {
		st := s.Methods.Get(m)
		st.PSNRdBMean, st.SSIMMean, st.MAEMean = nan, nan, nan
	}
	var b bytes.Buffer
	printSummary(&b, s, "O")
	out := b.String()
	for _, want := range []string{s.UnscoredNote, s.Pairing.Decisions, "hold             0          -"} {
		if !strings.Contains(out, want) {
			t.Errorf("output lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "NaN") {
		t.Errorf("a bare NaN in the summary:\n%s", out)
	}
}
