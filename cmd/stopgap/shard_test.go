package main

import (
	"bytes"
	"context"
	"encoding/csv"
	"encoding/json"
	"fmt"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strings"
	"sync"
	"testing"

	"stopgap/bench"
	"stopgap/bench/simdrive"
)

// runMainEnv makes the test binary run the command line instead of the
// tests, so that the shard tests can start it as separate processes.
const runMainEnv = "STOPGAP_TEST_RUN_MAIN"

func TestMain(m *testing.M) {
	if os.Getenv(runMainEnv) == "1" {
		os.Exit(run(context.Background(), os.Args[1:], os.Stdout, os.Stderr))
	}
	os.Exit(m.Run())
}

// stopgapProc runs "stopgap args..." as a separate process (this test
// binary) with extra environment variables; it returns the combined
// output and whether it exited 0.
func stopgapProc(t *testing.T, env []string, args ...string) (string, bool) {
	t.Helper()
	cmd := exec.Command(os.Args[0], args...)
	cmd.Env = append(append(os.Environ(), runMainEnv+"=1"), env...)
	out, err := cmd.CombinedOutput()
	return string(out), err == nil
}

// tinyDrives renders n small drives (160x90, 3 s) and a list file naming
// them.
func tinyDrives(t *testing.T, n int) (dir, list string) {
	t.Helper()
	dir = t.TempDir()
	var names []string
	for i := range n {
		d := filepath.Join(dir, fmt.Sprintf("drive%d", i))
		// Scripted drives without commands: 3 s is too short to fit an
		// actuator on, and the tune comparison below needs these drives'
		// spread of gap costs.
		cfg := simdrive.Config{Width: 160, Height: 90, FPS: 30, DurationS: 3, SpeedMps: 8, Seed: int64(i + 1), PanYawRateRps: 0.3 * float64(i%2), NoCommands: true}
		if err := simdrive.Generate(context.Background(), cfg, d, nil); err != nil {
			t.Fatal(err)
		}
		names = append(names, d)
	}
	list = filepath.Join(dir, "drives.txt")
	if err := os.WriteFile(list, []byte("# drives for the shard test\n"+strings.Join(names, "\n")+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	return dir, list
}

// runShards runs count shards of "stopgap args..." at once, shard 0
// through $JOB_COMPLETION_INDEX and the others through --shard-index, and
// returns their output directories.
func runShards(t *testing.T, base string, count int, args ...string) []string {
	t.Helper()
	dirs := make([]string, count)
	var wg sync.WaitGroup
	for i := range count {
		dirs[i] = filepath.Join(base, fmt.Sprintf("shard%d", i))
		a := append(slices.Clone(args), "--out", dirs[i], "--shard-count", fmt.Sprint(count))
		var env []string
		if i == 0 {
			env = []string{jobIndexEnv + "=0"}
		} else {
			a = append(a, "--shard-index", fmt.Sprint(i))
		}
		wg.Add(1)
		go func() {
			defer wg.Done()
			if out, ok := stopgapProc(t, env, a...); !ok {
				t.Errorf("shard %d failed:\n%s", i, out)
			}
		}()
	}
	wg.Wait()
	if t.Failed() {
		t.FailNow()
	}
	return dirs
}

// dropSynth removes the wall-clock synthesis times from a decoded JSON
// value: they are measured, not computed, and differ between any two runs.
func dropSynth(v any) any {
	switch x := v.(type) {
	case map[string]any:
		for k, e := range x {
			if strings.HasPrefix(k, "synth_ms") {
				delete(x, k)
				continue
			}
			x[k] = dropSynth(e)
		}
	case []any:
		for i, e := range x {
			x[i] = dropSynth(e)
		}
	}
	return v
}

// comparable returns a file's content with the synthesis times taken out
// (JSON fields synth_ms*, the ticks.csv column synth_ms, the report line
// "synthesis time"); other files are returned as they are.
func comparable(t *testing.T, path string) []byte {
	t.Helper()
	b, err := os.ReadFile(path)
	if err != nil {
		t.Fatal(err)
	}
	switch {
	case strings.HasSuffix(path, ".json"):
		var v any
		if err := json.Unmarshal(b, &v); err != nil {
			t.Fatalf("%s: %v", path, err)
		}
		out, _ := json.MarshalIndent(dropSynth(v), "", " ")
		return out
	case filepath.Base(path) == bench.TicksFile:
		recs, err := csv.NewReader(bytes.NewReader(b)).ReadAll()
		if err != nil {
			t.Fatalf("%s: %v", path, err)
		}
		col := slices.Index(recs[0], "synth_ms")
		var buf bytes.Buffer
		w := csv.NewWriter(&buf)
		for _, r := range recs {
			r[col] = "-"
			w.Write(r)
		}
		w.Flush()
		return buf.Bytes()
	case strings.HasSuffix(path, ".html"):
		var keep []string
		for _, l := range strings.Split(string(b), "\n") {
			if !strings.Contains(l, "synthesis time") {
				keep = append(keep, l)
			}
		}
		return []byte(strings.Join(keep, "\n"))
	}
	return b
}

// compareTrees fails unless a and b hold the same files with the same
// contents (see comparable); it returns how many files it compared.
func compareTrees(t *testing.T, a, b string, exact bool) int {
	t.Helper()
	files := func(root string) []string {
		var out []string
		filepath.WalkDir(root, func(p string, d os.DirEntry, err error) error {
			if err == nil && !d.IsDir() {
				rel, _ := filepath.Rel(root, p)
				out = append(out, rel)
			}
			return err
		})
		return out
	}
	fa, fb := files(a), files(b)
	if !slices.Equal(fa, fb) {
		t.Fatalf("%s holds %v\n%s holds %v", a, fa, b, fb)
	}
	for _, f := range fa {
		var x, y []byte
		if exact {
			x, _ = os.ReadFile(filepath.Join(a, f))
			y, _ = os.ReadFile(filepath.Join(b, f))
		} else {
			x, y = comparable(t, filepath.Join(a, f)), comparable(t, filepath.Join(b, f))
		}
		if !bytes.Equal(x, y) {
			t.Errorf("%s differs between the single process and the merged shards", f)
		}
	}
	return len(fa)
}

// TestReplayShardsMatchSingleProcess: 4 drives replayed in 3 shards, each
// its own process, and merged, give the report of one process over the
// same list: every file byte for byte, except the wall-clock synthesis
// times (summary fields synth_ms_*, ticks.csv column synth_ms, the
// report's "synthesis time" line), which are left out of the comparison.
// Bad merges (a missing shard, a duplicate, another drive list, other
// settings) fail naming the shard and leave no output.
func TestReplayShardsMatchSingleProcess(t *testing.T) {
	dir, list := tinyDrives(t, 4)
	args := []string{"replay", "--drives-file", list, "--frame-loss-rate", "0.3", "--burst-ms", "150", "--seed", "3", "--examples", "2", "--quiet"}
	single := filepath.Join(dir, "single")
	if out, ok := stopgapProc(t, nil, append(slices.Clone(args), "--out", single)...); !ok {
		t.Fatalf("single-process replay failed:\n%s", out)
	}
	shards := runShards(t, dir, 3, args...)
	merged := filepath.Join(dir, "merged")
	out, ok := stopgapProc(t, nil, "merge", "--out", merged, "--shard", shards[2], "--shard", shards[0], "--shard", shards[1])
	if !ok {
		t.Fatalf("merge failed:\n%s", out)
	}
	n := compareTrees(t, single, merged, false)
	var rep bench.DrivesReport
	b, _ := os.ReadFile(filepath.Join(merged, bench.DrivesReportFile))
	if err := json.Unmarshal(b, &rep); err != nil {
		t.Fatal(err)
	}
	if len(rep.Results) != 4 || rep.Pooled.TicksMissing == 0 || rep.Pooled.Methods.Predicted.Frames == 0 {
		t.Fatalf("merged report has %d drives, %d missing ticks, %d scored: the comparison would be empty", len(rep.Results), rep.Pooled.TicksMissing, rep.Pooled.Methods.Predicted.Frames)
	}
	t.Logf("%d files equal; pooled: %d ticks, %d missing, %d PREDICTED, shown PSNR %.4f dB", n, rep.Pooled.TicksTotal, rep.Pooled.TicksMissing,
		rep.Pooled.PredictedTicks, float64(rep.Pooled.Methods.Predicted.PSNRdBMean))

	// A shard run with other settings.
	other := filepath.Join(dir, "other-seed")
	if out, ok := stopgapProc(t, nil, append(slices.Clone(args), "--seed", "4", "--out", other, "--shard-count", "3", "--shard-index", "2")...); !ok {
		t.Fatalf("shard with another seed failed:\n%s", out)
	}
	// A shard from another drive list: shard 2's manifest naming the drives in another order.
	otherList := filepath.Join(dir, "other-list")
	if err := os.CopyFS(otherList, os.DirFS(shards[2])); err != nil {
		t.Fatal(err)
	}
	var man bench.ShardManifest
	mb, _ := os.ReadFile(filepath.Join(otherList, bench.ShardFile))
	json.Unmarshal(mb, &man)
	man.Drives[0], man.Drives[1] = man.Drives[1], man.Drives[0]
	mb, _ = json.Marshal(man)
	os.WriteFile(filepath.Join(otherList, bench.ShardFile), mb, 0o644)
	notAShard := filepath.Join(dir, "drive0")

	for _, c := range []struct {
		name  string
		dirs  []string
		wants []string
	}{
		{"missing", []string{shards[0], shards[1]}, []string{"shard(s) 2 of 3 missing"}},
		{"duplicate", []string{shards[0], shards[1], shards[1], shards[2]}, []string{shards[1], "are both shard 1 of 3"}},
		{"other settings", []string{shards[0], shards[1], other}, []string{other, "other settings", "seed"}},
		{"other drive list", []string{shards[0], shards[1], otherList}, []string{otherList, "another drive list", "drive 1 is"}},
		{"not a shard", []string{shards[0], shards[1], notAShard}, []string{notAShard, "has no shard.json"}},
	} {
		t.Run(c.name, func(t *testing.T) {
			dest := filepath.Join(dir, "bad-"+strings.ReplaceAll(c.name, " ", "-"))
			a := []string{"merge", "--out", dest}
			for _, d := range c.dirs {
				a = append(a, "--shard", d)
			}
			out, ok := stopgapProc(t, nil, a...)
			if ok {
				t.Fatalf("merge succeeded:\n%s", out)
			}
			for _, w := range c.wants {
				if !strings.Contains(out, w) {
					t.Errorf("error lacks %q:\n%s", w, out)
				}
			}
			ents, _ := os.ReadDir(dir)
			for _, e := range ents {
				if strings.HasPrefix(e.Name(), "bad-") || strings.HasPrefix(e.Name(), ".bad-") {
					t.Errorf("a failed merge left %s", e.Name())
				}
			}
		})
	}
}

// TestTuneShardsMatchSingleProcess: tuning over 4 drives in 3 shards, each
// its own process, merged, writes the same tuning report as one process,
// byte for byte (it holds no wall-clock figure), bootstrap interval
// included (fixed seed).
func TestTuneShardsMatchSingleProcess(t *testing.T) {
	dir, list := tinyDrives(t, 4)
	args := []string{"tune", "--drives-file", list, "--frame-loss-rate", "0.3", "--burst-ms", "70", "--seed", "5",
		"--max-misalign-mrad", "3", "--resamples", "300", "--quiet"}
	single := filepath.Join(dir, "single")
	if out, ok := stopgapProc(t, nil, append(slices.Clone(args), "--out", single)...); !ok {
		t.Fatalf("single-process tune failed:\n%s", out)
	}
	shards := runShards(t, dir, 3, args...)
	merged := filepath.Join(dir, "merged")
	out, ok := stopgapProc(t, nil, "merge", "--out", merged, "--shard", shards[1], "--shard", shards[2], "--shard", shards[0])
	if !ok {
		t.Fatalf("merge failed:\n%s", out)
	}
	n := compareTrees(t, single, merged, true)
	var res bench.TuneResult
	b, _ := os.ReadFile(filepath.Join(merged, bench.TuneJSONFile))
	if err := json.Unmarshal(b, &res); err != nil {
		t.Fatal(err)
	}
	// The settings are chosen so that the resamples disagree: an interval
	// of one value would compare little of the bootstrap.
	if len(res.Drives) != 4 || !res.Enough || math.IsNaN(float64(res.Recommended)) || !(res.CILow < res.CIHigh) {
		t.Fatalf("no recommendation with a spread bootstrap to compare (%d drives, %d gaps, interval [%v, %v], %s)",
			len(res.Drives), res.Gaps, float64(res.CILow), float64(res.CIHigh), res.Reason)
	}
	t.Logf("%d files equal byte for byte; %d gaps, recommended %.2f, interval [%v, %v] over %d resamples",
		n, res.Gaps, float64(res.Recommended), float64(res.CILow), float64(res.CIHigh), res.Resamples)

	// A replay shard does not merge with tune shards.
	rs := filepath.Join(dir, "replay-shard")
	if out, ok := stopgapProc(t, nil, "replay", "--drives-file", list, "--quiet", "--examples", "0", "--shard-count", "3", "--shard-index", "2", "--out", rs); !ok {
		t.Fatalf("replay shard failed:\n%s", out)
	}
	out, ok = stopgapProc(t, nil, "merge", "--out", filepath.Join(dir, "mixed"), "--shard", shards[0], "--shard", shards[1], "--shard", rs)
	if ok || !strings.Contains(out, "is a replay shard but") {
		t.Errorf("merging a replay shard into tune shards: ok=%v\n%s", ok, out)
	}
}

// TestShardFlags: the shard comes from --shard-index, else from
// $JOB_COMPLETION_INDEX, and inconsistent flags are refused.
func TestShardFlags(t *testing.T) {
	for _, c := range []struct {
		name         string
		index, count int
		env          string
		want         bench.Shard
		err          string
	}{
		{"no sharding", -1, 0, "2", bench.Shard{}, ""},
		{"flag", 1, 3, "", bench.Shard{Index: 1, Count: 3}, ""},
		{"flag over env", 1, 3, "2", bench.Shard{Index: 1, Count: 3}, ""},
		{"env", -1, 3, "2", bench.Shard{Index: 2, Count: 3}, ""},
		{"neither", -1, 3, "", bench.Shard{}, "needs --shard-index or $JOB_COMPLETION_INDEX"},
		{"bad env", -1, 3, "two", bench.Shard{}, `$JOB_COMPLETION_INDEX="two"`},
		{"index too large", -1, 3, "3", bench.Shard{}, "shard index 3 of 3"},
		{"index without count", 1, 0, "", bench.Shard{}, "--shard-index 1 needs --shard-count"},
		{"negative count", -1, -2, "", bench.Shard{}, "--shard-count -2"},
	} {
		t.Run(c.name, func(t *testing.T) {
			f := shardFlags{index: c.index, count: c.count}
			got, err := f.shard(func(k string) string {
				if k == jobIndexEnv {
					return c.env
				}
				return ""
			})
			if c.err != "" {
				if err == nil || !strings.Contains(err.Error(), c.err) {
					t.Fatalf("got %+v, %v; want an error with %q", got, err, c.err)
				}
				return
			}
			if err != nil || got != c.want {
				t.Fatalf("got %+v, %v; want %+v", got, err, c.want)
			}
		})
	}
}
