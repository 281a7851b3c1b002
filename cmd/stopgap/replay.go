package main

import (
	"context"
	"encoding/json"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"strings"

	"stopgap/bench"
	"stopgap/bench/simdrive"
	"stopgap/filter"
	"stopgap/internal/lossmodel"
	"stopgap/predictor"
)

// replayFlags are the flags shared by "replay" and the offline demo.
type replayFlags struct {
	arrivals             string
	pairToleranceMs      float64
	lossRate, burstMs    float64
	seed                 uint64
	delayMs, jitterMs    float64
	cutoff, maxAgeMs     float64
	allowanceMs          float64
	model                string
	wheelbaseM           float64
	examples             int
	overwrite, quiet     bool
	logJSON, verboseLogs bool
	telemetryOwn         bool
	telemetryLoss        float64
	toleranceMrad        float64
	motion               string
	lead                 bool
	noCommands           bool
	commandDelayMs       float64
	steerLagS, speedLagS float64
	compareSources       bool
}

func (f *replayFlags) register(fs *flag.FlagSet) {
	pol := predictor.DefaultPolicy()
	fs.StringVar(&f.arrivals, "arrivals", "", "recorded arrivals `file` (index,t_arrival_us; blank = never arrived); overrides the loss model;\na live session's arrivals.csv with an onboard --drive replays the session on the vehicle's own frames")
	fs.Float64Var(&f.pairToleranceMs, "pair-tolerance-ms", 0, "capture-time tolerance pairing a session with an onboard recording, ms (0 = a quarter frame period)")
	fs.Float64Var(&f.lossRate, "frame-loss-rate", 0.1, "long-run share of video frames lost by the Gilbert-Elliott model, [0,1) (frames, not packets)")
	deprecatedAlias(fs, "loss-rate", "frame-loss-rate")
	fs.Float64Var(&f.burstMs, "burst-ms", 200, "mean duration of a loss burst, ms")
	fs.Uint64Var(&f.seed, "seed", 1, "seed of the loss model")
	fs.Float64Var(&f.delayMs, "delay-ms", 0, "fixed extra one-way delay of every frame, ms")
	fs.Float64Var(&f.jitterMs, "jitter-ms", 0, "uniform extra delay of each frame in [0, jitter), ms")
	fs.Float64Var(&f.cutoff, "cutoff", pol.CutoffConfidence, "confidence cutoff in [0,1]: below it a missing frame is shown STALE, not PREDICTED")
	fs.Float64Var(&f.maxAgeMs, "max-age-ms", pol.MaxAgeMs, "cap on the picture age of a predicted frame, ms: past it a missing frame is STALE")
	fs.Float64Var(&f.allowanceMs, "allowance-ms", bench.DefaultAllowanceMs, allowanceUsage)
	fs.StringVar(&f.model, "model", "", "motion model of the filter: ctrv or bicycle; empty: the bicycle driven by the operator's commands\nwhen the drive has them (controls.csv), else ctrv")
	fs.Float64Var(&f.wheelbaseM, "wheelbase-m", filter.DefaultWheelbaseM, "wheelbase for the bicycle model and steering telemetry, m")
	fs.IntVar(&f.examples, "examples", bench.DefaultExamples, "how many example ticks the report shows side by side")
	fs.BoolVar(&f.overwrite, "overwrite", false, "replace an existing non-empty --out directory")
	fs.BoolVar(&f.quiet, "quiet", false, "no progress bar")
	fs.BoolVar(&f.logJSON, "log-json", false, "write logs as JSON")
	fs.BoolVar(&f.verboseLogs, "v", false, "verbose logs (every rejected telemetry sample)")
	fs.BoolVar(&f.telemetryOwn, "telemetry-own-channel", false, "telemetry without recorded arrivals comes on its own channel (lost only at --telemetry-loss-rate) instead of sharing the fate of the video (default: shared, the conservative case)")
	fs.Float64Var(&f.telemetryLoss, "telemetry-loss-rate", 0, "share of telemetry samples lost on their own channel, [0,1); needs --telemetry-own-channel")
	fs.BoolVar(&f.lead, "lead", false, "also score latency compensation: every LIVE frame moved ahead by its age to the display time (labelled MOVED AHEAD), against the frame captured when it was shown; simulated links only")
	fs.StringVar(&f.motion, "motion", "telemetry", "sources of motion for the filter: telemetry, video (ego-motion from the frames, for a vehicle without telemetry), telemetry+video, or none")
	fs.BoolVar(&f.noCommands, "no-commands", false, "ignore the operator's commands (controls.csv): telemetry alone drives the filter")
	fs.Float64Var(&f.commandDelayMs, "command-delay-ms", 0, "uplink delay from the operator station to the vehicle's actuators, ms;\nwith --steer-lag-s and --speed-lag-s all 0 (default) the three are fitted from the drive")
	fs.Float64Var(&f.steerLagS, "steer-lag-s", 0, "time constant of the steering actuator's first-order lag, s (see --command-delay-ms)")
	fs.Float64Var(&f.speedLagS, "speed-lag-s", 0, "time constant of the speed's first-order lag, s (see --command-delay-ms)")
	fs.BoolVar(&f.compareSources, "compare-sources", false, evalSourcesHelp())
	fs.Float64Var(&f.toleranceMrad, "tolerance-mrad", predictor.DefaultToleranceMrad, "misalignment within which a predicted frame counts as good, mrad: the confidence is the probability of that")
}

func (f *replayFlags) config(drive, out string, stderr io.Writer) (bench.ReplayConfig, error) {
	var model filter.Model // empty: decided by the drive's commands
	if f.model != "" {
		var err error
		if model, err = filter.ParseModel(f.model); err != nil {
			return bench.ReplayConfig{}, fmt.Errorf("--model: %w", err)
		}
	}
	if !(f.commandDelayMs >= 0 && f.commandDelayMs <= 2000) || !(f.steerLagS >= 0 && f.steerLagS <= 10) || !(f.speedLagS >= 0 && f.speedLagS <= 10) {
		return bench.ReplayConfig{}, fmt.Errorf("--command-delay-ms %v, --steer-lag-s %v, --speed-lag-s %v: want 0..2000 ms and 0..10 s", f.commandDelayMs, f.steerLagS, f.speedLagS)
	}
	if f.cutoff < 0 || f.cutoff > 1 || f.cutoff != f.cutoff {
		return bench.ReplayConfig{}, fmt.Errorf("--cutoff %v: want a confidence in [0, 1]", f.cutoff)
	}
	if f.maxAgeMs < 0 || f.maxAgeMs != f.maxAgeMs {
		return bench.ReplayConfig{}, fmt.Errorf("--max-age-ms %v: want a duration >= 0", f.maxAgeMs)
	}
	if !(f.toleranceMrad > 0) {
		return bench.ReplayConfig{}, fmt.Errorf("--tolerance-mrad %v: want an angle > 0", f.toleranceMrad)
	}
	if !(f.telemetryLoss >= 0 && f.telemetryLoss < 1) || (f.telemetryLoss != 0 && !f.telemetryOwn) {
		return bench.ReplayConfig{}, fmt.Errorf("--telemetry-loss-rate %v: want a share in [0, 1), with --telemetry-own-channel", f.telemetryLoss)
	}
	motion, err := bench.ParseMotionSources(f.motion)
	if err != nil {
		return bench.ReplayConfig{}, fmt.Errorf("--motion: %w", err)
	}
	level := slog.LevelInfo
	if f.verboseLogs {
		level = slog.LevelDebug
	}
	cfg := bench.ReplayConfig{
		Drive: drive, Out: out, Overwrite: f.overwrite,
		ArrivalsFile: f.arrivals, PairToleranceMs: f.pairToleranceMs,
		Loss: lossmodel.Config{
			Model: lossmodel.GilbertElliott, LossRate: f.lossRate, BurstMs: f.burstMs,
			ExtraDelayMs: f.delayMs, JitterMs: f.jitterMs, Seed: f.seed,
		},
		Policy: predictor.Policy{CutoffConfidence: f.cutoff, MaxAgeMs: f.maxAgeMs},
		Filter: filter.Config{Model: model, WheelbaseM: f.wheelbaseM, Actuator: filter.Actuator{
			DelayUs: int64(math.Round(f.commandDelayMs * 1000)), SteerLagS: f.steerLagS, SpeedLagS: f.speedLagS}},
		NoCommands:  f.noCommands,
		AllowanceMs: f.allowanceMs,
		Telemetry:   bench.TelemetryLink{Own: f.telemetryOwn, LossRate: f.telemetryLoss, Seed: f.seed},
		Confidence:  predictor.ConfidenceModel{ToleranceMrad: f.toleranceMrad},
		Motion:      motion,
		Lead:        f.lead,
		Examples:    f.examples,
		Logger:      newLogger(stderr, f.logJSON, level),
	}
	if f.lossRate == 0 {
		cfg.Loss = lossmodel.Config{Model: lossmodel.None, ExtraDelayMs: f.delayMs, JitterMs: f.jitterMs, Seed: f.seed}
	}
	if f.examples == 0 {
		cfg.Examples = -1
	}
	if !f.quiet {
		cfg.Progress = progressBar(stderr, "replay")
	}
	return cfg, nil
}

func runReplay(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("replay", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var drives driveList
	var out string
	fs.Var(&drives, "drive", "recording `directory` to replay; repeat for several drives (required, or --drives-file)")
	fs.StringVar(&out, "out", "", "report `directory` to create (required)")
	var rf replayFlags
	rf.register(fs)
	var sf shardFlags
	sf.register(fs)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap replay --drive DIR [--drive DIR... | --drives-file FILE] --out DIR [--shard-index I --shard-count N] [flags]")
		fmt.Fprintln(stderr, "\nReplays a recording on a virtual display clock, with drops from --arrivals or")
		fmt.Fprintln(stderr, "from a Gilbert-Elliott loss model, and scores hold, rotation and predicted")
		fmt.Fprintln(stderr, "against the true frame of every tick the operator would have missed.")
		fmt.Fprintln(stderr, "Several drives give one report per drive and a pooled summary (drives.json);")
		fmt.Fprintln(stderr, "with --shard-count each process replays its share and \"stopgap merge\" joins them.")
		fmt.Fprintln(stderr)
		fs.PrintDefaults()
	}
	if err := parse(fs, args); err != nil {
		return err
	}
	list, err := sf.drives(drives)
	if err != nil {
		return err
	}
	if len(list) == 0 || out == "" {
		fmt.Fprintln(stderr, "stopgap replay: --drive and --out are required (--drives-file may list the drives)")
		fs.Usage()
		return errUsage
	}
	shard, err := sf.shard(os.Getenv)
	if err != nil {
		return err
	}
	if len(drives) != 1 || sf.drivesFile != "" || shard.Count > 0 {
		return replayDrives(ctx, list, shard, out, &rf, stdout, stderr)
	}
	cfg, err := rf.config(list[0], out, stderr)
	if err != nil {
		return err
	}
	fmt.Fprintln(stderr, safetyCaution)
	sum, err := bench.Replay(ctx, cfg)
	if err != nil {
		return err
	}
	printSummary(stdout, sum, out)
	if rf.compareSources {
		return compareSources(ctx, cfg, out, stdout)
	}
	return nil
}

// evalSourcesHelp is the help of --compare-sources, naming its rows.
func evalSourcesHelp() string {
	var names []string
	for _, s := range bench.EvalSources() {
		names = append(names, s.Name)
	}
	return "also replay once per source of motion (" + strings.Join(names, ", ") + ",\nand " +
		bench.ExactMotionSource.Name + " when the drive has truth.csv) and per telemetry link\n(once for a source without telemetry), and print the table (sources.json in --out)"
}

// compareSources runs the evaluation table on cfg's drive, prints it and
// writes it to out/sources.json.
func compareSources(ctx context.Context, cfg bench.ReplayConfig, out string, stdout io.Writer) error {
	sources := bench.EvalSources()
	if _, err := os.Stat(filepath.Join(cfg.Drive, "truth.csv")); err == nil && cfg.ArrivalsFile == "" {
		sources = append(sources, bench.ExactMotionSource)
	}
	cfg.Progress, cfg.Out = nil, ""
	rows, err := bench.CompareEvalSources(ctx, cfg, sources, bench.TelemetryLinks())
	if err != nil {
		return fmt.Errorf("--compare-sources: %w", err)
	}
	fmt.Fprintln(stdout, "sources of motion, side by side:")
	bench.WriteEvalTable(stdout, rows)
	data, err := json.MarshalIndent(rows, "", "  ")
	if err != nil {
		return err
	}
	return os.WriteFile(filepath.Join(out, "sources.json"), append(data, '\n'), 0o644)
}

// replayDrives replays a drive list, or a shard of it, into out.
func replayDrives(ctx context.Context, list []string, shard bench.Shard, out string, rf *replayFlags, stdout, stderr io.Writer) error {
	if rf.arrivals != "" && len(list) > 1 {
		return fmt.Errorf("--arrivals names one drive's file but %d drives were given; replay the drives with the loss model, or one at a time", len(list))
	}
	dc := bench.DrivesConfig{Shard: shard, Out: out, Overwrite: rf.overwrite}
	for _, d := range list {
		rc, err := rf.config(d, "", stderr)
		if err != nil {
			return err
		}
		dc.Drives = append(dc.Drives, rc)
	}
	dc.Started = func(i int, drive string) { fmt.Fprintf(stderr, "drive %d of %d: %s\n", i+1, len(list), drive) }
	fmt.Fprintln(stderr, safetyCaution)
	rep, err := bench.ReplayDrives(ctx, dc)
	if err != nil {
		return err
	}
	if shard.Count > 0 {
		fmt.Fprintf(stdout, "shard %d of %d: %d of %d drives replayed into %s; merge all shards with: stopgap merge --shard DIR... --out DIR\n",
			shard.Index, shard.Count, len(rep.Results), len(list), out)
		return nil
	}
	printDrives(stdout, rep, out)
	return nil
}

func printSummary(w io.Writer, s bench.Summary, out string) {
	printSummaryBody(w, s)
	fmt.Fprintf(w, "report: %s\n", filepath.Join(out, "report.html"))
}

// printSummaryBody prints the figures of s.
func printSummaryBody(w io.Writer, s bench.Summary) {
	fmt.Fprintf(w, "ticks %d: live %d, missing %d (predicted %d, stale %d)\n",
		s.TicksTotal, s.LiveTicks, s.TicksMissing, s.PredictedTicks, s.StaleTicks)
	if p50, p99 := float64(s.SynthMsP50), float64(s.SynthMsP99); math.IsNaN(p50) || math.IsNaN(p99) {
		fmt.Fprintln(w, "synthesis per predicted frame: none synthesised")
	} else {
		fmt.Fprintf(w, "synthesis per predicted frame: p50 %.2f ms, p99 %.2f ms\n", p50, p99)
	}
	if p := s.Pairing; p != nil {
		for _, l := range []string{p.Line, p.Decisions} {
			if l != "" {
				fmt.Fprintln(w, l)
			}
		}
	}
	if s.Motion != (bench.MotionSources{}) {
		fmt.Fprintf(w, "motion sources: %s (%d video samples)\n", s.Motion, s.VideoSamples)
	}
	fmt.Fprintf(w, "%-10s %7s %10s %9s %9s\n", "method", "frames", "PSNR dB", "SSIM", "MAE 0-255")
	for _, m := range bench.Methods() {
		st := s.Methods.Get(m)
		name := m.String()
		if m == bench.MethodPredicted {
			name = "shown"
		}
		if st.Frames == 0 {
			fmt.Fprintf(w, "%-10s %7d %10s %9s %9s\n", name, 0, "-", "-", "-")
			continue
		}
		fmt.Fprintf(w, "%-10s %7d %10.2f %9.4f %9.2f\n", name, st.Frames, float64(st.PSNRdBMean), float64(st.SSIMMean), float64(st.MAEMean))
	}
	if c := s.Commands; c.Used {
		how := "configured"
		if c.Fitted {
			how = "fitted from the drive"
		}
		fmt.Fprintf(w, "operator commands: %d drive the %s model (%d rejected); actuator %s: delay %.0f ms, steering lag %.3f s, speed lag %.3f s\n",
			c.Count, s.FilterModel, c.Rejected, how, c.DelayMs, c.SteerLagS, c.SpeedLagS)
	} else if c.File != "" {
		fmt.Fprintf(w, "operator commands: not used (%s)\n", c.Why)
	}
	if po := s.PredictedOnly; po.Frames > 0 {
		fmt.Fprintf(w, "PREDICTED ticks alone: %d, PSNR %.2f dB (hold %.2f), SSIM %.4f (hold %.4f); harm rate %.1f %% by PSNR, %.1f %% by SSIM\n",
			po.Frames, float64(po.PSNRdBMean), float64(po.HoldPSNRdBMean), float64(po.SSIMMean), float64(po.HoldSSIMMean),
			100*float64(po.HarmRatePSNR), 100*float64(po.HarmRateSSIM))
	} else {
		fmt.Fprintln(w, "PREDICTED ticks alone: none scored")
	}
	if mk := s.Marks; mk != nil {
		fmt.Fprintf(w, "marks of things that moved, PREDICTED ticks up to %g ms: %d, recall %.2f, precision %.2f (pooled over pixels %.2f, %.2f; all ages: %d ticks, %.2f, %.2f)\n",
			mk.AgeLimitMs, mk.Ticks, float64(mk.RecallMean), float64(mk.PrecisionMean), float64(mk.RecallPooled), float64(mk.PrecisionPooled),
			mk.TicksAll, float64(mk.RecallMeanAll), float64(mk.PrecisionMeanAll))
	}
	if l := s.Lead; l != nil {
		fmt.Fprintf(w, "lead (LIVE frames moved ahead by their age, mean %.0f ms): %d of %d LIVE ticks moved; PSNR against the present frame %.2f dB (plain %.2f); moved ticks alone %.2f dB (plain %.2f), harm rate %.1f %%\n",
			float64(l.AgeMsMean), l.Moved, l.Ticks, float64(l.LeadPSNRdBMean), float64(l.PlainPSNRdBMean),
			float64(l.MovedLeadPSNRdBMean), float64(l.MovedPlainPSNRdBMean), 100*float64(l.HarmRate))
	}
	for _, c := range []bench.Calibration{s.Calibration, s.CalibrationTruth} {
		if c.Frames > 0 {
			fmt.Fprintf(w, "calibration (%s, misalignment <= %g mrad): %d ticks, ECE %.3f, Brier %.3f, mean confidence %.3f, observed %.3f\n",
				c.Source, c.ToleranceMrad, c.Frames, float64(c.ECE), float64(c.Brier), float64(c.ConfMean), float64(c.GoodShare))
		}
	}
	if s.UnscoredNote != "" {
		fmt.Fprintln(w, s.UnscoredNote)
	}
}

func runSimdrive(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("simdrive", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var out string
	var quiet bool
	var cfg simdrive.Config
	fs.StringVar(&out, "out", "", "recording `directory` to create; must not exist (required)")
	fs.IntVar(&cfg.Width, "width", 1280, "image width, px")
	fs.IntVar(&cfg.Height, "height", 720, "image height, px")
	fs.Float64Var(&cfg.FPS, "fps", 30, "frame rate, frames per second")
	fs.Float64Var(&cfg.DurationS, "duration-s", 20, "drive length, s")
	fs.Float64Var(&cfg.SpeedMps, "speed-mps", 10, "mean speed, m/s")
	fs.Int64Var(&cfg.Seed, "seed", 1, "seed of the scene, trajectory and telemetry noise")
	fs.Float64Var(&cfg.FacadeSetbackM, "facade-setback-m", simdrive.DefaultSetbackM, "least distance of building fronts behind the sidewalk, m (1 = narrow city street)")
	fs.Float64Var(&cfg.PanYawRateRps, "pan-yaw-rate-rps", 0, "amplitude of an extra yaw rate that reverses every half --pan-period-s (a weaving, panning drive), rad/s; 0 = none")
	fs.Float64Var(&cfg.PanPeriodS, "pan-period-s", simdrive.DefaultPanPeriodS, "period of the pan yaw rate, s")
	fs.BoolVar(&cfg.Traffic, "traffic", false, "add moving road users (oncoming cars, a car ahead, pedestrians) and write their exact mask per frame to movers/, to score the marks of things that moved")
	fs.Float64Var(&cfg.CommandDelayMs, "command-delay-ms", simdrive.DefaultCommandDelayMs, "uplink delay from the operator's commands to the actuators, ms")
	fs.Float64Var(&cfg.SteerLagS, "steer-lag-s", simdrive.DefaultSteerLagS, "steering actuator's first-order time constant, s (negative: none)")
	fs.Float64Var(&cfg.SpeedLagS, "speed-lag-s", simdrive.DefaultSpeedLagS, "speed's first-order time constant, s (negative: none)")
	fs.BoolVar(&cfg.NoCommands, "no-commands", false, "drive the scripted profile directly: no operator commands, no controls.csv")
	fs.BoolVar(&quiet, "quiet", false, "no progress bar")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap simdrive --out DIR [flags]")
		fmt.Fprintln(stderr, "\nRenders a simulated drive of our own street scene and writes it as a recording")
		fmt.Fprintln(stderr, "(camera.json, frames.csv + JPEG frames, telemetry.csv, truth.csv, and controls.csv:")
		fmt.Fprintln(stderr, "the operator's commands that produced the drive through the delay and the lags).")
		fmt.Fprintln(stderr)
		fs.PrintDefaults()
	}
	if err := parse(fs, args); err != nil {
		return err
	}
	if out == "" {
		fmt.Fprintln(stderr, "stopgap simdrive: --out is required")
		fs.Usage()
		return errUsage
	}
	var progress func(int, int)
	if !quiet {
		progress = progressBar(stderr, "simdrive")
	}
	if err := simdrive.Generate(ctx, cfg, out, progress); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "recording written: %s\n", out)
	return nil
}
