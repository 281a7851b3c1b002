package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"os"
	"path/filepath"

	"stopgap/bench"
	"stopgap/bench/simdrive"
)

// runDemo runs the live demo (runDemoLive), or with --offline as the first
// flag the offline loop: render the simulated drive, replay it, report.
func runDemo(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	if len(args) > 0 && (args[0] == "--offline" || args[0] == "-offline") {
		return runDemoOffline(ctx, args[1:], stdout, stderr)
	}
	for _, a := range args {
		if a == "--offline" || a == "-offline" {
			fmt.Fprintln(stderr, "stopgap demo: --offline must be the first flag")
			return errUsage
		}
	}
	return runDemoLive(ctx, args, stdout, stderr)
}

func runDemoOffline(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("demo --offline", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var dir string
	var sim simdrive.Config
	fs.StringVar(&dir, "dir", "stopgap-demo", "working `directory` for the demo's drive and report")
	fs.Float64Var(&sim.DurationS, "duration-s", 20, "length of the simulated drive, s")
	var rf replayFlags
	rf.register(fs)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap demo --offline [flags]")
		fmt.Fprintln(stderr, "\nOffline demo: renders the built-in simulated drive (once; it is reused) into")
		fmt.Fprintln(stderr, "DIR/drive, replays it over a bursty lossy link and writes DIR/report/report.html.")
		fmt.Fprintln(stderr)
		fs.PrintDefaults()
	}
	if err := parse(fs, args); err != nil {
		return err
	}
	fmt.Fprintln(stderr, safetyCaution)
	drive := filepath.Join(dir, "drive")
	if _, err := os.Stat(filepath.Join(drive, "frames.csv")); errors.Is(err, os.ErrNotExist) {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return fmt.Errorf("demo directory: %w", err)
		}
		fmt.Fprintf(stderr, "rendering the simulated drive into %s (once)\n", drive)
		var progress func(int, int)
		if !rf.quiet {
			progress = progressBar(stderr, "simdrive")
		}
		if err := simdrive.Generate(ctx, sim, drive, progress); err != nil {
			return err
		}
	} else {
		fmt.Fprintf(stderr, "reusing the simulated drive in %s\n", drive)
	}
	out := filepath.Join(dir, "report")
	rf.overwrite = true
	cfg, err := rf.config(drive, out, stderr)
	if err != nil {
		return err
	}
	sum, err := bench.Replay(ctx, cfg)
	if err != nil {
		return err
	}
	printSummary(stdout, sum, out)
	return nil
}
