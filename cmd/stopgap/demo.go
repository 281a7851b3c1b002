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

// runDemo runs the live demo (runDemoLive), or with --offline anywhere among
// its flags the offline loop: render the simulated drive, replay it, report.
func runDemo(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	rest, offline := takeOffline(args)
	if offline {
		return runDemoOffline(ctx, rest, stdout, stderr)
	}
	return runDemoLive(ctx, rest, stdout, stderr)
}

// takeOffline removes every --offline (or -offline, --offline=true) from
// the flags before the first non-flag argument and reports whether one
// was there; --offline=false counts as absent. A flag value spelled
// "--offline" is taken as the flag.
func takeOffline(args []string) ([]string, bool) {
	rest := make([]string, 0, len(args))
	offline := false
	for i, a := range args {
		if a == "--" {
			rest = append(rest, args[i:]...)
			break
		}
		switch a {
		case "--offline", "-offline", "--offline=true", "-offline=true":
			offline = true
			continue
		case "--offline=false", "-offline=false":
			continue
		}
		rest = append(rest, a)
	}
	return rest, offline
}

func runDemoOffline(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("demo --offline", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var dir string
	var sim simdrive.Config
	fs.StringVar(&dir, "out", "stopgap-demo", "`directory` the demo writes into: the simulated drive (rendered once, then reused) and the report")
	deprecatedAlias(fs, "dir", "out")
	fs.Float64Var(&sim.DurationS, "duration-s", 20, "length of the simulated drive, s")
	var rf replayFlags
	rf.register(fs)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap demo --offline [flags]")
		fmt.Fprintln(stderr, "\nOffline demo: renders the built-in simulated drive (once; it is reused) into")
		fmt.Fprintln(stderr, "OUT/drive, replays it over a bursty lossy link and writes OUT/report/report.html.")
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
