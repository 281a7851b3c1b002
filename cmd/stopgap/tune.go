package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"
	"strings"
	"time"

	"stopgap/bench"
	"stopgap/stream/operator"
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
	fs.Float64Var(&minCut, "min-cutoff", -1, "lowest cutoff to sweep and recommend, within the policy (default: the policy's min_cutoff)")
	fs.Float64Var(&maxCut, "max-cutoff", -1, "highest cutoff to sweep and recommend, within the policy (default: the policy's max_cutoff)")
	policyPath := fs.String("policy", operator.DefaultPolicyPath, "administrator's policy `file`: its min_cutoff and max_cutoff bound the sweep (missing at the default path: built-in conservative defaults)")
	storePath := fs.String("operators", operator.DefaultStorePath(), "operator profile store `file` for --operator (also $"+operator.StoreEnv+")")
	opName := fs.String("operator", "", "record the recommendation as a proposal in this operator's profile history (apply it with: stopgap operator apply NAME)")
	runID := fs.String("run", "", "name of this tuning run, recorded with the proposal (default tune-<UTC time>)")
	fs.IntVar(&resamples, "resamples", bench.DefaultTuneResamples, "bootstrap resamples (whole gaps)")
	fs.IntVar(&parallel, "parallel", 0, "drives replayed at once (0 = number of CPUs)")
	fs.BoolVar(&ownArrivals, "recorded-arrivals", false, "replay each drive with its own recorded link, DIR/arrivals.csv, instead of the loss model")
	var rf replayFlags
	rf.register(fs)
	var sf shardFlags
	sf.register(fs)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap tune --drive DIR [--drive DIR...] --out DIR [tolerance] [--policy FILE] [--operator NAME] [flags]")
		fmt.Fprintln(stderr, "\nReplays every drive once, sweeps the confidence cutoff over the missing ticks")
		fmt.Fprintln(stderr, "and recommends the lowest cutoff meeting one tolerance, with a bootstrap interval")
		fmt.Fprintln(stderr, "over whole gaps. The replay flags (--frame-loss-rate, --arrivals, ...) apply to every drive;")
		fmt.Fprintln(stderr, "--cutoff is ignored (every cutoff within the administrator's policy is swept).")
		fmt.Fprintln(stderr, "With --operator NAME the recommendation is recorded as a proposal in that profile's")
		fmt.Fprintln(stderr, "history; apply it with: stopgap operator apply NAME.")
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
	explicit := false
	fs.Visit(func(f *flag.Flag) { explicit = explicit || f.Name == "policy" })
	pol, err := operator.LoadPolicy(*policyPath, explicit)
	if err != nil {
		return err
	}
	minCut, maxCut, err = tuneRange(pol, minCut, maxCut)
	if err != nil {
		return err
	}
	// The predicted frames tuned here may be no older than the relay will
	// show them: the policy's horizon unless --max-age-ms asks for less.
	ageGiven := false
	fs.Visit(func(f *flag.Flag) { ageGiven = ageGiven || f.Name == "max-age-ms" })
	if !ageGiven {
		rf.maxAgeMs = pol.MaxHorizonMs
	}
	if err := pol.CheckHorizonMs(rf.maxAgeMs); err != nil {
		return fmt.Errorf("--max-age-ms: %w", err)
	}
	var store *operator.Store
	if *opName != "" {
		// Refuse before hours of replay: the tune actor must be allowed to
		// propose, and the profile must exist.
		if err := pol.CheckAllowed(operator.ActorTune, operator.ActionPropose); err != nil {
			return err
		}
		store = operator.NewStore(*storePath)
		snap, err := store.Load()
		if err != nil {
			return fmt.Errorf("--operators %s: %w", *storePath, err)
		}
		if snap.Find(*opName) < 0 {
			return fmt.Errorf("--operator: %w %q in %s; add it first with: stopgap operator add", operator.ErrUnknownProfile, *opName, *storePath)
		}
	}
	cfg := bench.TuneConfig{Tolerance: tol, Cutoffs: bench.TuneCutoffsWithin(minCut, maxCut), MinCutoff: minCut, MaxCutoff: maxCut, Resamples: resamples, Seed: rf.seed, Parallel: parallel}
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
	rec := float64(res.Recommended)
	if rec == rec {
		// The sweep stays within the policy; this is the last guard.
		if err := pol.CheckCutoff(rec); err != nil {
			return fmt.Errorf("the recommended cutoff %g is refused, no report written: %w", rec, err)
		}
	}
	if err := bench.WriteTuneReport(out, res, rf.overwrite); err != nil {
		return err
	}
	printTune(stdout, res, out)
	if store == nil {
		return nil
	}
	if rec != rec {
		fmt.Fprintf(stdout, "nothing proposed for %s\n", *opName)
		return nil
	}
	id := *runID
	if id == "" {
		id = "tune-" + time.Now().UTC().Format("20060102T150405Z")
	}
	why := fmt.Sprintf("tune over %d drives, %d gaps: %s; 95%% interval %s to %s (report %s)",
		len(drives), res.Gaps, tolText(tol), fmtNum(res.CILow), fmtNum(res.CIHigh), out)
	ed := operator.Editor{Store: store, Policy: pol, Actor: operator.ActorTune, User: loginName()}
	snap, err := ed.Propose(*opName, rec, id, why)
	if err != nil {
		return fmt.Errorf("the recommended cutoff was not recorded (the report in %s stays): %w", out, err)
	}
	p := snap.Profiles[snap.Find(*opName)]
	fmt.Fprintf(stdout, "proposal #%d recorded in %s's history (run %s); apply it with: stopgap operator apply %s\n",
		p.History[len(p.History)-1].Seq, *opName, id, *opName)
	return nil
}

// tolText names the one tolerance set in tol.
func tolText(tol bench.TuneTolerance) string {
	switch {
	case tol.MinSSIM > 0:
		return fmt.Sprintf("min SSIM %g", tol.MinSSIM)
	case tol.MaxMisalignMrad > 0:
		return fmt.Sprintf("max misalignment %g mrad", tol.MaxMisalignMrad)
	}
	return fmt.Sprintf("max harm rate %g", tol.MaxHarmRate)
}

// tuneRange returns the cutoff range to sweep: the policy's limits,
// narrowed by --min-cutoff/--max-cutoff (negative: not given). A flag
// beyond the policy is refused with the policy's message (limit and file).
func tuneRange(pol operator.Policy, lo, hi float64) (float64, float64, error) {
	if lo < 0 {
		lo = pol.MinCutoff
	} else if err := pol.CheckCutoff(lo); err != nil {
		return 0, 0, fmt.Errorf("--min-cutoff: %w", err)
	}
	if hi < 0 {
		hi = pol.MaxCutoff
	} else if err := pol.CheckCutoff(hi); err != nil {
		return 0, 0, fmt.Errorf("--max-cutoff: %w", err)
	}
	if lo > hi {
		return 0, 0, fmt.Errorf("--min-cutoff %g is above --max-cutoff %g: %w", lo, hi, bench.ErrTuneInput)
	}
	return lo, hi, nil
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
