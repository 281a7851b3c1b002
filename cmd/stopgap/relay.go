package main

import (
	"context"
	"crypto/tls"
	"errors"
	"flag"
	"fmt"
	"io"
	"log/slog"
	"math"
	"net"
	"net/http"
	"os"
	"strings"
	"time"

	"stopgap/filter"
	"stopgap/predictor"
	"stopgap/stream/console"
	"stopgap/stream/operator"
	"stopgap/stream/relay"
	"stopgap/stream/rtpudp"
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
		iceLoopback                                            bool
		iceInterfaces, icePublicIPs                            string
		iceUDPPort                                             int
	)
	fs.StringVar(&listen, "listen", "127.0.0.1:8443", "`address` to serve WHIP ingest, the console, /healthz and /metrics on")
	fs.StringVar(&certFile, "tls-cert", "", "TLS certificate `file` (PEM); with --tls-key serves HTTPS (required off loopback)")
	fs.StringVar(&keyFile, "tls-key", "", "TLS private key `file` (PEM)")
	fs.StringVar(&tokenFile, "token-file", "", "`file` holding the vehicle's WHIP bearer token (else env STOPGAP_TOKEN, else a random one is generated)")
	fs.StringVar(&consoleTokenFile, "console-token-file", "", "`file` holding the console bearer token (else env STOPGAP_CONSOLE_TOKEN, else random)")
	fs.StringVar(&cameraFile, "camera", "", "camera.json `file` of the vehicle camera (required)")
	fs.StringVar(&recordDir, "record", "", "record the drive into this new `directory` (frames, telemetry, arrivals, ticks.csv)")
	fs.Float64Var(&fps, "fps", relay.DefaultFPS, "vehicle camera frame rate, frames per second")
	fs.Float64Var(&cutoff, "cutoff", pol.CutoffConfidence, "cutoff in [0,1] of the profile \"default\" created when the profile store is empty: below it a missing frame is shown STALE")
	fs.StringVar(&storePath, "operators", operator.DefaultStorePath(), "operator profile store `file` the console reads its profiles from and writes its changes to (also $"+operator.StoreEnv+")")
	fs.StringVar(&policyPath, "policy", operator.DefaultPolicyPath, "administrator's policy `file`: cutoff limits, longest prediction horizon, who may change what (missing at the default path: built-in conservative defaults)")
	fs.Float64Var(&minCutoff, "min-cutoff", -1, "no longer used: set min_cutoff in the policy file")
	fs.Float64Var(&maxCutoff, "max-cutoff", -1, "no longer used: set max_cutoff in the policy file")
	fs.Float64Var(&maxAgeMs, "max-age-ms", 0, "hard cap on the age of a predicted frame, ms (0 = the policy's max_horizon_ms; more is refused)")
	fs.Float64Var(&allowanceMs, "allowance-ms", relay.DefaultAllowanceMs, "how late after its nominal arrival a frame may come and still be LIVE, ms")
	fs.Float64Var(&latencyMs, "latency-ms", 0, "nominal capture-to-arrival latency, ms (0 = estimate over the first frames of each session)")
	fs.StringVar(&model, "model", "ctrv", "motion model of the filter: ctrv or bicycle (bicycle: the operator's commands sent to /api/controls are its control input)")
	fs.Float64Var(&wheelbaseM, "wheelbase-m", 2.7, "wheelbase for the bicycle model and steering telemetry, m")
	var act filter.Actuator
	var cmdDelayMs float64
	fs.Float64Var(&cmdDelayMs, "command-delay-ms", 0, "uplink delay from the operator station to the vehicle's actuators, ms (fit it with stopgap replay on a recorded drive)")
	fs.Float64Var(&act.SteerLagS, "steer-lag-s", 0, "time constant of the steering actuator's first-order lag, s")
	fs.Float64Var(&act.SpeedLagS, "speed-lag-s", 0, "time constant of the speed's first-order lag, s")
	fs.StringVar(&rtpListen, "rtp-listen", "", "UDP `address` (e.g. 127.0.0.1:5004) to receive VP8 over plain RTP with RTCP on the same port; empty = off")
	fs.StringVar(&telemetryListen, "telemetry-listen", "", "UDP `address` for telemetry datagrams (JSON, one per datagram) that go with --rtp-listen")
	fs.StringVar(&rtpAllow, "rtp-allow", "", "comma-separated source `IPs or IP:ports` admitted by --rtp-listen and --telemetry-listen (required off loopback: plain RTP is unauthenticated)")
	fs.BoolVar(&iceLoopback, "ice-loopback", false, "also offer loopback ICE candidates to the vehicle (a sender on this host)")
	fs.StringVar(&iceInterfaces, "ice-interfaces", "", "comma-separated network interface `names` to offer ICE candidates on (default all but loopback)")
	fs.StringVar(&icePublicIPs, "ice-public-ip", "", "comma-separated public `IPs` to announce instead of the host addresses (a relay behind a static 1:1 NAT)")
	fs.IntVar(&iceUDPPort, "ice-udp-port", 0, "one UDP `port` for the media of all vehicle sessions (0 = a random port per session)")
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
	if (certFile == "") != (keyFile == "") {
		fmt.Fprintln(stderr, "stopgap relay: give both --tls-cert and --tls-key, or neither")
		return errUsage
	}
	useTLS := certFile != ""
	host, _, err := net.SplitHostPort(listen)
	if err != nil {
		return fmt.Errorf("--listen %q: %w", listen, err)
	}
	if !useTLS && !isLoopback(host) {
		return fmt.Errorf("--listen %s is not a loopback address: bearer tokens would cross the network in clear text; give --tls-cert and --tls-key", listen)
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
	r, err := relay.New(relay.Config{
		FPS: fps, AllowanceMs: allowanceMs, LatencyMs: latencyMs,
		Camera: cam, Policy: predictor.Policy{MaxAgeMs: maxAgeMs},
		Filter:    filter.Config{Model: m, WheelbaseM: wheelbaseM, Actuator: act},
		RecordDir: recordDir, IngestToken: ingestTok, ConsoleToken: consoleTok,
		Console: cc, Logger: log,
		Whip: whip.Config{Network: whip.Network{IncludeLoopback: iceLoopback, Interfaces: splitList(iceInterfaces),
			NAT1To1IPs: splitList(icePublicIPs), UDPPort: iceUDPPort}},
	})
	if err != nil {
		return err
	}
	ln, err := net.Listen("tcp", listen)
	if err != nil {
		return fmt.Errorf("--listen: %w", err)
	}
	scheme := "http"
	if useTLS {
		scheme = "https"
	}
	base := scheme + "://" + ln.Addr().String()
	handler := r.Handler()
	// The operator station's commands: recorded beside the drive (see
	// operator.ControlsFile) and the bicycle model's control input.
	controls := &operator.ControlsChannel{Token: consoleTok, Now: time.Now,
		Known: func(name string) bool {
			snap, err := store.Load()
			return err == nil && snap.Find(name) >= 0
		},
		Sink: func(c operator.Control) {
			if err := r.AddCommand(c.Command()); err != nil {
				log.Debug("operator command not used", "t_us", c.TUs, "err", err)
			}
		}}
	if recordDir != "" {
		cw, err := operator.CreateControls(recordDir)
		if err != nil {
			return fmt.Errorf("--record: %w", err)
		}
		defer cw.Close()
		controls.Log = cw
	}
	mux := http.NewServeMux()
	mux.Handle("/api/controls", controls)
	mux.Handle("/", handler)
	handler = mux
	srv := &http.Server{Handler: handler, ReadHeaderTimeout: 10 * time.Second,
		TLSConfig: &tls.Config{MinVersion: tls.VersionTLS12}, ErrorLog: slog.NewLogLogger(log.Handler(), slog.LevelWarn)}
	serveErr := make(chan error, 1)
	go func() {
		if useTLS {
			serveErr <- srv.ServeTLS(ln, certFile, keyFile)
		} else {
			serveErr <- srv.Serve(ln)
		}
	}()
	// Secrets go to stdout once, never to the logs.
	fmt.Fprintf(stdout, "WHIP endpoint: %s/whip\n", base)
	if ingestGen {
		fmt.Fprintf(stdout, "WHIP bearer token (generated): %s\n", ingestTok)
	}
	if consoleGen {
		fmt.Fprintln(stdout, "console token generated")
	}
	fmt.Fprintf(stdout, "operator console: %s\n", r.ConsoleURL(base))
	log.Info("relay listening", "addr", ln.Addr().String(), "tls", useTLS, "record", recordDir)

	rctx, cancel := context.WithCancel(ctx)
	defer cancel()
	// Changes made with "stopgap operator" while the relay runs reach the
	// console within a second.
	go func() {
		t := time.NewTicker(time.Second)
		defer t.Stop()
		for {
			select {
			case <-rctx.Done():
				return
			case <-t.C:
				if err := r.Console().ReloadProfiles(); err != nil {
					log.Warn("reading the operator profiles failed; keeping the current ones", "err", err)
				}
			}
		}
	}()
	runErr := make(chan error, 1)
	go func() { runErr <- r.Run(rctx) }()
	rtpDone := make(chan struct{})
	if rtpListen == "" {
		if telemetryListen != "" {
			log.Warn("--telemetry-listen is ignored without --rtp-listen")
		}
		close(rtpDone)
	} else {
		uc := rtpudp.Config{RTPAddr: rtpListen, TelemetryAddr: telemetryListen,
			AllowedSources: splitList(rtpAllow), Logger: log.With("component", "rtpudp")}
		first, err := rtpudp.Listen(rctx, uc)
		if err != nil {
			cancel()
			<-runErr
			srv.Close()
			return fmt.Errorf("--rtp-listen: %w", err)
		}
		fmt.Fprintf(stdout, "RTP/UDP ingest: %s\n", first.RTPAddr())
		go func() { defer close(rtpDone); serveRTPIngest(rctx, r, uc, first, log) }()
	}
	var result error
	select {
	case <-ctx.Done():
	case err := <-serveErr:
		if !errors.Is(err, http.ErrServerClosed) {
			result = fmt.Errorf("http server: %w", err)
		}
	}
	cancel()
	<-rtpDone
	if err := <-runErr; err != nil && result == nil {
		result = fmt.Errorf("finishing the recording: %w", err)
	}
	sctx, scancel := context.WithTimeout(context.Background(), 3*time.Second)
	defer scancel()
	srv.Shutdown(sctx)
	st := r.Stats()
	log.Info("relay finished", "frames_in", st.FramesIn, "ticks_live", st.TicksLive, "ticks_predicted", st.TicksPredicted, "ticks_stale", st.TicksStale)
	return result
}

// serveRTPIngest hands s to the relay once its first RTP packet arrived and,
// after each session ends, listens again with cfg, until ctx ends.
func serveRTPIngest(ctx context.Context, r *relay.Relay, cfg rtpudp.Config, s *rtpudp.Session, log *slog.Logger) {
	for {
		select {
		case <-s.Started():
			r.Offer(s)
			select {
			case <-s.Done():
			case <-ctx.Done():
			}
		case <-s.Done():
		case <-ctx.Done():
		}
		s.Close()
		if ctx.Err() != nil {
			return
		}
		for {
			var err error
			if s, err = rtpudp.Listen(ctx, cfg); err == nil {
				break
			}
			log.Warn("rtp/udp ingest: listening again failed; retrying in 1 s", "err", err)
			select {
			case <-ctx.Done():
				return
			case <-time.After(time.Second):
			}
		}
	}
}

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

func isLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}
