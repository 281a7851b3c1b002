package relay

import (
	"encoding/json"
	"net/http"
	"sync/atomic"
	"time"
)

// LivenessTimeout is how long the display loop of an active session may go
// without an iteration before /livez reports the relay as stuck. The loop
// wakes at least every IdleWake even without frames, so a healthy loop
// beats several times within it. A design choice: long enough for a
// loaded machine, short enough that an orchestrator restarts a hung relay
// within seconds.
const LivenessTimeout = 5 * time.Second

// IdleWake bounds how long the display loop sleeps before the first frame
// of a session gives it a deadline to wait for.
const IdleWake = time.Second

// Paths of the probe endpoints, served without a token (they reveal only
// whether the relay is up).
const (
	// ReadyPath answers 200 while the relay can accept a vehicle.
	ReadyPath = "/readyz"
	// LivePath answers 200 while the relay's display loop is alive.
	LivePath = "/livez"
)

// probes holds what the readiness and liveness endpoints look at.
type probes struct {
	running atomic.Bool  // Run is serving (set when it starts, cleared when it stops)
	beatUs  atomic.Int64 // receiver-clock time of the display loop's last iteration, µs
}

// beat records one display-loop iteration at now.
func (r *Relay) beat(now time.Time) { r.probe.beatUs.Store(now.UnixMicro()) }

// readyz answers the readiness probe: 200 while Run serves, so a vehicle
// that publishes now is taken (the WHIP endpoint is mounted, the encoder
// and the recording are open); 503 before Run starts and after it stopped.
func (r *Relay) readyz(w http.ResponseWriter, req *http.Request) {
	ready := r.probe.running.Load()
	probeReply(w, ready, map[string]any{"ready": ready})
}

// livez answers the liveness probe: 503 once Run has stopped, or while a
// session is active and its display loop has not iterated for
// LivenessTimeout (it is stuck: restart the relay); 200 otherwise,
// including before Run starts (the startup probe covers that).
func (r *Relay) livez(w http.ResponseWriter, req *http.Request) {
	r.mu.Lock()
	active, closed := r.active, r.closed
	r.mu.Unlock()
	live := !closed
	body := map[string]any{"active_session": active}
	if active {
		sinceMs := float64(r.cfg.Now().UnixMicro()-r.probe.beatUs.Load()) / 1000
		body["display_loop_idle_ms"] = sinceMs
		if sinceMs > float64(LivenessTimeout.Milliseconds()) {
			live = false
		}
	}
	body["live"] = live
	probeReply(w, live, body)
}

func probeReply(w http.ResponseWriter, ok bool, body map[string]any) {
	w.Header().Set("Content-Type", "application/json")
	w.Header().Set("Cache-Control", "no-store")
	if !ok {
		w.WriteHeader(http.StatusServiceUnavailable)
	}
	json.NewEncoder(w).Encode(body)
}
