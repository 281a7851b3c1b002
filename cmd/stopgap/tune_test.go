package main

import (
	"bytes"
	"context"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"stopgap/stream/operator"
)

// TestTuneCLI: bad input to tune exits non-zero with a message naming the
// problem and leaves no output directory; a short drive runs end to end
// and says plainly that the data is too little.
func TestTuneCLI(t *testing.T) {
	dir := t.TempDir()
	drive := filepath.Join(dir, "drive")
	var out, errb bytes.Buffer
	if code := run(context.Background(), []string{"simdrive", "--quiet", "--out", drive, "--width", "160", "--height", "90", "--duration-s", "3"}, &out, &errb); code != 0 {
		t.Fatalf("simdrive: %d %s", code, errb.String())
	}
	// A drive without frames: the camera of the good drive, empty tables.
	empty := filepath.Join(dir, "empty")
	if err := os.Mkdir(empty, 0o755); err != nil {
		t.Fatal(err)
	}
	cam, err := os.ReadFile(filepath.Join(drive, "camera.json"))
	if err != nil {
		t.Fatal(err)
	}
	for name, body := range map[string]string{"camera.json": string(cam), "frames.csv": "index,t_capture_us,file\n", "telemetry.csv": "t_us,speed_mps,yaw_rate_rps\n"} {
		if err := os.WriteFile(filepath.Join(empty, name), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	tests := []struct {
		name     string
		args     []string
		wantCode int
		wantErr  string
		wantOut  string
	}{
		{"no drives", []string{"tune", "--out", filepath.Join(dir, "t0")}, 2, "at least one --drive", ""},
		{"tolerance out of range", []string{"tune", "--quiet", "--drive", drive, "--out", filepath.Join(dir, "t1"), "--max-harm-rate", "1.5"}, 1, "maximum harm rate 1.5 out of range", ""},
		{"two tolerances", []string{"tune", "--quiet", "--drive", drive, "--out", filepath.Join(dir, "t2"), "--max-harm-rate", "0.1", "--min-ssim", "0.5"}, 1, "exactly one tolerance", ""},
		{"one arrivals file for two drives", []string{"tune", "--quiet", "--drive", drive, "--drive", drive, "--arrivals", filepath.Join(drive, "arrivals.csv"), "--out", filepath.Join(dir, "t5")}, 1, "--recorded-arrivals", ""},
		{"recorded arrivals missing", []string{"tune", "--quiet", "--drive", drive, "--recorded-arrivals", "--out", filepath.Join(dir, "t6")}, 1, "arrivals.csv", ""},
		{"drive without frames", []string{"tune", "--quiet", "--drive", drive, "--drive", empty, "--out", filepath.Join(dir, "t3")}, 1, "frames", ""},
		{"short drive", []string{"tune", "--quiet", "--drive", drive, "--out", filepath.Join(dir, "t4"), "--frame-loss-rate", "0.3", "--burst-ms", "100", "--resamples", "50"}, 0, "CAUTION", "too little data"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var out, errb bytes.Buffer
			code := run(context.Background(), tc.args, &out, &errb)
			if code != tc.wantCode {
				t.Fatalf("exit %d, want %d\nstdout: %s\nstderr: %s", code, tc.wantCode, out.String(), errb.String())
			}
			if !strings.Contains(errb.String(), tc.wantErr) {
				t.Errorf("stderr %q does not contain %q", errb.String(), tc.wantErr)
			}
			if !strings.Contains(out.String(), tc.wantOut) {
				t.Errorf("stdout %q does not contain %q", out.String(), tc.wantOut)
			}
		})
	}
	for _, failed := range []string{"t0", "t1", "t2", "t3", "t5", "t6"} {
		if _, err := os.Stat(filepath.Join(dir, failed)); !os.IsNotExist(err) {
			t.Errorf("failed run left %s (stat: %v)", failed, err)
		}
	}
	for _, f := range []string{"tune.json", "tune.html", "coverage_harm_vs_cutoff.png"} {
		if _, err := os.Stat(filepath.Join(dir, "t4", f)); err != nil {
			t.Errorf("tune report lacks %s: %v", f, err)
		}
	}
}

// TestTunePolicyAndProposal: tune sweeps only within the administrator's
// policy, refuses limits beyond it and a proposal the policy does not allow
// (naming the limit and the file, before any replay, leaving no report),
// and with --operator records its recommendation in that profile's history
// as a proposal of the tune actor without changing the cutoff.
func TestTunePolicyAndProposal(t *testing.T) {
	dir := t.TempDir()
	runCmd := func(args ...string) (int, string, string) {
		var out, errb bytes.Buffer
		code := run(context.Background(), args, &out, &errb)
		return code, out.String(), errb.String()
	}
	drive := filepath.Join(dir, "drive")
	if code, _, e := runCmd("simdrive", "--quiet", "--out", drive, "--width", "160", "--height", "90", "--duration-s", "20"); code != 0 {
		t.Fatalf("simdrive: %d %s", code, e)
	}
	writeFile := func(name, body string) string {
		p := filepath.Join(dir, name)
		if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
		return p
	}
	pol := writeFile("policy.json", `{"min_cutoff": 0.3, "max_cutoff": 0.9}`)
	noPropose := writeFile("no-propose.json", `{"min_cutoff": 0.3, "allow": {"tune": []}}`)
	store := filepath.Join(dir, "operators.json")
	if code, _, e := runCmd("operator", "add", "erin", "--cutoff", "0.7", "--store", store, "--policy", pol); code != 0 {
		t.Fatalf("operator add: %d %s", code, e)
	}
	link := []string{"--quiet", "--drive", drive, "--frame-loss-rate", "0.3", "--burst-ms", "100", "--resamples", "100"}

	refusals := []struct {
		name string
		args []string
		want []string
	}{
		{"min-cutoff below the policy", []string{"--min-cutoff", "0.2", "--policy", pol}, []string{"--min-cutoff", "min_cutoff = 0.3", pol}},
		{"max-cutoff above the policy", []string{"--max-cutoff", "0.95", "--policy", pol}, []string{"--max-cutoff", "max_cutoff = 0.9", pol}},
		{"tune may not propose", []string{"--policy", noPropose, "--operator", "erin", "--operators", store}, []string{"allow.tune", noPropose}},
		{"max-age-ms beyond the horizon", []string{"--max-age-ms", "900", "--policy", pol}, []string{"--max-age-ms", "max_horizon_ms", pol}},
		{"unknown operator", []string{"--policy", pol, "--operator", "nobody", "--operators", store}, []string{"nobody", "operator add"}},
	}
	for i, tc := range refusals {
		t.Run(tc.name, func(t *testing.T) {
			out := filepath.Join(dir, fmt.Sprintf("refused%d", i))
			code, _, e := runCmd(append(append([]string{"tune", "--out", out}, link...), tc.args...)...)
			if code != 1 {
				t.Fatalf("exit %d, want 1; stderr %s", code, e)
			}
			for _, w := range tc.want {
				if !strings.Contains(e, w) {
					t.Errorf("stderr %q does not name %q", e, w)
				}
			}
			if _, err := os.Stat(out); !os.IsNotExist(err) {
				t.Errorf("refused run left %s (stat: %v)", out, err)
			}
		})
	}

	out := filepath.Join(dir, "tuned")
	code, so, e := runCmd(append(append([]string{"tune", "--out", out}, link...), "--policy", pol, "--operator", "erin", "--operators", store, "--run", "tune-test-1")...)
	t.Logf("tune:\n%s", so)
	if code != 0 {
		t.Fatalf("tune: exit %d, %s", code, e)
	}
	// The sweep is the policy's range: first row 0.30, last 0.90.
	var rows []string
	for _, l := range strings.Split(so, "\n") {
		if f := strings.Fields(l); len(f) > 0 && strings.HasPrefix(f[0], "0.") {
			rows = append(rows, f[0])
		}
	}
	if len(rows) == 0 || rows[0] != "0.30" || rows[len(rows)-1] != "0.90" {
		t.Errorf("swept cutoffs %v, want 0.30 to 0.90 (the policy's limits)", rows)
	}
	snap, err := operator.NewStore(store).Load()
	if err != nil {
		t.Fatal(err)
	}
	p := snap.Profiles[snap.Find("erin")]
	prop, ok := p.LastProposal()
	if !ok {
		t.Fatalf("no proposal in erin's history: %+v", p.History)
	}
	var rec float64
	if _, err := fmt.Sscan(prop.To, &rec); err != nil || rec < 0.3 || rec > 0.9 {
		t.Errorf("proposal to %q, want a cutoff within the policy [0.3, 0.9] (%v)", prop.To, err)
	}
	if p.Cutoff != 0.7 || prop.Actor != operator.ActorTune || prop.Run != "tune-test-1" || prop.From != "0.7" ||
		!strings.Contains(prop.Reason, "interval") || !strings.Contains(so, "stopgap operator apply erin") {
		t.Errorf("profile cutoff %v, proposal %+v; want cutoff unchanged at 0.7 and a tune proposal from 0.7 of run tune-test-1 with its interval\n%s", p.Cutoff, prop, so)
	}
}

// TestTuneRange: the sweep range defaults to the policy's limits, flags
// may narrow it, and a flag beyond the built-in policy names that policy.
func TestTuneRange(t *testing.T) {
	pol := operator.DefaultPolicy()
	if lo, hi, err := tuneRange(pol, -1, -1); err != nil || lo != pol.MinCutoff || hi != pol.MaxCutoff {
		t.Errorf("defaults: [%v, %v] %v, want [%v, %v]", lo, hi, err, pol.MinCutoff, pol.MaxCutoff)
	}
	if lo, hi, err := tuneRange(pol, 0.6, 0.8); err != nil || lo != 0.6 || hi != 0.8 {
		t.Errorf("narrowed: [%v, %v] %v, want [0.6, 0.8]", lo, hi, err)
	}
	if _, _, err := tuneRange(pol, 0.9, 0.7); err == nil || !strings.Contains(err.Error(), "above --max-cutoff") {
		t.Errorf("min above max: %v", err)
	}
	_, _, err := tuneRange(pol, 0.1, -1)
	if err == nil || !strings.Contains(err.Error(), "min_cutoff") || !strings.Contains(err.Error(), "built-in default policy") {
		t.Errorf("below the built-in policy: %v", err)
	}
}
