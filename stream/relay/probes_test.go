package relay

import (
	"context"
	"encoding/json"
	"net/http"
	"net/http/httptest"
	"testing"
	"time"
)

func TestProbes(t *testing.T) {
	clock := &fakeClock{}
	clock.us.Store(1_000_000)
	r := testRelay(t, clock, "")
	h := r.Handler()
	probe := func(path string) (int, map[string]any) {
		t.Helper()
		rec := httptest.NewRecorder()
		h.ServeHTTP(rec, httptest.NewRequest(http.MethodGet, path, nil))
		var body map[string]any
		if err := json.Unmarshal(rec.Body.Bytes(), &body); err != nil {
			t.Fatalf("%s: %v: %q", path, err, rec.Body.String())
		}
		return rec.Code, body
	}
	expect := func(step, path string, want int) map[string]any {
		t.Helper()
		code, body := probe(path)
		if code != want {
			t.Fatalf("%s: GET %s = %d %v, want %d", step, path, code, body, want)
		}
		return body
	}
	expect("before Run", "/readyz", 503)
	expect("before Run", "/livez", 200)

	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- r.Run(ctx) }()
	for i := 0; ; i++ {
		if code, _ := probe("/readyz"); code == 200 {
			break
		}
		if i > 2000 {
			t.Fatal("/readyz never became ready after Run started")
		}
		time.Sleep(5 * time.Millisecond)
	}
	expect("idle", "/livez", 200)

	// A session that starts after a long idle time is live at once; one
	// whose display loop went quiet for longer than LivenessTimeout is not.
	clock.us.Add((10 * LivenessTimeout).Microseconds())
	r.setActive(true)
	expect("session just started", "/livez", 200)
	clock.us.Add((LivenessTimeout + time.Millisecond).Microseconds())
	body := expect("stuck display loop", "/livez", 503)
	if ms, _ := body["display_loop_idle_ms"].(float64); ms <= float64(LivenessTimeout.Milliseconds()) {
		t.Fatalf("display_loop_idle_ms = %v", body["display_loop_idle_ms"])
	}
	r.beat(clock.Now())
	expect("beat again", "/livez", 200)
	r.setActive(false)

	cancel()
	if err := <-done; err != nil {
		t.Fatal(err)
	}
	expect("after Run", "/readyz", 503)
	expect("after Run", "/livez", 503)
}

// TestDisplayLoopBeats checks that serving a session moves the beat the
// liveness probe watches.
func TestDisplayLoopBeats(t *testing.T) {
	clock := &fakeClock{}
	clock.us.Store(1_000_000)
	r := testRelay(t, clock, "")
	runSession(t, r, newFakeVehicle(t, clock, 5, nil))
	if got := r.probe.beatUs.Load(); got < 1_000_000 {
		t.Fatalf("display loop beat at %d us, want >= the session's start", got)
	}
}
