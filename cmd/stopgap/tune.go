package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"

	"stopgap/bench"
)

// driveList collects a repeated --drive flag.
type driveList []string

func (d *driveList) String() string     { return strings.Join(*d, ",") }
func (d *driveList) Set(v string) error { *d = append(*d, v); return nil }

func runTune(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("tune", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var drives driveList
	var out string
	var tol bench.TuneTolerance
	var minCut, maxCut float64
	var resamples, parallel int
	var ownArrivals bool
	fs.Var(&drives, "drive", "recording `directory` to replay; repeat for several drives (required)")
	fs.StringVar(&out, "out", "", "tuning report `directory` to create (required)")
	fs.Float64Var(&tol.MaxHarmRate, "max-harm-rate", 0, "tolerance: largest share of PREDICTED ticks worse than hold by > 1 dB PSNR, (0,1) (default 0.05 when no tolerance is given)")
	fs.Float64Var(&tol.MinSSIM, "min-ssim", 0, "tolerance: least mean SSIM of what is shown on missing ticks, (0,1)")
	fs.Float64Var(&tol.MaxMisalignMrad, "max-misalign-mrad", 0, "tolerance: largest mean misalignment of PREDICTED ticks, mrad")
	fs.Float64Var(&minCut, "min-cutoff", 0, "lowest cutoff that may be recommended (an administrator's limit)")
	fs.Float64Var(&maxCut, "max-cutoff", 1, "highest cutoff that may be recommended (an administrator's limit)")
	fs.IntVar(&resamples, "resamples", bench.DefaultTuneResamples, "bootstrap resamples (whole gaps)")
	fs.IntVar(&parallel, "parallel", 0, "drives replayed at once (0 = number of CPUs)")
	fs.BoolVar(&ownArrivals, "recorded-arrivals", false, "replay each drive with its own recorded link, DIR/arrivals.csv, instead of the loss model")
	var rf replayFlags
	rf.register(fs)
	var sf shardFlags
	sf.register(fs)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap tune --drive DIR [--drive DIR...] --out DIR [tolerance] [flags]")
		fmt.Fprintln(stderr, "\nReplays every drive once, sweeps the confidence cutoff over the missing ticks")
		fmt.Fprintln(stderr, "and recommends the lowest cutoff meeting one tolerance, with a bootstrap interval")
		fmt.Fprintln(stderr, "over whole gaps. The replay flags (--loss-rate, --arrivals, ...) apply to every drive;")
		fmt.Fprintln(stderr, "--cutoff is ignored (every cutoff is swept).")
		fmt.Fprintln(stderr)
		fs.PrintDefaults()
	}
	if err := parse(fs, args); err != nil {
		return err
	}
	drives, err := sf.drives(drives)
	if err != nil {
		return err
	}
	shard, err := sf.shard(os.Getenv)
	if err != nil {
		return err
	}
	if len(drives) == 0 || out == "" {
		fmt.Fprintln(stderr, "stopgap tune: at least one --drive and --out are required")
		fs.Usage()
		return errUsage
	}
	if tol == (bench.TuneTolerance{}) {
		tol.MaxHarmRate = 0.05
	}
	cfg := bench.TuneConfig{Tolerance: tol, MinCutoff: minCut, MaxCutoff: maxCut, Resamples: resamples, Seed: rf.seed, Parallel: parallel}
	if resamples <= 0 {
		return fmt.Errorf("--resamples %d: want a count > 0", resamples)
	}
	if !rf.overwrite {
		if err := checkEmptyOut(out); err != nil {
			return err
		}
	}
	if rf.arrivals != "" && len(drives) > 1 {
		return fmt.Errorf("--arrivals names one drive's file but %d drives were given; use --recorded-arrivals to replay each drive with its own arrivals.csv", len(drives))
	}
	for _, d := range drives {
		rc, err := rf.config(d, "", stderr)
		if err != nil {
			return err
		}
		if ownArrivals {
			rc.ArrivalsFile = filepath.Join(d, "arrivals.csv")
		}
		rc.Progress = nil
		cfg.Drives = append(cfg.Drives, rc)
	}
	if !rf.quiet {
		cfg.Progress = progressBar(stderr, "tune")
	}
	fmt.Fprintln(stderr, safetyCaution)
	if shard.Count > 0 {
		return tuneShard(ctx, cfg, shard, out, rf.overwrite, stdout)
	}
	res, err := bench.Tune(ctx, cfg)
	if err != nil {
		return err
	}
	if err := bench.WriteTuneReport(out, res, rf.overwrite); err != nil {
		return err
	}
	printTune(stdout, res, out)
	return nil
}

// checkEmptyOut refuses an existing non-empty directory before any work.
func checkEmptyOut(out string) error {
	if ents, err := readDirNames(out); err == nil && len(ents) > 0 {
		return fmt.Errorf("--out %s exists and is not empty; choose another directory or pass --overwrite: %w", out, bench.ErrDestExists)
	}
	return nil
}

func printTune(w io.Writer, r bench.TuneResult, out string) {
	fmt.Fprintf(w, "%6s %7s %9s %8s %9s %9s %9s %8s %9s %5s\n", "cutoff", "missing", "PREDICTED", "coverage", "harm", "harm", "shown", "shown", "misalign", "meets")
	fmt.Fprintf(w, "%6s %7s %9s %8s %9s %9s %9s %8s %9s %5s\n", "", "", "", "", "PSNR", "SSIM", "PSNR dB", "SSIM", "mrad", "")
	for _, p := range r.Points {
		mark := ""
		if float64(r.Recommended) == p.Cutoff {
			mark = " <- recommended"
		}
		fmt.Fprintf(w, "%6.2f %7d %9d %8.3f %9.3f %9.3f %9.2f %8.4f %9.2f %5v%s\n", p.Cutoff, p.Missing, p.Predicted,
			float64(p.Coverage), float64(p.HarmRatePSNR), float64(p.HarmRateSSIM), float64(p.ShownPSNRdB), float64(p.ShownSSIM),
			float64(p.MisalignMrad), p.Meets, mark)
	}
	if r.Reason != "" {
		fmt.Fprintf(w, "NO RECOMMENDATION: %s\n", r.Reason)
	} else {
		fmt.Fprintf(w, "recommended cutoff %.2f, 95 %% bootstrap interval [%s, %s] over %d resamples of whole %s (%d gaps)\n",
			float64(r.Recommended), fmtNum(r.CILow), fmtNum(r.CIHigh), r.Resamples, r.Bootstrap, r.Gaps)
	}
	fmt.Fprintf(w, "report: %s\n", filepath.Join(out, bench.TuneHTMLFile))
}

func fmtNum(f bench.Float) string {
	if v := float64(f); v == v {
		return fmt.Sprintf("%.2f", v)
	}
	return "none (too often no cutoff met the tolerance)"
}

func readDirNames(dir string) ([]string, error) {
	ents, err := os.ReadDir(dir)
	names := make([]string, 0, len(ents))
	for _, e := range ents {
		names = append(names, e.Name())
	}
	return names, err
}
