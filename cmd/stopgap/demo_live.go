package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"os"
	"path/filepath"
	"strings"
	"time"

	"stopgap/bench/simdrive"
	"stopgap/lossmodel"
	"stopgap/predictor"
	"stopgap/stream/console"
	"stopgap/stream/recording"
	"stopgap/stream/relay"
	"stopgap/stream/simvehicle"
	"stopgap/stream/whip"
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
	for _, part := range strings.Split(v, ",") {
		if strings.TrimSpace(part) == "" {
			continue
		}
		o, err := simvehicle.ParseOutage(part)
		if err != nil {
			return err
		}
		*l = append(*l, o)
	}
	return nil
}

// onboardDir is where, inside the demo's --record directory, the simulated
// vehicle keeps its own recording.
const onboardDir = "onboard"

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
	fs.StringVar(&record, "record", "", "if set, a new `directory` the relay records the session into (frames, telemetry, arrivals, ticks.csv),\nwith the simulated vehicle's own full-quality recording in DIR/onboard")
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
	fs.Var(&outages, "outage", "scripted link outage START+DURATION[@EVERY] (Go durations), repeatable or comma-separated;\ndefault 3s+400ms@10s,7s+1500ms@10s (a short gap to predict over, a long one that turns STALE)")
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
	if len(outages) == 0 {
		_ = outages.Set("3s+400ms@10s,7s+1500ms@10s")
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

	drive := filepath.Join(dir, fmt.Sprintf("live-drive-%dx%d-%gs", width, height, driveS))
	if _, err := os.Stat(filepath.Join(drive, "frames.csv")); errors.Is(err, os.ErrNotExist) {
		if err := os.MkdirAll(dir, 0o755); err != nil {
			return fmt.Errorf("demo directory: %w", err)
		}
		fmt.Fprintf(stderr, "rendering the simulated drive into %s (once)\n", drive)
		err := simdrive.Generate(ctx, simdrive.Config{Width: width, Height: height, DurationS: driveS}, drive,
			progressBar(stderr, "simdrive"))
		if err != nil {
			return err
		}
	} else {
		fmt.Fprintf(stderr, "reusing the simulated drive in %s\n", drive)
	}
	rec, err := recording.Open(drive)
	if err != nil {
		return fmt.Errorf("%w (delete %s to render it again)", err, drive)
	}
	for _, w := range rec.Warnings {
		log.Warn("drive recording", "warning", w)
	}

	ingestToken, err := console.NewToken()
	if err != nil {
		return err
	}
	consoleToken, err := console.NewToken()
	if err != nil {
		return err
	}
	fps := 1e6 / float64(rec.Frames[1].CaptureUs-rec.Frames[0].CaptureUs)
	rl, err := relay.New(relay.Config{
		FPS:          fps,
		Camera:       predictor.Camera(rec.Camera),
		RecordDir:    record,
		IngestToken:  ingestToken,
		ConsoleToken: consoleToken,
		Whip:         whip.Config{Network: whip.Network{LoopbackOnly: true}},
		Logger:       log.With("component", "relay"),
	})
	if err != nil {
		return err
	}
	ln, err := net.Listen("tcp", listen)
	if err != nil {
		return fmt.Errorf("listen on %s: %w (choose another --listen address)", listen, err)
	}
	srv := &http.Server{Handler: rl.Handler(), ReadHeaderTimeout: 5 * time.Second}
	go func() { _ = srv.Serve(ln) }()
	defer srv.Close()
	base := "http://" + ln.Addr().String()

	relayCtx, stopRelay := context.WithCancel(context.Background())
	relayDone := make(chan error, 1)
	go func() { relayDone <- rl.Run(relayCtx) }()
	defer func() {
		stopRelay()
		if err := <-relayDone; err != nil {
			log.Warn("relay shutdown", "err", err)
		}
	}()

	link, err := simvehicle.NewLink(simvehicle.LinkConfig{
		Loss: lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: lossRate, BurstMs: burstMs,
			ExtraDelayMs: delayMs, JitterMs: jitMs, Seed: seed},
		Outages: outages,
	}, nil)
	if err != nil {
		return err
	}
	var onboard *simvehicle.Onboard
	if record != "" {
		onboard, err = simvehicle.NewOnboard(filepath.Join(record, onboardDir), rec.Camera, 0, log.With("component", "onboard"))
		if err != nil {
			return err
		}
		defer func() {
			if err := onboard.Close(); err != nil {
				log.Warn("onboard recording", "err", err)
			}
			st := onboard.Stats()
			fmt.Fprintf(stderr, "vehicle's onboard recording: %d frames, %d telemetry rows (%d dropped) in %s\n", st.Frames, st.Telemetry, st.Dropped, onboard.Dir())
			fmt.Fprintf(stderr, "score the session's drops against it: stopgap replay --drive %s --arrivals %s --out REPORT\n",
				onboard.Dir(), filepath.Join(record, recording.ArrivalsFile))
		}()
	}
	veh, err := simvehicle.New(simvehicle.Config{Recording: rec, Link: link, Loop: true, Onboard: onboard,
		BitrateBps: bitrateKbps * 1000, Logger: log.With("component", "vehicle")})
	if err != nil {
		return err
	}

	fmt.Fprintf(stdout, "operator console: %s\n", rl.ConsoleURL(base))
	fmt.Fprintf(stdout, "link: %.1f%% packet loss in bursts of %g ms, %g ms delay + up to %g ms jitter; outages %s\n",
		100*lossRate, burstMs, delayMs, jitMs, outages.String())
	fmt.Fprintln(stdout, "press Ctrl-C to stop")

	vehDone := make(chan error, 1)
	go func() {
		vehDone <- veh.Publish(ctx, base+"/whip", ingestToken, whip.PublishConfig{
			Network: whip.Network{LoopbackOnly: true}, Logger: log.With("component", "vehicle-webrtc")})
	}()
	status := time.NewTicker(5 * time.Second)
	defer status.Stop()
	for {
		select {
		case err := <-vehDone:
			printLiveStatus(stderr, rl, veh)
			if err != nil && !errors.Is(err, context.Canceled) && !errors.Is(err, context.DeadlineExceeded) {
				return fmt.Errorf("simulated vehicle: %w", err)
			}
			return nil
		case <-status.C:
			printLiveStatus(stderr, rl, veh)
		}
	}
}

func printLiveStatus(w io.Writer, rl *relay.Relay, veh *simvehicle.Vehicle) {
	rs, vs := rl.Stats(), veh.Stats()
	fmt.Fprintf(w, "relay: frames in %d, ticks LIVE %d PREDICTED %d STALE %d, losses %d, keyframe requests %d | vehicle: frames %d (skipped %d), keyframes %d, link lost %d + %d in outages of %d packets\n",
		rs.FramesIn, rs.TicksLive, rs.TicksPredicted, rs.TicksStale, rs.Losses, rs.KeyframeRequests,
		vs.FramesEncoded, vs.FramesSkipped, vs.Keyframes, vs.Link.PacketsLost, vs.Link.PacketsOutage, vs.Link.PacketsWire)
}
