// Package livedemo runs the live demo: the relay on loopback, a simulated
// drive rendered once into a directory and played from a simulated vehicle
// over WebRTC through an emulated lossy link with scripted outages, and the
// operator console for a browser. The command line only parses flags into
// a Config (cmd/stopgap demo); tests can run it the same way.
package livedemo

import (
	"context"
	"errors"
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
	"stopgap/internal/lossmodel"
	"stopgap/internal/vocab"
	"stopgap/predictor"
	"stopgap/stream/console"
	"stopgap/stream/recording"
	"stopgap/stream/relay"
	"stopgap/stream/simvehicle"
	"stopgap/stream/whip"
)

// OnboardDir is where, inside the Record directory, the simulated vehicle
// keeps its own recording.
const OnboardDir = "onboard"

// DefaultOutages are the scripted outages when Config.Outages is empty: a
// short gap to predict over and a long one that turns STALE, every 10 s.
const DefaultOutages = "3s+400ms@10s,7s+1500ms@10s"

// Config is one run of the live demo. Zero fields take the defaults noted.
type Config struct {
	// Dir is the directory the demo writes into; the simulated drive is
	// rendered into it once and reused ("" = the current directory).
	Dir string
	// Listen is the relay's HTTP address ("" = 127.0.0.1:0, a free port).
	Listen string
	// Record, if set, is a new directory the relay records the session
	// into, with the vehicle's own recording in Record/OnboardDir.
	Record string
	// Width and Height are the simulated camera's size (0 = 640x360);
	// DurationS the drive's length, s (0 = 20; it loops).
	Width, Height int
	DurationS     float64
	// BitrateKbps is the vehicle encoder's bitrate (0 = its default).
	BitrateKbps int
	// Link is the emulated link's packet loss and delay (zero = no loss).
	Link lossmodel.Config
	// Outages are scripted link outages (nil = DefaultOutages).
	Outages []simvehicle.Outage
	// Logger receives the components' logs (nil = discard).
	Logger *slog.Logger
	// Progress, if set, reports the rendering of the drive.
	Progress func(done, total int)
	// Out receives the console URL and the link summary; Status the
	// rendering notes and a status line every StatusEvery (0 = 5 s).
	// nil discards.
	Out, Status io.Writer
	StatusEvery time.Duration
}

// ParseOutages parses a comma-separated list of outages
// (START+DURATION[@EVERY], Go durations).
func ParseOutages(v string) ([]simvehicle.Outage, error) {
	var out []simvehicle.Outage
	for _, part := range strings.Split(v, ",") {
		if strings.TrimSpace(part) == "" {
			continue
		}
		o, err := simvehicle.ParseOutage(part)
		if err != nil {
			return nil, err
		}
		out = append(out, o)
	}
	return out, nil
}

func outageString(l []simvehicle.Outage) string {
	s := make([]string, len(l))
	for i, o := range l {
		s[i] = o.String()
	}
	return strings.Join(s, ",")
}

// withDefaults fills the zero fields.
func (cfg Config) withDefaults() (Config, error) {
	if cfg.Dir == "" {
		cfg.Dir = "."
	}
	if cfg.Listen == "" {
		cfg.Listen = "127.0.0.1:0"
	}
	if cfg.Width == 0 && cfg.Height == 0 {
		cfg.Width, cfg.Height = 640, 360
	}
	if cfg.DurationS == 0 {
		cfg.DurationS = 20
	}
	if cfg.Width <= 0 || cfg.Height <= 0 || cfg.DurationS < 0 || cfg.BitrateKbps < 0 {
		return cfg, fmt.Errorf("livedemo: size %dx%d, duration %g s, bitrate %d kbit/s: want positive sizes and duration, bitrate >= 0",
			cfg.Width, cfg.Height, cfg.DurationS, cfg.BitrateKbps)
	}
	if cfg.Link == (lossmodel.Config{}) {
		cfg.Link.Model = lossmodel.None
	}
	if len(cfg.Outages) == 0 {
		var err error
		if cfg.Outages, err = ParseOutages(DefaultOutages); err != nil {
			return cfg, err
		}
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.New(slog.DiscardHandler)
	}
	if cfg.Out == nil {
		cfg.Out = io.Discard
	}
	if cfg.Status == nil {
		cfg.Status = io.Discard
	}
	if cfg.StatusEvery <= 0 {
		cfg.StatusEvery = 5 * time.Second
	}
	return cfg, nil
}

// Run runs the demo until ctx ends or the vehicle stops.
func Run(ctx context.Context, cfg Config) error {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return err
	}
	drive := filepath.Join(cfg.Dir, fmt.Sprintf("live-drive-%dx%d-%gs", cfg.Width, cfg.Height, cfg.DurationS))
	if _, err := os.Stat(filepath.Join(drive, "frames.csv")); errors.Is(err, os.ErrNotExist) {
		if err := os.MkdirAll(cfg.Dir, 0o755); err != nil {
			return fmt.Errorf("demo directory: %w", err)
		}
		fmt.Fprintf(cfg.Status, "rendering the simulated drive into %s (once)\n", drive)
		err := simdrive.Generate(ctx, simdrive.Config{Width: cfg.Width, Height: cfg.Height, DurationS: cfg.DurationS}, drive,
			cfg.Progress)
		if err != nil {
			return err
		}
	} else {
		fmt.Fprintf(cfg.Status, "reusing the simulated drive in %s\n", drive)
	}
	rec, err := recording.Open(drive)
	if err != nil {
		return fmt.Errorf("%w (delete %s to render it again)", err, drive)
	}
	for _, w := range rec.Warnings {
		cfg.Logger.Warn("drive recording", "warning", w)
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
		Camera:       rec.Camera,
		RecordDir:    cfg.Record,
		IngestToken:  ingestToken,
		ConsoleToken: consoleToken,
		Whip:         whip.Config{Network: whip.Network{LoopbackOnly: true}},
		Logger:       cfg.Logger.With("component", "relay"),
	})
	if err != nil {
		return err
	}
	ln, err := net.Listen("tcp", cfg.Listen)
	if err != nil {
		return fmt.Errorf("listen on %s: %w (choose another listen address)", cfg.Listen, err)
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
			cfg.Logger.Warn("relay shutdown", "err", err)
		}
	}()

	link, err := simvehicle.NewLink(simvehicle.LinkConfig{
		Loss:    cfg.Link,
		Outages: cfg.Outages,
	}, nil)
	if err != nil {
		return err
	}
	var onboard *simvehicle.Onboard
	if cfg.Record != "" {
		onboard, err = simvehicle.NewOnboard(filepath.Join(cfg.Record, OnboardDir), rec.Camera, 0, cfg.Logger.With("component", "onboard"))
		if err != nil {
			return err
		}
		defer func() {
			if err := onboard.Close(); err != nil {
				cfg.Logger.Warn("onboard recording", "err", err)
			}
			st := onboard.Stats()
			fmt.Fprintf(cfg.Status, "vehicle's onboard recording: %d frames, %d telemetry rows (%d dropped) in %s\n", st.Frames, st.Telemetry, st.Dropped, onboard.Dir())
			fmt.Fprintf(cfg.Status, "score the session's drops against it: stopgap replay --drive %s --arrivals %s --out REPORT\n",
				onboard.Dir(), filepath.Join(cfg.Record, recording.ArrivalsFile))
		}()
	}
	veh, err := simvehicle.New(simvehicle.Config{Recording: rec, Link: link, Loop: true, Onboard: onboard,
		BitrateBps: cfg.BitrateKbps * 1000, Logger: cfg.Logger.With("component", "vehicle")})
	if err != nil {
		return err
	}

	fmt.Fprintf(cfg.Out, "operator console: %s\n", rl.ConsoleURL(base))
	fmt.Fprintf(cfg.Out, "link: %.1f%% packet loss in bursts of %g ms, %g ms delay + up to %g ms jitter; outages %s\n",
		100*cfg.Link.LossRate, cfg.Link.BurstMs, cfg.Link.ExtraDelayMs, cfg.Link.JitterMs, outageString(cfg.Outages))
	fmt.Fprintln(cfg.Out, "press Ctrl-C to stop")

	vehDone := make(chan error, 1)
	go func() {
		vehDone <- veh.Publish(ctx, base+"/whip", ingestToken, whip.PublishConfig{
			Network: whip.Network{LoopbackOnly: true}, Logger: cfg.Logger.With("component", "vehicle-webrtc")})
	}()
	status := time.NewTicker(cfg.StatusEvery)
	defer status.Stop()
	for {
		select {
		case err := <-vehDone:
			printStatus(cfg.Status, rl, veh)
			if err != nil && !errors.Is(err, context.Canceled) && !errors.Is(err, context.DeadlineExceeded) {
				return fmt.Errorf("simulated vehicle: %w", err)
			}
			return nil
		case <-status.C:
			printStatus(cfg.Status, rl, veh)
		}
	}
}

// tickStatus says what the latest tick showed: its state and picture age,
// or for NO_PICTURE the state and vocab.NoPicture (no picture, no age).
func tickStatus(st predictor.State, ageMs float64) string {
	switch st {
	case predictor.StateInvalid:
		return "no tick yet"
	case predictor.StateNoPicture:
		return st.String() + ", " + vocab.NoPicture
	}
	return st.String() + ", " + vocab.Age(ageMs)
}

// printStatus writes one status line: the latest tick's state and picture
// age, the relay's counters and the vehicle's.
func printStatus(w io.Writer, rl *relay.Relay, veh *simvehicle.Vehicle) {
	rs, vs := rl.Stats(), veh.Stats()
	now := tickStatus(rs.State, rs.PictureAgeMs)
	fmt.Fprintf(w, "relay: %s; frames in %d, ticks LIVE %d PREDICTED %d STALE %d, losses %d, keyframe requests %d | vehicle: frames %d (skipped %d), keyframes %d, link lost %d + %d in outages of %d packets\n",
		now, rs.FramesIn, rs.TicksLive, rs.TicksPredicted, rs.TicksStale, rs.Losses, rs.KeyframeRequests,
		vs.FramesEncoded, vs.FramesSkipped, vs.Keyframes, vs.Link.PacketsLost, vs.Link.PacketsOutage, vs.Link.PacketsWire)
}
