package relay

import (
	"context"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"net/http"
	"strings"
	"sync"
	"time"

	"stopgap/filter"
	"stopgap/internal/display"
	// The relay process's threads sleep with a timer slack of half a
	// millisecond: the Go runtime's monitor thread otherwise wakes every
	// 70 us around each frame's decode (see the package's documentation).
	_ "stopgap/internal/timerslack"
	"stopgap/predictor"
	"stopgap/stream/console"
	"stopgap/stream/ingest"
	"stopgap/stream/operator"
	"stopgap/stream/passthru"
	"stopgap/stream/vp8"
	"stopgap/stream/whip"
)

// Stats are the relay's counters since New.
type Stats struct {
	// Sessions counts ingest sessions served; Active tells whether one is
	// being served now.
	Sessions uint64
	Active   bool
	// FramesIn counts frames received complete and decoded.
	FramesIn uint64
	// TicksLive, TicksPredicted and TicksStale count display ticks sent to
	// the console by state; TicksStale includes the NO_PICTURE ticks, as
	// the replay's summary counts them (both show a held or no picture,
	// never a real or predicted one). TicksNoPicture counts those alone,
	// and TicksNotShown the ticks decided but not put on screen (in none
	// of the others). The metrics export every state on its own.
	TicksLive, TicksPredicted, TicksStale uint64
	TicksNoPicture, TicksNotShown         uint64
	// Losses counts assembler loss events and decode errors; KeyframeRequests
	// the PLIs sent (including retries).
	Losses, KeyframeRequests uint64
	// State and PictureAgeMs describe the latest tick sent to the console
	// (StateInvalid before the first).
	State        predictor.State
	PictureAgeMs float64
	// LateFrames counts frames decoded after their deadline (held, not
	// shown); FramesDropped frames dropped because the display loop was
	// behind.
	LateFrames, FramesDropped uint64
	// Overruns counts ticks decided but not drawn (NOT_SHOWN) because the
	// display loop was more than a period behind their deadline.
	Overruns uint64
	// FramesMovedOn counts frames shown on the first open tick because
	// their own tick was already handled (see the rule in slot.go).
	FramesMovedOn uint64
	// FramesResumed counts the frames of FramesMovedOn shown by the
	// outage rule (slot.go): late, after the picture had passed the age
	// cap.
	FramesResumed uint64
	// TelemetryIn counts samples accepted by the filter; TelemetryRejected
	// those rejected by the decoder, the filter or a full queue.
	TelemetryIn, TelemetryRejected uint64
	// RecordErrors counts failed recording writes.
	RecordErrors uint64
	// LatencyMs is the nominal latency L in use and LatencyKnown whether it
	// is frozen (configured, or estimated over LatencyFrames frames).
	LatencyMs    float64
	LatencyKnown bool
	// AddedLatencyP50Ms and AddedLatencyP99Ms are bucket upper bounds of the
	// relay's added latency for LIVE frames (see /metrics), ms.
	AddedLatencyP50Ms, AddedLatencyP99Ms float64
	// Repair sums the sessions' loss-repair counters (updated about once
	// per second); its RTT is the latest session's.
	Repair ingest.RepairStats
}

// Relay is the live relay between one vehicle (WHIP ingest) and the operator
// console. Create it with New, mount Handler on an HTTP server and call Run.
type Relay struct {
	cfg             Config
	log             *slog.Logger
	whip            *whip.Server
	console         *console.Console
	enc             *vp8.Encoder
	rec             *recorder
	met             *metrics
	mux             *http.ServeMux
	metricsTokenSum [32]byte
	probe           probes // /readyz and /livez (probes.go)

	gate     *passthru.Gate // pass-through of LIVE frames (Config.AlwaysTranscode turns it off)
	incoming chan ingest.Session
	encPtsUs int64 // last encoder timestamp; used only by the serving goroutine
	tracer   frameTracer
	decoded  decodeTracer

	mu          sync.Mutex
	active      bool
	latencyUs   int64
	latencyKnow bool
	closed      bool
	// cmdFlt is the filter of the session being served, which AddCommand
	// feeds; nil between sessions.
	cmdFlt *filter.Filter
}

// New validates cfg, creates the WHIP server, the console, the egress encoder
// and, if cfg.RecordDir is set, the recording (which must not exist yet).
// Call Run to serve; Run releases everything when it returns.
func New(cfg Config) (*Relay, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	r := &Relay{cfg: cfg, log: cfg.Logger, met: newMetrics(), incoming: make(chan ingest.Session, 1),
		gate: &passthru.Gate{Off: cfg.AlwaysTranscode}}
	r.metricsTokenSum = sha256.Sum256([]byte(cfg.ConsoleToken))

	r.enc, err = vp8.NewEncoder(cfg.Encoder)
	if err != nil {
		return nil, fmt.Errorf("relay: egress encoder: %w", err)
	}
	cc := cfg.Console
	cc.Token = cfg.ConsoleToken
	cc.Logger = cfg.Logger.With("component", "console")
	if cc.Now == nil {
		cc.Now = cfg.Now
	}
	enc, gate := r.enc, r.gate
	cc.KeyframeNeeded = func(console.KeyframeReason) {
		enc.ForceKeyframe()
		gate.ViewerWantsKeyframe() // while frames pass through, only the vehicle can send one
	}
	r.console, err = console.New(cc)
	if err != nil {
		r.enc.Close()
		return nil, fmt.Errorf("relay: console: %w", err)
	}
	wc := cfg.Whip
	wc.Token = cfg.IngestToken
	wc.Logger = cfg.Logger.With("component", "whip")
	wc.OnSession = r.offer
	r.whip, err = whip.NewServer(wc)
	if err != nil {
		r.console.Close()
		r.enc.Close()
		return nil, fmt.Errorf("relay: ingest: %w", err)
	}
	if cfg.RecordDir != "" {
		r.rec, err = newRecorder(cfg, r.met)
		if err != nil {
			r.whip.Close()
			r.console.Close()
			r.enc.Close()
			return nil, err
		}
	}
	r.mux = http.NewServeMux()
	r.mux.Handle("/whip", r.whip)
	r.mux.Handle("/whip/", r.whip)
	r.mux.HandleFunc("/healthz", r.healthz)
	r.mux.HandleFunc(ReadyPath, r.readyz)
	r.mux.HandleFunc(LivePath, r.livez)
	r.mux.HandleFunc("/metrics", r.metrics)
	r.mux.Handle("/", r.console)
	return r, nil
}

// offer hands a connected WHIP session to Run. A newer session replaces the
// one being served (a vehicle that lost its path publishes again).
func (r *Relay) offer(s *whip.Session) { r.Offer(s) }

// Offer hands an ingest session to Run, which serves one session at a time:
// the newest replaces the current one, which is closed. Sessions offered after
// Run returned are closed at once.
func (r *Relay) Offer(s ingest.Session) {
	r.mu.Lock()
	closed := r.closed
	r.mu.Unlock()
	if closed {
		s.Close()
		return
	}
	for {
		select {
		case r.incoming <- s:
			return
		default:
		}
		select { // replace a queued, not yet served session
		case old := <-r.incoming:
			old.Close()
		default:
		}
	}
}

// Handler returns the HTTP handler: the WHIP ingest at /whip (bearer
// IngestToken), /healthz (no token; liveness JSON only), /metrics (bearer
// ConsoleToken) and the operator console at / (its API needs ConsoleToken).
func (r *Relay) Handler() http.Handler { return r.mux }

// ConsoleURL returns the operator page URL under base (e.g.
// "https://127.0.0.1:8443") with the console token in the URL fragment, which
// browsers never send to a server. Show it to the operator only; never log it.
func (r *Relay) ConsoleURL(base string) string { return r.console.PageURL(base) }

// Console returns the operator console (for its cutoff and stats).
func (r *Relay) Console() *console.Console { return r.console }

// Stats returns a snapshot of the relay's counters.
func (r *Relay) Stats() Stats {
	r.mu.Lock()
	active, lat, known := r.active, r.latencyUs, r.latencyKnow
	r.mu.Unlock()
	m := r.met
	return Stats{
		Sessions: m.sessions.Load(), Active: active,
		FramesIn:  m.framesIn.Load(),
		TicksLive: m.ticks[display.StateLive].Load(), TicksPredicted: m.ticks[display.StatePredicted].Load(),
		TicksStale:     m.ticks[display.StateStale].Load() + m.ticks[display.StateNoPicture].Load(),
		TicksNoPicture: m.ticks[display.StateNoPicture].Load(), TicksNotShown: m.ticks[display.StateNotShown].Load(),
		Losses: m.losses.Load(), KeyframeRequests: m.keyframeRequestsSent(),
		State: predictor.State(m.stateNow.Load()), PictureAgeMs: float64(m.pictureAge.Load()) / 1000,
		LateFrames: m.lateFrames.Load(), FramesDropped: m.framesDropped.Load(), Overruns: m.overruns.Load(), FramesMovedOn: m.framesMovedOn.Load(), FramesResumed: m.framesResumed.Load(),
		TelemetryIn: m.telemetryIn.Load(), TelemetryRejected: m.telemetryRejected.total(),
		RecordErrors: m.recordErrors.Load(),
		LatencyMs:    float64(lat) / 1000, LatencyKnown: known,
		AddedLatencyP50Ms: m.addedLatency.quantile(0.5) * 1000, AddedLatencyP99Ms: m.addedLatency.quantile(0.99) * 1000,
		Repair: ingest.RepairStats{Gaps: m.repairGaps.Load(), Repaired: m.repairRepaired.Load(), GaveUp: m.repairGaveUp.Load(),
			Cancelled: m.repairCancelled.Load(), SkippedGaps: m.repairSkipped.Load(), RTT: time.Duration(m.repairRTTUs.Load()) * time.Microsecond},
	}
}

// Run serves offered sessions one at a time until ctx ends, then closes the
// current session, the ingest server, the console, the encoder and the
// recording. It returns nil after a cancelled ctx, or the first error
// closing the recording. Run may be called once.
func (r *Relay) Run(ctx context.Context) error {
	r.mu.Lock()
	if r.closed {
		r.mu.Unlock()
		return ErrClosed
	}
	r.mu.Unlock()
	r.probe.running.Store(true)
	var next ingest.Session
	for {
		if next == nil {
			select {
			case <-ctx.Done():
			case next = <-r.incoming:
			}
		}
		if ctx.Err() != nil {
			if next != nil {
				next.Close()
			}
			break
		}
		s := next
		next = nil
		sctx, cancel := context.WithCancel(ctx)
		done := make(chan error, 1)
		go func() { done <- r.Serve(sctx, s) }()
		select {
		case err := <-done:
			cancel()
			if err != nil && !errors.Is(err, context.Canceled) {
				r.log.Warn("session ended with an error", "session", short(s.ID()), "err", err)
			}
		case next = <-r.incoming:
			r.log.Info("a new ingest session replaces the current one", "old", short(s.ID()), "new", short(next.ID()))
			cancel()
			<-done
		case <-ctx.Done():
			cancel()
			<-done
		}
	}
	return r.shutdown()
}

func (r *Relay) shutdown() error {
	r.probe.running.Store(false)
	r.mu.Lock()
	r.closed = true
	r.mu.Unlock()
	for {
		select {
		case s := <-r.incoming:
			s.Close()
			continue
		default:
		}
		break
	}
	r.whip.Close()
	r.console.Close()
	var err error
	if r.rec != nil {
		err = r.rec.close()
	}
	r.enc.Close()
	st := r.Stats()
	r.log.Info("relay stopped", "frames_in", st.FramesIn, "ticks_live", st.TicksLive,
		"ticks_predicted", st.TicksPredicted, "ticks_stale", st.TicksStale, "ticks_not_shown", st.TicksNotShown)
	return err
}

// Serve runs the pipeline for one session until it ends or ctx is cancelled,
// then closes it. Run calls it for every offered session; call it directly
// only when not using Run (tests, custom ingest). Sessions must not be served
// concurrently: the egress encoder and the recording are shared.
func (r *Relay) Serve(ctx context.Context, s ingest.Session) error {
	r.met.sessions.Add(1)
	r.setActive(true)
	defer r.setActive(false)
	defer s.Close()
	p, err := newPipeline(r, s)
	if err != nil {
		return err
	}
	defer p.close()
	r.mu.Lock()
	r.cmdFlt = p.flt
	r.mu.Unlock()
	defer func() {
		r.mu.Lock()
		r.cmdFlt = nil
		r.mu.Unlock()
	}()
	return p.run(ctx)
}

// AddCommand gives one operator command to the filter of the session being
// served (filter.Filter.AddCommand: used by the bicycle model, with
// Config.Filter.Actuator). Its TimeUs must be on the vehicle clock (keep the
// station's clock synchronised with the vehicle's). Safe to call from any
// goroutine; between sessions it returns ErrNoSession and the command is
// dropped.
func (r *Relay) AddCommand(c filter.Command) error {
	r.mu.Lock()
	flt := r.cmdFlt
	r.mu.Unlock()
	if flt == nil {
		return ErrNoSession
	}
	return flt.AddCommand(c)
}

// ControlsChannel returns the operator's command channel of this relay (an
// operator.ControlsChannel, to serve at POST /api/controls): guarded by
// Config.ConsoleToken, stamped with Config.Now, it hands every accepted
// command to AddCommand (a command that arrives between sessions, or that
// the filter refuses, is logged at debug level and dropped). known and log
// are the channel's Known and Log (nil: any valid name, not recorded).
func (r *Relay) ControlsChannel(known func(name string) bool, log *operator.ControlsWriter) *operator.ControlsChannel {
	return &operator.ControlsChannel{Token: r.cfg.ConsoleToken, Now: r.cfg.Now, Known: known, Log: log,
		Sink: func(c operator.Control) {
			if err := r.AddCommand(c.Command()); err != nil {
				r.log.Debug("operator command not used", "t_us", c.TUs, "err", err)
			}
		}}
}

func (r *Relay) setActive(a bool) {
	if a {
		r.beat(r.cfg.Now()) // the session starts now, not at the last session's beat
	}
	r.mu.Lock()
	r.active = a
	if !a {
		r.latencyKnow = false
	}
	r.mu.Unlock()
}

func (r *Relay) setLatency(us int64, known bool) {
	r.mu.Lock()
	r.latencyUs, r.latencyKnow = us, known
	r.mu.Unlock()
}

func (r *Relay) healthz(w http.ResponseWriter, req *http.Request) {
	st := r.Stats()
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	json.NewEncoder(w).Encode(map[string]any{
		"status": "ok", "active_session": st.Active, "frames_in": st.FramesIn,
		"ticks_live": st.TicksLive, "ticks_predicted": st.TicksPredicted, "ticks_stale": st.TicksStale,
	})
}

func (r *Relay) metrics(w http.ResponseWriter, req *http.Request) {
	tok, ok := strings.CutPrefix(req.Header.Get("Authorization"), "Bearer ")
	sum := sha256.Sum256([]byte(tok))
	if !ok || subtle.ConstantTimeCompare(sum[:], r.metricsTokenSum[:]) != 1 {
		w.Header().Set("WWW-Authenticate", `Bearer realm="stopgap"`)
		http.Error(w, "missing or wrong bearer token (use the console token)", http.StatusUnauthorized)
		return
	}
	w.Header().Set("Content-Type", "text/plain; version=0.0.4; charset=utf-8")
	active := 0
	if r.Stats().Active {
		active = 1
	}
	r.met.writeText(w, active, r.gate.Stats())
}

func short(id string) string {
	if len(id) > 8 {
		return id[:8]
	}
	return id
}
