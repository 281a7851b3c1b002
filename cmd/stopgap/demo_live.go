package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"strings"
	"time"

	"stopgap/internal/lossmodel"
	"stopgap/stream/livedemo"
	"stopgap/stream/simvehicle"
)

// outageList is a repeatable, comma-separated --outage flag.
type outageList []simvehicle.Outage

func (l *outageList) String() string {
	s := make([]string, len(*l))
	for i, o := range *l {
		s[i] = o.String()
	}
	return strings.Join(s, ",")
}

func (l *outageList) Set(v string) error {
	o, err := livedemo.ParseOutages(v)
	*l = append(*l, o...)
	return err
}

// runDemoLive is the live demo: relay + simulated vehicle over loopback
// WebRTC through an emulated lossy link, with the operator console in a
// browser.
func runDemoLive(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("demo", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var (
		dir, listen, record               string
		runS, driveS                      float64
		width, height, bitrateKbps        int
		lossRate, burstMs, delayMs, jitMs float64
		seed                              uint64
		logJSON, verbose                  bool
	)
	outages := outageList{}
	fs.StringVar(&dir, "out", "stopgap-demo", "`directory` the demo writes into; the simulated drive is rendered into it once and reused")
	deprecatedAlias(fs, "dir", "out")
	fs.StringVar(&listen, "listen", "127.0.0.1:0", "HTTP `address` of the relay (ingest and console); port 0 picks a free one")
	fs.StringVar(&record, "record", "", "if set, a new `directory` the relay records the session into (frames, telemetry, arrivals, shown.csv),\nwith the simulated vehicle's own full-quality recording in DIR/onboard")
	fs.Float64Var(&runS, "run-s", 0, "stop after this many seconds; 0 runs until Ctrl-C")
	fs.Float64Var(&driveS, "duration-s", 20, "length of the simulated drive, s (it loops)")
	deprecatedAlias(fs, "drive-s", "duration-s")
	fs.IntVar(&width, "width", 640, "camera width of the simulated drive, pixels")
	fs.IntVar(&height, "height", 360, "camera height of the simulated drive, pixels")
	fs.IntVar(&bitrateKbps, "bitrate-kbps", 0, "vehicle encoder bitrate, kbit/s (0 = the encoder's default)")
	fs.Float64Var(&lossRate, "packet-loss-rate", 0.01, "long-run share of RTP packets lost by the Gilbert-Elliott link, [0,1) (packets, not frames)")
	deprecatedAlias(fs, "link-loss", "packet-loss-rate")
	fs.Float64Var(&burstMs, "link-burst-ms", 40, "mean duration of a loss burst on the link, ms")
	fs.Float64Var(&delayMs, "link-delay-ms", 30, "fixed one-way delay of the link, ms")
	fs.Float64Var(&jitMs, "link-jitter-ms", 10, "uniform extra one-way delay in [0, jitter), ms (never reorders)")
	fs.Uint64Var(&seed, "link-seed", 1, "seed of the link's loss and jitter")
	fs.Var(&outages, "outage", "scripted link outage START+DURATION[@EVERY] (Go durations), repeatable or comma-separated;\ndefault "+livedemo.DefaultOutages+" (a short gap to predict over, a long one that turns STALE)")
	fs.BoolVar(&logJSON, "log-json", false, "write logs as JSON")
	fs.BoolVar(&verbose, "v", false, "verbose logs")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap demo [flags]")
		fmt.Fprintln(stderr, "\nLive demo: starts the relay on loopback, renders a simulated drive (once, into the --out directory),")
		fmt.Fprintln(stderr, "and plays it from a simulated vehicle over WebRTC through an emulated lossy link with")
		fmt.Fprintln(stderr, "scripted outages. Open the printed console URL in a browser to watch LIVE, PREDICTED")
		fmt.Fprintln(stderr, "and STALE frames. Runs until Ctrl-C or --run-s.")
		fmt.Fprintln(stderr)
		fs.PrintDefaults()
	}
	if err := parse(fs, args); err != nil {
		return err
	}
	if runS < 0 || driveS <= 0 || width <= 0 || height <= 0 || bitrateKbps < 0 {
		fmt.Fprintln(stderr, "stopgap demo: --run-s must be >= 0; --duration-s, --width and --height > 0; --bitrate-kbps >= 0")
		return errUsage
	}
	level := slog.LevelInfo
	if verbose {
		level = slog.LevelDebug
	}
	log := newLogger(stderr, logJSON, level)
	fmt.Fprintln(stderr, safetyCaution)
	if runS > 0 {
		var cancel context.CancelFunc
		ctx, cancel = context.WithTimeout(ctx, time.Duration(runS*float64(time.Second)))
		defer cancel()
	}
	return livedemo.Run(ctx, livedemo.Config{
		Dir: dir, Listen: listen, Record: record,
		Width: width, Height: height, DurationS: driveS, BitrateKbps: bitrateKbps,
		Link: lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: lossRate, BurstMs: burstMs,
			ExtraDelayMs: delayMs, JitterMs: jitMs, Seed: seed},
		Outages: outages, Logger: log, Progress: progressBar(stderr, "simdrive"),
		Out: stdout, Status: stderr,
	})
}
