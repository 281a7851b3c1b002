package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strconv"

	"stopgap/bench"
)

// jobIndexEnv is the variable in which a Kubernetes Indexed Job gives each
// pod its completion index.
const jobIndexEnv = "JOB_COMPLETION_INDEX"

// shardFlags are the drive-list and shard flags of replay and tune.
type shardFlags struct {
	drivesFile   string
	index, count int
}

func (f *shardFlags) register(fs *flag.FlagSet) {
	fs.StringVar(&f.drivesFile, "drives-file", "", "`file` listing recording directories, one per line (# comments), added after any --drive")
	fs.IntVar(&f.count, "shard-count", 0, "split the drive list into this many shards (drive i goes to shard i mod count) and write this shard's output for \"stopgap merge\"; 0 = no sharding")
	fs.IntVar(&f.index, "shard-index", -1, "this process's shard in [0, --shard-count); default $"+jobIndexEnv+" (set by a Kubernetes Indexed Job)")
}

// drives returns the --drive values followed by the --drives-file entries.
func (f *shardFlags) drives(given []string) ([]string, error) {
	out := append([]string(nil), given...)
	if f.drivesFile == "" {
		return out, nil
	}
	fh, err := os.Open(f.drivesFile)
	if err != nil {
		return nil, fmt.Errorf("--drives-file: %w", err)
	}
	defer fh.Close()
	list, err := bench.ReadDriveList(fh, f.drivesFile)
	if err != nil {
		return nil, err
	}
	return append(out, list...), nil
}

// shard returns the selected shard (zero when not sharding), taking the
// index from getenv(JOB_COMPLETION_INDEX) when --shard-index is not given.
func (f *shardFlags) shard(getenv func(string) string) (bench.Shard, error) {
	if f.count == 0 {
		if f.index != -1 {
			return bench.Shard{}, fmt.Errorf("--shard-index %d needs --shard-count", f.index)
		}
		return bench.Shard{}, nil
	}
	if f.count < 0 {
		return bench.Shard{}, fmt.Errorf("--shard-count %d: want a count >= 1", f.count)
	}
	idx := f.index
	if idx == -1 {
		v := getenv(jobIndexEnv)
		if v == "" {
			return bench.Shard{}, fmt.Errorf("--shard-count %d needs --shard-index or $%s", f.count, jobIndexEnv)
		}
		n, err := strconv.Atoi(v)
		if err != nil {
			return bench.Shard{}, fmt.Errorf("$%s=%q: want a shard index", jobIndexEnv, v)
		}
		idx = n
	}
	s := bench.Shard{Index: idx, Count: f.count}
	if err := s.Validate(); err != nil {
		return bench.Shard{}, fmt.Errorf("--shard-index/--shard-count: %w", err)
	}
	return s, nil
}

// runMerge merges shard outputs into one report.
func runMerge(_ context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("merge", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var out string
	var overwrite bool
	var shards driveList
	fs.Var(&shards, "shard", "output `directory` of one shard; repeat for every shard (required)")
	fs.StringVar(&out, "out", "", "report `directory` to create (required)")
	fs.BoolVar(&overwrite, "overwrite", false, "replace an existing non-empty --out directory")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap merge --shard DIR --shard DIR... --out DIR")
		fmt.Fprintln(stderr, "\nChecks that the directories are the outputs of every shard of one replay or tune run")
		fmt.Fprintln(stderr, "(--shard-index 0..--shard-count-1, same drives, same flags) and writes the report a")
		fmt.Fprintln(stderr, "single process would have written over the whole drive list.")
		fmt.Fprintln(stderr)
		fs.PrintDefaults()
	}
	if err := parse(fs, args); err != nil {
		return err
	}
	if out == "" || len(shards) == 0 {
		fmt.Fprintln(stderr, "stopgap merge: --out and at least one --shard are required")
		fs.Usage()
		return errUsage
	}
	m, err := bench.MergeShards(shards, out, overwrite)
	if err != nil {
		return err
	}
	if m.Kind == bench.KindTune {
		printTune(stdout, m.Tune, out)
		return nil
	}
	printDrives(stdout, m.Replay, out)
	return nil
}

// printDrives prints one line per drive and the pooled summary.
func printDrives(w io.Writer, r bench.DrivesReport, out string) {
	for _, d := range r.Results {
		fmt.Fprintf(w, "drive %d: %s: %s\n", d.Index+1, d.Drive, filepath.Join(out, d.Dir, bench.HTMLFile))
	}
	fmt.Fprintf(w, "pooled over %d drives:\n", len(r.Drives))
	printSummaryBody(w, r.Pooled)
	fmt.Fprintf(w, "report: %s\n", filepath.Join(out, bench.DrivesReportFile))
}

// tuneShard replays a tune shard's drives and writes its output.
func tuneShard(ctx context.Context, cfg bench.TuneConfig, shard bench.Shard, out string, overwrite bool, stdout io.Writer) error {
	m, err := bench.TuneShard(ctx, cfg, shard, out, overwrite)
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "shard %d of %d: %d of %d drives replayed into %s; merge all shards with: stopgap merge --shard DIR... --out DIR\n",
		shard.Index, shard.Count, len(m.Done), len(m.Drives), out)
	return nil
}
