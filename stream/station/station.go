// Package station runs the relay as a service on one host: the HTTP(S)
// listener for WHIP ingest, the console and the probes, the operator's
// control log beside a recording, the reload of operator profiles changed
// while it runs, the optional plain RTP/UDP ingest, and an orderly
// shutdown. "stopgap relay" parses its flags into a Config and calls
// Serve.
package station

import (
	"context"
	"crypto/tls"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net"
	"net/http"
	"time"

	"stopgap/stream/operator"
	"stopgap/stream/relay"
	"stopgap/stream/rtpudp"
)

// Config is one relay service.
type Config struct {
	// Relay is the relay's own configuration; its ConsoleToken also guards
	// the operator's command channel (/api/controls, served always: the
	// commands feed the filter), and with RecordDir set they are recorded
	// there (operator.ControlsFile).
	Relay relay.Config
	// Listen is the TCP address to serve on. Without CertFile and KeyFile
	// it must be a loopback address: bearer tokens never cross a network
	// in clear text.
	Listen string
	// CertFile and KeyFile (PEM) serve HTTPS; give both or neither.
	CertFile, KeyFile string
	// RTP configures the plain RTP/UDP ingest; RTPAddr "" leaves it off.
	RTP rtpudp.Config
	// IngestTokenGenerated and ConsoleTokenGenerated say the tokens were
	// made up at start: the ingest token is then printed once on Out (it
	// never goes to the logs).
	IngestTokenGenerated, ConsoleTokenGenerated bool
	// ProfileReload is how often profiles changed by other processes are
	// read again (0 = 1 s).
	ProfileReload time.Duration
	// Out receives the endpoints (nil discards); logs go to Relay.Logger.
	Out io.Writer
	// KnownOperator reports whether name is an operator profile: commands
	// on /api/controls naming another are rejected and counted. Nil
	// accepts any valid name (operator.ControlsChannel.Known).
	KnownOperator func(name string) bool
}

// ErrConfig means a Config cannot be served as given.
var ErrConfig = errors.New("station: unusable configuration")

func (cfg Config) useTLS() bool { return cfg.CertFile != "" }

// check validates the listener settings.
func (cfg Config) check() error {
	if (cfg.CertFile == "") != (cfg.KeyFile == "") {
		return fmt.Errorf("%w: give both a TLS certificate and key, or neither", ErrConfig)
	}
	host, _, err := net.SplitHostPort(cfg.Listen)
	if err != nil {
		return fmt.Errorf("%w: listen address %q: %w", ErrConfig, cfg.Listen, err)
	}
	if !cfg.useTLS() && !isLoopback(host) {
		return fmt.Errorf("%w: %s is not a loopback address: bearer tokens would cross the network in clear text; give a TLS certificate and key", ErrConfig, cfg.Listen)
	}
	return nil
}

// Check reports whether cfg can be served, before anything is started.
func (cfg Config) Check() error { return cfg.check() }

// Serve runs the relay service until ctx ends or the HTTP server fails,
// then finishes the recording and shuts down.
func Serve(ctx context.Context, cfg Config) error {
	if err := cfg.check(); err != nil {
		return err
	}
	if cfg.Out == nil {
		cfg.Out = io.Discard
	}
	if cfg.ProfileReload <= 0 {
		cfg.ProfileReload = time.Second
	}
	log := cfg.Relay.Logger
	if log == nil {
		log = slog.New(slog.DiscardHandler)
		cfg.Relay.Logger = log
	}
	r, err := relay.New(cfg.Relay)
	if err != nil {
		return err
	}
	// release ends a relay that never ran: Run with an ended context
	// closes the ingest, the console, the encoder and the recording.
	release := func() {
		ended, end := context.WithCancel(context.Background())
		end()
		if err := r.Run(ended); err != nil {
			log.Warn("closing the relay after a failed start", "err", err)
		}
	}
	// The operator station's commands: recorded beside the drive (see
	// operator.ControlsFile) and the bicycle model's control input.
	var cw *operator.ControlsWriter
	if cfg.Relay.RecordDir != "" {
		if cw, err = operator.CreateControls(cfg.Relay.RecordDir); err != nil {
			release()
			return fmt.Errorf("station: control log in %s: %w", cfg.Relay.RecordDir, err)
		}
		defer cw.Close()
	}
	ln, err := net.Listen("tcp", cfg.Listen)
	if err != nil {
		release()
		return fmt.Errorf("station: listen on %s: %w; choose a free address or stop what holds it", cfg.Listen, err)
	}
	scheme := "http"
	if cfg.useTLS() {
		scheme = "https"
	}
	base := scheme + "://" + ln.Addr().String()
	handler := r.Handler()
	controls := r.ControlsChannel(cfg.KnownOperator, cw)
	mux := http.NewServeMux()
	mux.Handle("/api/controls", controls)
	mux.Handle("/", handler)
	handler = mux
	srv := &http.Server{Handler: handler, ReadHeaderTimeout: 10 * time.Second,
		TLSConfig: &tls.Config{MinVersion: tls.VersionTLS12}, ErrorLog: slog.NewLogLogger(log.Handler(), slog.LevelWarn)}
	serveErr := make(chan error, 1)
	go func() {
		if cfg.useTLS() {
			serveErr <- srv.ServeTLS(ln, cfg.CertFile, cfg.KeyFile)
		} else {
			serveErr <- srv.Serve(ln)
		}
	}()
	// Secrets go to stdout once, never to the logs.
	fmt.Fprintf(cfg.Out, "WHIP endpoint: %s/whip\n", base)
	if cfg.IngestTokenGenerated {
		fmt.Fprintf(cfg.Out, "WHIP bearer token (generated): %s\n", cfg.Relay.IngestToken)
	}
	if cfg.ConsoleTokenGenerated {
		fmt.Fprintln(cfg.Out, "console token generated")
	}
	fmt.Fprintf(cfg.Out, "operator console: %s\n", r.ConsoleURL(base))
	log.Info("relay listening", "addr", ln.Addr().String(), "tls", cfg.useTLS(), "record", cfg.Relay.RecordDir)

	rctx, cancel := context.WithCancel(ctx)
	defer cancel()
	// Changes made with "stopgap operator" while the relay runs reach the
	// console within a second.
	go func() {
		t := time.NewTicker(cfg.ProfileReload)
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
	if cfg.RTP.RTPAddr == "" {
		if cfg.RTP.TelemetryAddr != "" {
			log.Warn("the telemetry address is ignored without an RTP address")
		}
		close(rtpDone)
	} else {
		uc := cfg.RTP
		if uc.Logger == nil {
			uc.Logger = log.With("component", "rtpudp")
		}
		first, err := rtpudp.Listen(rctx, uc)
		if err != nil {
			cancel()
			<-runErr
			srv.Close()
			return fmt.Errorf("station: RTP/UDP ingest: %w", err)
		}
		fmt.Fprintf(cfg.Out, "RTP/UDP ingest: %s\n", first.RTPAddr())
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

func isLoopback(host string) bool {
	if host == "localhost" {
		return true
	}
	ip := net.ParseIP(host)
	return ip != nil && ip.IsLoopback()
}
