package main

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"stopgap/bench/opfit"
	"stopgap/bench/simdrive"
	"stopgap/predictor"
	"stopgap/stream/operator"
)

// TestOperatorFitProposes: drives of a simulated operator at three cutoffs
// within the policy, written as relay recordings, are fitted by "stopgap
// operator fit"; the recommendation goes into the profile's history as a
// proposal of the tune actor and changes nothing until "operator apply". A
// recommendation beyond a narrower policy is refused, naming the limit and
// the file; with one drive, there is too little data and nothing is
// proposed.
func TestOperatorFitProposes(t *testing.T) {
	if testing.Short() {
		t.Skip("simulated drives")
	}
	dir := t.TempDir()
	co, err := opfit.NewCourse(simdrive.Config{DurationS: 60})
	if err != nil {
		t.Fatal(err)
	}
	op := opfit.SimOperator{DelayMs: 250, NoiseRad: 0.003, Misled: 2, LookaheadM: 10}
	var drives []string
	for i, c := range []float64{0.6, 0.8, 0.95, 0.6, 0.8, 0.95, 0.6, 0.8, 0.95, 0.6, 0.8, 0.95} {
		r, err := co.Simulate(op, opfit.SimConfig{LatencyMs: 100, LossRate: 0.15, BurstMs: 500, Seed: uint64(50 + i/3),
			Policy: predictor.Policy{CutoffConfidence: c, MaxAgeMs: 500}})
		if err != nil {
			t.Fatal(err)
		}
		d := filepath.Join(dir, fmt.Sprintf("drive%02d", i))
		if err := co.WriteRecording(d, r); err != nil {
			t.Fatal(err)
		}
		drives = append(drives, d)
	}
	store := filepath.Join(dir, "operators.json")
	pol := filepath.Join(dir, "policy.json")
	os.WriteFile(pol, []byte(`{}`), 0o644)
	runCmd := func(args ...string) (int, string, string) {
		var out, errb bytes.Buffer
		code := run(context.Background(), args, &out, &errb)
		return code, out.String(), errb.String()
	}
	if code, _, e := runCmd("operator", "add", "dana", "--cutoff", "0.6", "--store", store, "--policy", pol); code != 0 {
		t.Fatal(e)
	}
	code, out, e := runCmd("operator", "fit", "dana", "--sessions", strings.Join(drives, ","), "--store", store, "--policy", pol, "--run", "fit-test-1")
	t.Logf("operator fit:\n%s%s", out, e)
	if code != 0 || !strings.Contains(out, "proposal #2 recorded") {
		t.Fatalf("exit %d; want a proposal recorded", code)
	}
	snap, _ := operator.NewStore(store).Load()
	p := snap.Profiles[snap.Find("dana")]
	prop := p.History[1]
	if p.Cutoff != 0.6 || prop.Action != operator.ActionPropose || prop.Actor != operator.ActorTune || prop.Run != "fit-test-1" ||
		!strings.Contains(out, "recommended cutoff "+prop.To) {
		t.Errorf("after fit: cutoff %v, entry %+v", p.Cutoff, prop)
	}
	if code, _, e := runCmd("operator", "apply", "dana", "--store", store, "--policy", pol); code != 0 {
		t.Fatal(e)
	}
	snap, _ = operator.NewStore(store).Load()
	if got := snap.Profiles[0].Cutoff; fmt.Sprint(got) != prop.To {
		t.Errorf("after apply: cutoff %v, want the proposal's %s", got, prop.To)
	}

	narrow := filepath.Join(dir, "narrow.json")
	os.WriteFile(narrow, []byte(`{"max_cutoff": 0.7}`), 0o644)
	code, _, e = runCmd("operator", "fit", "dana", "--sessions", strings.Join(drives, ","), "--store", store, "--policy", narrow)
	if code != 1 || !strings.Contains(e, "max_cutoff") || !strings.Contains(e, narrow) {
		t.Errorf("fit beyond the policy: exit %d, %s; want a refusal naming max_cutoff and %s", code, e, narrow)
	}
	code, out, _ = runCmd("operator", "fit", "dana", "--sessions", drives[0], "--store", store, "--policy", pol)
	if code != 0 || !strings.Contains(out, "too little data") || !strings.Contains(out, "nothing proposed") {
		t.Errorf("one drive: exit %d, %s; want too little data, nothing proposed", code, out)
	}
}
