package whip

import (
	"context"
	"io"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/pion/webrtc/v4"
)

const testToken = "test-token-0123456789abcdef"

// fakeClock is a manual Clock for rate-limit and timeout tests.
type fakeClock struct {
	mu     sync.Mutex
	now    time.Time
	timers []*fakeTimer
}

type fakeTimer struct {
	c       *fakeClock
	at      time.Time
	f       func()
	stopped bool
	fired   bool
}

func newFakeClock() *fakeClock { return &fakeClock{now: time.Unix(1_700_000_000, 0)} }

func (c *fakeClock) Now() time.Time {
	c.mu.Lock()
	defer c.mu.Unlock()
	return c.now
}

func (c *fakeClock) AfterFunc(d time.Duration, f func()) Stopper {
	c.mu.Lock()
	defer c.mu.Unlock()
	t := &fakeTimer{c: c, at: c.now.Add(d), f: f}
	c.timers = append(c.timers, t)
	return t
}

func (t *fakeTimer) Stop() bool {
	t.c.mu.Lock()
	defer t.c.mu.Unlock()
	was := !t.stopped && !t.fired
	t.stopped = true
	return was
}

// Advance moves the clock and runs due timers synchronously.
func (c *fakeClock) Advance(d time.Duration) {
	c.mu.Lock()
	c.now = c.now.Add(d)
	var due []*fakeTimer
	for _, t := range c.timers {
		if !t.stopped && !t.fired && !t.at.After(c.now) {
			t.fired = true
			due = append(due, t)
		}
	}
	c.mu.Unlock()
	for _, t := range due {
		t.f()
	}
}

// newTestServer starts a loopback-only WHIP server mounted at /whip/ on an httptest server (127.0.0.1).
func newTestServer(t testing.TB, cfg Config) (*Server, *httptest.Server) {
	t.Helper()
	if cfg.Token == "" {
		cfg.Token = testToken
	}
	cfg.Network.LoopbackOnly = true
	if cfg.PostBurst == 0 {
		cfg.PostBurst = 1000
		cfg.PostRatePerS = 1000
	}
	srv, err := NewServer(cfg)
	if err != nil {
		t.Fatal(err)
	}
	mux := http.NewServeMux()
	mux.Handle("/whip/", srv)
	mux.Handle("/whip", srv)
	hs := httptest.NewServer(mux)
	t.Cleanup(func() {
		hs.Close()
		srv.Close()
	})
	return srv, hs
}

// makeOffer returns a complete SDP offer from a loopback-only pion PeerConnection configured like the
// publisher (sendonly VP8 + telemetry data channel). The PeerConnection is closed at test end, so the
// offer can never connect unless the caller applies an answer.
func makeOffer(t testing.TB) string {
	t.Helper()
	_, sdp := makeOfferPC(t)
	return sdp
}

// makeOfferPC is makeOffer returning the PeerConnection too, so a test can apply the answer; extra data
// channels with the given labels are added to the offer.
func makeOfferPC(t testing.TB, extraLabels ...string) (*webrtc.PeerConnection, string) {
	t.Helper()
	me, err := newMediaEngine()
	if err != nil {
		t.Fatal(err)
	}
	api := webrtc.NewAPI(webrtc.WithMediaEngine(me),
		webrtc.WithSettingEngine(newSettingEngine(Network{LoopbackOnly: true}, slog.New(slog.DiscardHandler))))
	pc, err := api.NewPeerConnection(webrtc.Configuration{})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = pc.Close() })
	track, err := webrtc.NewTrackLocalStaticRTP(webrtc.RTPCodecCapability{MimeType: webrtc.MimeTypeVP8, ClockRate: 90000}, "v", "s")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := pc.AddTransceiverFromTrack(track, webrtc.RTPTransceiverInit{Direction: webrtc.RTPTransceiverDirectionSendonly}); err != nil {
		t.Fatal(err)
	}
	for _, l := range append([]string{TelemetryLabel}, extraLabels...) {
		if _, err := pc.CreateDataChannel(l, nil); err != nil {
			t.Fatal(err)
		}
	}
	offer, err := pc.CreateOffer(nil)
	if err != nil {
		t.Fatal(err)
	}
	g := webrtc.GatheringCompletePromise(pc)
	if err := pc.SetLocalDescription(offer); err != nil {
		t.Fatal(err)
	}
	select {
	case <-g:
	case <-time.After(5 * time.Second):
		t.Fatal("gathering timed out")
	}
	return pc, pc.LocalDescription().SDP
}

// do sends one request and returns the response with its body read.
func do(t testing.TB, method, url, token, contentType string, body io.Reader) (*http.Response, string) {
	t.Helper()
	req, err := http.NewRequestWithContext(context.Background(), method, url, body)
	if err != nil {
		t.Fatal(err)
	}
	if token != "" {
		req.Header.Set("Authorization", "Bearer "+token)
	}
	if contentType != "" {
		req.Header.Set("Content-Type", contentType)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, _ := io.ReadAll(resp.Body)
	return resp, string(b)
}

func post(t testing.TB, hs string, offer string) (*http.Response, string) {
	t.Helper()
	return do(t, http.MethodPost, hs+"/whip", testToken, "application/sdp", strings.NewReader(offer))
}

// waitFor polls cond until it holds or the deadline passes.
func waitFor(t testing.TB, d time.Duration, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(d)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out after %v waiting for %s", d, what)
		}
		time.Sleep(5 * time.Millisecond)
	}
}

// newHTTPTestServer serves h on 127.0.0.1 and returns its base URL.
func newHTTPTestServer(t testing.TB, h http.Handler) string {
	hs := httptest.NewServer(h)
	t.Cleanup(hs.Close)
	return hs.URL
}
