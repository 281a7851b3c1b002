package main

import (
	"bytes"
	"context"
	"encoding/json"
	"math"
	"os"
	"path/filepath"
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

// TestReplayCompareSources: one replay with --compare-sources prints one
// table with every source of motion (telemetry only, commands added, video
// ego-motion only, all together, the exact motion) and writes the same rows
// to sources.json: one per telemetry link, one for a source without
// telemetry.
func TestReplayCompareSources(t *testing.T) {
	dir := t.TempDir()
	drive, out := filepath.Join(dir, "drive"), filepath.Join(dir, "r")
	var stdout, stderr bytes.Buffer
	if c := run(context.Background(), []string{"simdrive", "--quiet", "--out", drive, "--width", "320", "--height", "180", "--duration-s", "4"}, &stdout, &stderr); c != 0 {
		t.Fatalf("simdrive: %d %s", c, stderr.String())
	}
	stdout.Reset()
	if c := run(context.Background(), []string{"replay", "--quiet", "--drive", drive, "--out", out, "--compare-sources"}, &stdout, &stderr); c != 0 {
		t.Fatalf("replay --compare-sources: %d %s", c, stderr.String())
	}
	var want []string
	for _, s := range append(bench.EvalSources(), bench.ExactMotionSource) {
		want = append(want, s.Name)
		if s.Name != bench.VideoOnlySource.Name && s.Name != bench.ExactMotionSource.Name {
			want = append(want, s.Name) // lost with the video, own channel
		}
	}
	table := stdout.String()[strings.Index(stdout.String(), "sources of motion, side by side"):]
	for _, name := range want {
		if !strings.Contains(table, name) {
			t.Errorf("the table lacks %q:\n%s", name, table)
		}
	}
	rows := readSourceRows(t, out)
	var got []string
	for _, r := range rows {
		got = append(got, r.Source)
	}
	if strings.Join(got, "|") != strings.Join(want, "|") {
		t.Errorf("sources.json rows %q, want %q", got, want)
	}
}

// TestReplayCompareSourcesWithoutCommands: on a drive without the
// operator's commands (no controls.csv) --compare-sources still replays
// every row that needs none (telemetry only on both links, the video
// alone, the exact motion) and names each row it skipped with the reason,
// in the table and in sources.json.
func TestReplayCompareSourcesWithoutCommands(t *testing.T) {
	dir := t.TempDir()
	drive, out := filepath.Join(dir, "drive"), filepath.Join(dir, "r")
	var stdout, stderr bytes.Buffer
	if c := run(context.Background(), []string{"simdrive", "--quiet", "--no-commands", "--out", drive, "--width", "320", "--height", "180", "--duration-s", "4"}, &stdout, &stderr); c != 0 {
		t.Fatalf("simdrive: %d %s", c, stderr.String())
	}
	if _, err := os.Stat(filepath.Join(drive, "controls.csv")); err == nil {
		t.Fatal("the drive has a controls.csv; the test needs one without")
	}
	stdout.Reset()
	if c := run(context.Background(), []string{"replay", "--quiet", "--drive", drive, "--out", out, "--compare-sources"}, &stdout, &stderr); c != 0 {
		t.Fatalf("replay --compare-sources on a drive without commands: exit %d, %s", c, stderr.String())
	}
	rows := readSourceRows(t, out)
	var got []string
	for _, r := range rows {
		tag := r.Source
		if r.Skipped != "" {
			tag += " (skipped)"
			if !strings.Contains(r.Skipped, "no commands recorded") {
				t.Errorf("row %q skipped with %q, want the missing commands named", r.Source, r.Skipped)
			}
		} else if r.Predicted == 0 && r.Missing == 0 {
			t.Errorf("row %q has no figures", r.Source)
		}
		got = append(got, tag)
	}
	want := []string{bench.TelemetryOnlySource.Name, bench.TelemetryOnlySource.Name, bench.CommandsAddedSource.Name + " (skipped)",
		bench.VideoOnlySource.Name, bench.AllSourcesSource.Name + " (skipped)", bench.ExactMotionSource.Name}
	if strings.Join(got, "|") != strings.Join(want, "|") {
		t.Errorf("sources.json rows %q, want %q", got, want)
	}
	table := stdout.String()
	if n := strings.Count(table, "skipped: needs the operator's commands"); n != 2 {
		t.Errorf("the table names %d skipped rows, want 2:\n%s", n, table)
	}
}

// readSourceRows reads the rows of a --compare-sources run's sources.json in
// out.
func readSourceRows(t *testing.T, out string) []bench.EvalRow {
	t.Helper()
	data, err := os.ReadFile(filepath.Join(out, "sources.json"))
	if err != nil {
		t.Fatal(err)
	}
	var rows []bench.EvalRow
	if err := json.Unmarshal(data, &rows); err != nil {
		t.Fatal(err)
	}
	return rows
}
