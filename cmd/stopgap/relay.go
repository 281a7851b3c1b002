package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"os"
	"strings"

	"stopgap/filter"
	"stopgap/predictor"
	"stopgap/stream/console"
	"stopgap/stream/operator"
	"stopgap/stream/relay"
	"stopgap/stream/rtpudp"
	"stopgap/stream/station"
	"stopgap/stream/whip"
)

func runRelay(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("relay", flag.ContinueOnError)
	fs.SetOutput(stderr)
	pol := predictor.DefaultPolicy()
	var (
		listen, certFile, keyFile, tokenFile, consoleTokenFile string
		cameraFile, recordDir, model                           string
		fps, cutoff, minCutoff, maxCutoff, maxAgeMs            float64
		allowanceMs, latencyMs, wheelbaseM                     float64
		logJSON, verbose                                       bool
		rtpListen, telemetryListen, rtpAllow                   string
		storePath, policyPath                                  string
		iceLoopback, alwaysTranscode                           bool
		iceInterfaces, icePublicIPs                            string
		iceUDPPort, senderStartKbps                            int
	)
	fs.StringVar(&listen, "listen", "127.0.0.1:8443", "`address` to serve WHIP ingest, the console, /healthz and /metrics on")
	fs.StringVar(&certFile, "tls-cert", "", "TLS certificate `file` (PEM); with --tls-key serves HTTPS (required off loopback)")
	fs.StringVar(&keyFile, "tls-key", "", "TLS private key `file` (PEM)")
	fs.StringVar(&tokenFile, "token-file", "", "`file` holding the vehicle's WHIP bearer token (else env STOPGAP_TOKEN, else a random one is generated)")
	fs.StringVar(&consoleTokenFile, "console-token-file", "", "`file` holding the console bearer token (else env STOPGAP_CONSOLE_TOKEN, else random)")
	fs.StringVar(&cameraFile, "camera", "", "camera.json `file` of the vehicle camera (required)")
	fs.StringVar(&recordDir, "record", "", "record the drive into this new `directory` (frames, telemetry, arrivals, shown.csv)")
	fs.Float64Var(&fps, "fps", relay.DefaultFPS, "vehicle camera frame rate, frames per second")
	fs.Float64Var(&cutoff, "cutoff", pol.CutoffConfidence, "cutoff in [0,1] of the profile \"default\" created when the profile store is empty: below it a missing frame is shown STALE")
	fs.StringVar(&storePath, "operators", operator.DefaultStorePath(), "operator profile store `file` the console reads its profiles from and writes its changes to (also $"+operator.StoreEnv+")")
	fs.StringVar(&policyPath, "policy", operator.DefaultPolicyPath, "administrator's policy `file`: cutoff limits, longest prediction horizon, who may change what (missing at the default path: built-in conservative defaults)")
	fs.Float64Var(&minCutoff, "min-cutoff", -1, "no longer used: set min_cutoff in the policy file")
	fs.Float64Var(&maxCutoff, "max-cutoff", -1, "no longer used: set max_cutoff in the policy file")
	fs.Float64Var(&maxAgeMs, "max-age-ms", 0, "cap on the picture age of a predicted frame, ms: past it a missing frame is STALE (0 = the policy's max_horizon_ms; more is refused)")
	fs.Float64Var(&allowanceMs, "allowance-ms", relay.DefaultAllowanceMs, allowanceUsage)
	fs.Float64Var(&latencyMs, "latency-ms", 0, "nominal capture-to-arrival latency, ms (0 = estimate over the first frames of each session)")
	fs.StringVar(&model, "model", "ctrv", "motion model of the filter: ctrv or bicycle (bicycle: the operator's commands sent to /api/controls are its control input)")
	videoMotion := fs.Bool("video-motion", false, "also estimate the vehicle's motion from the video itself (for a vehicle that sends no telemetry); costs about one warp per frame")
	fs.Float64Var(&wheelbaseM, "wheelbase-m", filter.DefaultWheelbaseM, "wheelbase for the bicycle model and steering telemetry, m")
	var act filter.Actuator
	var cmdDelayMs float64
	fs.Float64Var(&cmdDelayMs, "command-delay-ms", 0, "uplink delay from the operator station to the vehicle's actuators, ms (fit it with stopgap replay on a recorded drive)")
	fs.Float64Var(&act.SteerLagS, "steer-lag-s", 0, "time constant of the steering actuator's first-order lag, s")
	fs.Float64Var(&act.SpeedLagS, "speed-lag-s", 0, "time constant of the speed's first-order lag, s")
	fs.StringVar(&rtpListen, "rtp-listen", "", "UDP `address` (e.g. 127.0.0.1:5004) to receive VP8 over plain RTP with RTCP on the same port; empty = off")
	fs.StringVar(&telemetryListen, "telemetry-listen", "", "UDP `address` for telemetry datagrams (JSON, one per datagram) that go with --rtp-listen")
	fs.StringVar(&rtpAllow, "rtp-allow", "", "comma-separated source `IPs or IP:ports` admitted by --rtp-listen and --telemetry-listen (required off loopback: plain RTP is unauthenticated)")
	fs.BoolVar(&alwaysTranscode, "always-transcode", false, "send LIVE frames through the relay's encoder too (one encoder's stream at its fixed bitrate) instead of passing the vehicle's frames through untouched")
	fs.BoolVar(&iceLoopback, "ice-loopback", false, "also offer loopback ICE candidates to the vehicle (a sender on this host)")
	fs.StringVar(&iceInterfaces, "ice-interfaces", "", "comma-separated network interface `names` to offer ICE candidates on (default all but loopback)")
	fs.StringVar(&icePublicIPs, "ice-public-ip", "", "comma-separated public `IPs` to announce instead of the host addresses (a relay behind a static 1:1 NAT)")
	fs.IntVar(&iceUDPPort, "ice-udp-port", 0, "one UDP `port` for the media of all vehicle sessions (0 = a random port per session)")
	fs.IntVar(&senderStartKbps, "sender-start-kbps", whip.DefaultSenderStartKbps, "bitrate, kbit/s, the answer asks a browser-based vehicle sender to start its congestion control from (it backs off from there on a weaker link; 0 = the sender's own, a few hundred kbit/s)")
	fs.BoolVar(&logJSON, "log-json", true, "write logs as JSON")
	fs.BoolVar(&verbose, "v", false, "verbose logs")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap relay --camera camera.json [flags]")
		fmt.Fprintln(stderr, "\nLive relay: the vehicle publishes video and telemetry with WHIP to /whip; the")
		fmt.Fprintln(stderr, "operator opens the console URL printed at start. Logs go to stderr.")
		fmt.Fprintln(stderr, "A camera without WebRTC may instead send VP8 over plain RTP/UDP to --rtp-listen")
		fmt.Fprintln(stderr, "(payload type 96, RTCP on the same port) and telemetry datagrams to")
		fmt.Fprintln(stderr, "--telemetry-listen. Plain RTP has no authentication or encryption: off loopback")
		fmt.Fprintln(stderr, "--rtp-allow must list the camera's addresses; use it on a trusted link only.")
		fmt.Fprintln(stderr)
		fs.PrintDefaults()
	}
	if err := parse(fs, args); err != nil {
		return err
	}
	if cameraFile == "" {
		fmt.Fprintln(stderr, "stopgap relay: --camera is required (the vehicle camera's camera.json)")
		return errUsage
	}
	if minCutoff != -1 || maxCutoff != -1 {
		fmt.Fprintln(stderr, "stopgap relay: --min-cutoff and --max-cutoff moved to the administrator's policy file (min_cutoff, max_cutoff); give it with --policy")
		return errUsage
	}
	switch {
	case senderStartKbps < 0:
		fmt.Fprintln(stderr, "stopgap relay: --sender-start-kbps wants kbit/s, or 0 for the sender's own start")
		return errUsage
	case senderStartKbps == 0:
		senderStartKbps = whip.SenderStartOwn
	}
	if (certFile == "") != (keyFile == "") {
		fmt.Fprintln(stderr, "stopgap relay: give both --tls-cert and --tls-key, or neither")
		return errUsage
	}
	sc := station.Config{Listen: listen, CertFile: certFile, KeyFile: keyFile, Out: stdout,
		RTP: rtpudp.Config{RTPAddr: rtpListen, TelemetryAddr: telemetryListen, AllowedSources: splitList(rtpAllow)}}
	if err := sc.Check(); err != nil {
		return fmt.Errorf("--listen, --tls-cert, --tls-key: %w", err)
	}
	fmt.Fprintln(stderr, safetyCaution)

	level := slog.LevelInfo
	if verbose {
		level = slog.LevelDebug
	}
	log := newLogger(stderr, logJSON, level)
	cam, err := relay.ReadCameraFile(cameraFile)
	if err != nil {
		return err
	}
	m, err := filter.ParseModel(model)
	if err != nil {
		return fmt.Errorf("--model: %w", err)
	}
	if !(cmdDelayMs >= 0 && cmdDelayMs <= 2000) {
		return fmt.Errorf("--command-delay-ms %v: want 0..2000", cmdDelayMs)
	}
	act.DelayUs = int64(math.Round(cmdDelayMs * 1000))
	ingestTok, ingestGen, err := loadToken(tokenFile, "STOPGAP_TOKEN")
	if err != nil {
		return fmt.Errorf("--token-file: %w", err)
	}
	consoleTok, consoleGen, err := loadToken(consoleTokenFile, "STOPGAP_CONSOLE_TOKEN")
	if err != nil {
		return fmt.Errorf("--console-token-file: %w", err)
	}
	policyGiven := false
	fs.Visit(func(f *flag.Flag) { policyGiven = policyGiven || f.Name == "policy" })
	adminPol, err := operator.LoadPolicy(policyPath, policyGiven)
	if err != nil {
		return err
	}
	if maxAgeMs == 0 {
		maxAgeMs = adminPol.MaxHorizonMs
	}
	if err := adminPol.CheckHorizonMs(maxAgeMs); err != nil {
		return fmt.Errorf("--max-age-ms: %w", err)
	}
	store := operator.NewStore(storePath)
	if err := operator.EnsureProfile(store, adminPol, loginName(), cutoff, "created by the relay: the profile store was empty"); err != nil {
		return fmt.Errorf("--operators %s: %w", storePath, err)
	}
	limitsSource := "min_cutoff and max_cutoff of the built-in default policy"
	if adminPol.Path != "" {
		limitsSource = "min_cutoff and max_cutoff of the policy file " + adminPol.Path
	}
	cc := console.Config{Addr: listen, Limits: console.Limits{MinCutoff: adminPol.MinCutoff, MaxCutoff: adminPol.MaxCutoff},
		LimitsSource: limitsSource, Store: operator.NewConsoleStore(store, adminPol)}
	sc.Relay = relay.Config{
		FPS: fps, AllowanceMs: allowanceMs, LatencyMs: latencyMs,
		Camera: cam, Policy: predictor.Policy{MaxAgeMs: maxAgeMs},
		Filter:      filter.Config{Model: m, WheelbaseM: wheelbaseM, Actuator: act},
		VideoMotion: *videoMotion,
		RecordDir:   recordDir, IngestToken: ingestTok, ConsoleToken: consoleTok,
		Console: cc, Logger: log, AlwaysTranscode: alwaysTranscode,
		Whip: whip.Config{Network: whip.Network{IncludeLoopback: iceLoopback, Interfaces: splitList(iceInterfaces),
			NAT1To1IPs: splitList(icePublicIPs), UDPPort: iceUDPPort}, SenderStartKbps: senderStartKbps},
	}
	sc.IngestTokenGenerated, sc.ConsoleTokenGenerated = ingestGen, consoleGen
	sc.KnownOperator = func(name string) bool {
		snap, err := store.Load()
		return err == nil && snap.Find(name) >= 0
	}
	return station.Serve(ctx, sc)
}

// serveRTPIngest hands s to the relay once its first RTP packet arrived and,
// after each session ends, listens again with cfg, until ctx ends.
// splitList splits a comma-separated flag value, dropping empty items.
func splitList(v string) []string {
	var out []string
	for _, f := range strings.Split(v, ",") {
		if f = strings.TrimSpace(f); f != "" {
			out = append(out, f)
		}
	}
	return out
}

// loadToken reads a bearer token from file, else env, else generates one
// (generated = true).
func loadToken(file, env string) (tok string, generated bool, err error) {
	switch {
	case file != "":
		b, err := os.ReadFile(file)
		if err != nil {
			return "", false, err
		}
		tok = strings.TrimSpace(string(b))
		if len(tok) < console.MinTokenLen {
			return "", false, fmt.Errorf("token in %s is shorter than %d characters", file, console.MinTokenLen)
		}
		return tok, false, nil
	case os.Getenv(env) != "":
		tok = strings.TrimSpace(os.Getenv(env))
		if len(tok) < console.MinTokenLen {
			return "", false, fmt.Errorf("token in $%s is shorter than %d characters", env, console.MinTokenLen)
		}
		return tok, false, nil
	}
	tok, err = console.NewToken()
	return tok, true, err
}
