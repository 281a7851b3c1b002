package relay

import (
	"errors"
	"net/http"
	"net/http/httptest"
	"testing"

	"stopgap/internal/display"
	"stopgap/predictor"
	"stopgap/stream/cadence"
	"stopgap/stream/console"
)

// TestTickMetaStates: the console is told each tick's own state, with a
// picture age only when a picture is on screen, and every message passes
// console.Meta.Validate.
func TestTickMetaStates(t *testing.T) {
	pol := predictor.Policy{CutoffConfidence: 0.6, MaxAgeMs: 800}
	tests := []struct {
		name        string
		tick        predictor.Tick
		havePicture bool
		wantAge     float64
		wantWhy     string
	}{
		{"live", predictor.Tick{State: predictor.StateLive, Confidence: 1}, true, 0, ""},
		{"predicted", predictor.Tick{State: predictor.StatePredicted, AgeMs: 133, Confidence: 0.8}, true, 133, ""},
		{"stale", predictor.Tick{State: predictor.StateStale, AgeMs: 400, Confidence: 0.3}, true, 400, "low-confidence"},
		{"stale past the cap", predictor.Tick{State: predictor.StateStale, AgeMs: 900, Confidence: 0.9}, true, 900, "age-over-cap"},
		{"no picture", predictor.Tick{State: predictor.StateNoPicture}, false, 0, ""},
		{"no picture with a stray age", predictor.Tick{State: predictor.StateNoPicture, AgeMs: 12}, false, 0, ""},
	}
	for _, tc := range tests {
		m := tickMeta(tc.tick, 1_000_000, pol, tc.havePicture)
		if m.State != tc.tick.State || m.AgeMs != tc.wantAge || m.Why != tc.wantWhy || m.TimeUs != 1_000_000 || m.Cutoff != 0.6 || m.MaxAgeMs != 800 {
			t.Errorf("%s: %+v; want state %v, age %v, why %q", tc.name, m, tc.tick.State, tc.wantAge, tc.wantWhy)
		}
		if err := m.Validate(); err != nil {
			t.Errorf("%s: %v", tc.name, err)
		}
	}
	ns := notShownMeta(cadence.Tick{K: 7, TargetUs: 233331, Policy: pol}, 800)
	if ns.State != display.StateNotShown || ns.AgeMs != 0 || ns.TimeUs != 233331 || ns.Cutoff != 0.6 {
		t.Errorf("NOT_SHOWN meta %+v", ns)
	}
	if err := ns.Validate(); err != nil {
		t.Errorf("NOT_SHOWN meta: %v", err)
	}
	// The console refuses an age for a tick without a picture.
	ns.AgeMs = 33
	if err := ns.Validate(); !errors.Is(err, console.ErrBadMeta) {
		t.Errorf("NOT_SHOWN with an age accepted")
	}
}

// TestSendMetaPeriod: every status message carries the display clock's
// tick period, the spacing the page expects statuses at (a LIVE status
// expires after a few of them, console.StatusLateAfterMs), for a camera
// that is not the default 30 fps too.
func TestSendMetaPeriod(t *testing.T) {
	r, p, done := pipelineOnFakeVehicle(t, Config{Camera: testCamera(), FPS: 25})
	defer done()
	p.sendMeta(notShownMeta(cadence.Tick{K: 1, TargetUs: 40_000, Policy: predictor.Policy{CutoffConfidence: 0.6}}, 800))
	req := httptest.NewRequest("GET", "/api/meta", nil)
	req.Header.Set("Authorization", "Bearer "+testConsoleToken)
	rec := httptest.NewRecorder()
	r.console.ServeHTTP(rec, req)
	if rec.Code != http.StatusOK {
		t.Fatalf("GET /api/meta: %d %s", rec.Code, rec.Body)
	}
	m, err := console.ParseMeta(rec.Body.Bytes())
	if err != nil {
		t.Fatal(err)
	}
	if m.PeriodMs != 40 {
		t.Errorf("period_ms %v at 25 fps, want 40", m.PeriodMs)
	}
	if got := console.StatusLateAfterMs(m.PeriodMs); got != 120 {
		t.Errorf("a LIVE status at 25 fps stays good for %v ms, want 3 periods, 120", got)
	}
}
