package whip

import (
	"bytes"
	"errors"
	"fmt"
	"log/slog"
	"net/http"
	"net/http/httptest"
	"regexp"
	"strings"
	"sync"
	"testing"
	"time"
)

func TestNewServerNeedsToken(t *testing.T) {
	if _, err := NewServer(Config{}); !errors.Is(err, ErrNoToken) {
		t.Fatalf("NewServer without token: err = %v, want ErrNoToken", err)
	}
	if _, err := NewServer(Config{Token: "x", MaxSessions: -1}); !errors.Is(err, ErrBadConfig) {
		t.Fatalf("negative MaxSessions: err = %v, want ErrBadConfig", err)
	}
}

// lockedBuffer is a log sink that the test reads while the server's and
// pion's goroutines still write to it.
type lockedBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (l *lockedBuffer) Write(p []byte) (int, error) {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Write(p)
}

func (l *lockedBuffer) String() string {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.String()
}

func (l *lockedBuffer) Len() int {
	l.mu.Lock()
	defer l.mu.Unlock()
	return l.b.Len()
}

func TestAuth(t *testing.T) {
	var logBuf lockedBuffer
	logger := slog.New(slog.NewTextHandler(&logBuf, &slog.HandlerOptions{Level: slog.LevelDebug}))
	srv, hs := newTestServer(t, Config{Logger: logger})
	offer := makeOffer(t)
	tests := []struct {
		name       string
		authHeader string
		wantStatus int
		wantReason RejectReason
	}{
		{"missing", "", http.StatusUnauthorized, RejectUnauthorized},
		{"wrong token", "Bearer nope", http.StatusUnauthorized, RejectUnauthorized},
		{"token prefix", "Bearer " + testToken[:10], http.StatusUnauthorized, RejectUnauthorized},
		{"wrong scheme", "Basic " + testToken, http.StatusUnauthorized, RejectUnauthorized},
		{"right token", "Bearer " + testToken, http.StatusCreated, RejectInvalid},
		{"scheme case-insensitive", "bearer " + testToken, http.StatusCreated, RejectInvalid},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			before := srv.Stats().Rejections[RejectUnauthorized]
			req, _ := http.NewRequest(http.MethodPost, hs.URL+"/whip", strings.NewReader(offer))
			req.Header.Set("Content-Type", "application/sdp")
			if tc.authHeader != "" {
				req.Header.Set("Authorization", tc.authHeader)
			}
			resp, err := http.DefaultClient.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			resp.Body.Close()
			if resp.StatusCode != tc.wantStatus {
				t.Fatalf("status %d, want %d", resp.StatusCode, tc.wantStatus)
			}
			if tc.wantStatus == http.StatusUnauthorized {
				if !strings.HasPrefix(resp.Header.Get("WWW-Authenticate"), "Bearer") {
					t.Errorf("WWW-Authenticate = %q", resp.Header.Get("WWW-Authenticate"))
				}
				if got := srv.Stats().Rejections[RejectUnauthorized]; got != before+1 {
					t.Errorf("unauthorized count %d -> %d", before, got)
				}
			}
		})
	}
	// DELETE also needs the token.
	resp, _ := post(t, hs.URL, offer)
	loc := resp.Header.Get("Location")
	if r, _ := do(t, http.MethodDelete, hs.URL+loc, "", "", nil); r.StatusCode != http.StatusUnauthorized {
		t.Errorf("DELETE without token: %d, want 401", r.StatusCode)
	}
	if r, _ := do(t, http.MethodDelete, hs.URL+loc, "wrong", "", nil); r.StatusCode != http.StatusUnauthorized {
		t.Errorf("DELETE with wrong token: %d, want 401", r.StatusCode)
	}
	if strings.Contains(logBuf.String(), testToken) || strings.Contains(logBuf.String(), testToken[:10]) {
		t.Error("token appears in the log")
	}
	if logBuf.Len() == 0 {
		t.Error("nothing logged at debug level; the token check above proves nothing")
	}
}

func TestOptionsPreflightNeedsNoAuth(t *testing.T) {
	_, hs := newTestServer(t, Config{})
	resp, _ := do(t, http.MethodOptions, hs.URL+"/whip", "", "", nil)
	if resp.StatusCode != http.StatusNoContent {
		t.Fatalf("OPTIONS: %d, want 204", resp.StatusCode)
	}
	for h, want := range map[string]string{
		"Access-Control-Allow-Origin":  "*",
		"Access-Control-Allow-Methods": "POST, DELETE, OPTIONS",
		"Accept-Post":                  "application/sdp",
	} {
		if got := resp.Header.Get(h); got != want {
			t.Errorf("%s = %q, want %q", h, got, want)
		}
	}
	if !strings.Contains(resp.Header.Get("Access-Control-Allow-Headers"), "Authorization") {
		t.Errorf("Allow-Headers %q lacks Authorization", resp.Header.Get("Access-Control-Allow-Headers"))
	}
}

// Offers built by hand for the 400 paths; session-level lines are the minimum pion's parser accepts.
const sdpHead = "v=0\r\no=- 1 1 IN IP4 127.0.0.1\r\ns=-\r\nt=0 0\r\n"

func TestPostRejections(t *testing.T) {
	srv, hs := newTestServer(t, Config{MaxOfferBytes: 8 << 10})
	valid := makeOffer(t)
	tests := []struct {
		name        string
		contentType string
		body        string
		chunked     bool
		wantStatus  int
		wantReason  RejectReason
		wantInBody  string
	}{
		{"wrong content type", "text/plain", valid, false, 415, RejectUnsupportedMediaType, "application/sdp"},
		{"no content type", "", valid, false, 415, RejectUnsupportedMediaType, "application/sdp"},
		{"too large", "application/sdp", valid + strings.Repeat("a=x\r\n", 3000), false, 413, RejectBodyTooLarge, "larger"},
		{"too large chunked", "application/sdp", valid + strings.Repeat("a=x\r\n", 3000), true, 413, RejectBodyTooLarge, "larger"},
		{"empty", "application/sdp", "", false, 400, RejectBadOffer, "empty"},
		{"garbage", "application/sdp", "hello", false, 400, RejectBadOffer, "parse"},
		{"audio only", "application/sdp", sdpHead + "m=audio 9 UDP/TLS/RTP/SAVPF 111\r\na=rtpmap:111 opus/48000/2\r\n", false, 400, RejectBadOffer, "no video"},
		{"H264 only", "application/sdp", sdpHead + "m=video 9 UDP/TLS/RTP/SAVPF 102\r\na=rtpmap:102 H264/90000\r\n", false, 400, RejectBadOffer, "VP8"},
		{"VP8 rtpmap for unlisted format", "application/sdp", sdpHead + "m=video 9 UDP/TLS/RTP/SAVPF 102\r\na=rtpmap:96 VP8/90000\r\n", false, 400, RejectBadOffer, "VP8"},
		{"recvonly", "application/sdp", sdpHead + "m=video 9 UDP/TLS/RTP/SAVPF 96\r\na=rtpmap:96 VP8/90000\r\na=recvonly\r\n", false, 400, RejectBadOffer, "recvonly"},
		{"two videos", "application/sdp", sdpHead + "m=video 9 UDP/TLS/RTP/SAVPF 96\r\na=rtpmap:96 VP8/90000\r\nm=video 9 UDP/TLS/RTP/SAVPF 96\r\na=rtpmap:96 VP8/90000\r\n", false, 400, RejectBadOffer, "2 video"},
		// Passes our check, then the WebRTC stack refuses it (no ICE credentials, no fingerprint).
		{"no ICE credentials", "application/sdp", sdpHead + "m=video 9 UDP/TLS/RTP/SAVPF 96\r\na=rtpmap:96 VP8/90000\r\na=sendonly\r\n", false, 400, RejectBadOffer, "WebRTC stack"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			before := srv.Stats().Rejections[tc.wantReason]
			var body = strings.NewReader(tc.body)
			req, _ := http.NewRequest(http.MethodPost, hs.URL+"/whip", body)
			if tc.chunked {
				req, _ = http.NewRequest(http.MethodPost, hs.URL+"/whip", struct{ *strings.Reader }{body})
				req.ContentLength = -1
			}
			req.Header.Set("Authorization", "Bearer "+testToken)
			if tc.contentType != "" {
				req.Header.Set("Content-Type", tc.contentType)
			}
			resp, err := http.DefaultClient.Do(req)
			if err != nil {
				t.Fatal(err)
			}
			var buf bytes.Buffer
			_, _ = buf.ReadFrom(resp.Body)
			resp.Body.Close()
			if resp.StatusCode != tc.wantStatus {
				t.Fatalf("status %d, want %d; body %q", resp.StatusCode, tc.wantStatus, buf.String())
			}
			if !strings.Contains(buf.String(), tc.wantInBody) {
				t.Errorf("body %q does not mention %q", buf.String(), tc.wantInBody)
			}
			if got := srv.Stats().Rejections[tc.wantReason]; got != before+1 {
				t.Errorf("%s count %d -> %d, want +1", tc.wantReason, before, got)
			}
			if a := srv.Stats().Active; a != 0 {
				t.Errorf("%d sessions left after a rejected offer", a)
			}
		})
	}
}

func TestMethodNotAllowed(t *testing.T) {
	srv, hs := newTestServer(t, Config{})
	resp, _ := post(t, hs.URL, makeOffer(t))
	loc := resp.Header.Get("Location")
	tests := []struct {
		method, path, wantAllow string
	}{
		{http.MethodPatch, loc, "DELETE, OPTIONS"},
		{http.MethodGet, loc, "DELETE, OPTIONS"},
		{http.MethodPost, loc, "DELETE, OPTIONS"},
		{http.MethodGet, "/whip", "POST, OPTIONS"},
		{http.MethodDelete, "/whip", "POST, OPTIONS"},
		{http.MethodPatch, "/whip", "POST, OPTIONS"},
	}
	for _, tc := range tests {
		t.Run(tc.method+" "+tc.path, func(t *testing.T) {
			r, body := do(t, tc.method, hs.URL+tc.path, testToken, "application/trickle-ice-sdpfrag", strings.NewReader("a=x"))
			if r.StatusCode != http.StatusMethodNotAllowed {
				t.Fatalf("status %d, want 405", r.StatusCode)
			}
			if got := r.Header.Get("Allow"); got != tc.wantAllow {
				t.Errorf("Allow = %q, want %q", got, tc.wantAllow)
			}
			if tc.method == http.MethodPatch && tc.path == loc && !strings.Contains(body, "trickle") {
				t.Errorf("PATCH body %q should say trickle ICE is not supported", body)
			}
		})
	}
	if n := srv.Stats().Rejections[RejectMethodNotAllowed]; n != uint64(len(tests)) {
		t.Errorf("method_not_allowed count %d, want %d", n, len(tests))
	}
	if srv.Stats().Active != 1 {
		t.Errorf("the session should survive the refused methods")
	}
}

func TestLocationUnguessableAndDelete(t *testing.T) {
	srv, hs := newTestServer(t, Config{MaxSessions: 8})
	re := regexp.MustCompile(`^/whip/[0-9a-f]{32}$`)
	seen := map[string]bool{}
	var locs []string
	for i := 0; i < 3; i++ {
		// Three addresses: one address holds one unconnected session.
		resp, body := postFrom(t, srv, fmt.Sprintf("192.0.2.%d:40000", i+1), makeOffer(t))
		if resp.StatusCode != http.StatusCreated {
			t.Fatalf("POST: %d %s", resp.StatusCode, body)
		}
		if ct := resp.Header.Get("Content-Type"); ct != "application/sdp" {
			t.Errorf("answer Content-Type %q", ct)
		}
		if !strings.Contains(body, "a=candidate:") || !strings.Contains(body, "127.0.0.1") {
			t.Errorf("answer lacks a loopback candidate:\n%s", body)
		}
		if strings.Contains(body, ".local") {
			t.Errorf("answer has an mDNS candidate:\n%s", body)
		}
		loc := resp.Header.Get("Location")
		if !re.MatchString(loc) {
			t.Fatalf("Location %q does not match %v", loc, re)
		}
		if seen[loc] {
			t.Fatalf("Location %q repeated", loc)
		}
		seen[loc] = true
		locs = append(locs, loc)
	}
	if srv.Stats().Active != 3 {
		t.Fatalf("active = %d, want 3", srv.Stats().Active)
	}
	sessions := srv.Sessions()
	if r, _ := do(t, http.MethodDelete, hs.URL+locs[0], testToken, "", nil); r.StatusCode != http.StatusOK {
		t.Fatalf("DELETE: %d, want 200", r.StatusCode)
	}
	if r, _ := do(t, http.MethodDelete, hs.URL+locs[0], testToken, "", nil); r.StatusCode != http.StatusNotFound {
		t.Fatalf("second DELETE: %d, want 404", r.StatusCode)
	}
	// A well-formed id that was never issued.
	if r, _ := do(t, http.MethodDelete, hs.URL+"/whip/"+strings.Repeat("0", 32), testToken, "", nil); r.StatusCode != http.StatusNotFound {
		t.Fatalf("DELETE of unknown id: %d, want 404", r.StatusCode)
	}
	st := srv.Stats()
	if st.Active != 2 || st.Rejections[RejectNotFound] != 2 || st.Ended != 1 {
		t.Fatalf("stats after deletes: %+v", st)
	}
	for _, s := range sessions {
		if "/whip/"+s.ID() == locs[0] {
			select {
			case <-s.Done():
			default:
				t.Fatal("deleted session's Done not closed")
			}
			if s.EndReason() != EndDeleted {
				t.Errorf("EndReason = %v, want deleted", s.EndReason())
			}
			if _, ok := <-s.Telemetry(); ok {
				t.Error("telemetry channel of a deleted session still open")
			}
		}
	}
}

// TestLocationUnderStripPrefix checks that Location keeps the path the client used when the handler is
// mounted under http.StripPrefix.
func TestLocationUnderStripPrefix(t *testing.T) {
	srv, _ := newTestServer(t, Config{})
	mux := http.NewServeMux()
	mux.Handle("/api/", http.StripPrefix("/api", srv))
	hs := newHTTPTestServer(t, mux)
	resp, body := do(t, http.MethodPost, hs+"/api/ingest", testToken, "application/sdp", strings.NewReader(makeOffer(t)))
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("POST: %d %s", resp.StatusCode, body)
	}
	loc := resp.Header.Get("Location")
	if !regexp.MustCompile(`^/api/ingest/[0-9a-f]{32}$`).MatchString(loc) {
		t.Fatalf("Location %q", loc)
	}
	if r, _ := do(t, http.MethodDelete, hs+loc, testToken, "", nil); r.StatusCode != http.StatusOK {
		t.Fatalf("DELETE %s: %d", loc, r.StatusCode)
	}
}

func TestTooManySessions(t *testing.T) {
	srv, hs := newTestServer(t, Config{MaxSessions: 1, ICETimeout: 3 * time.Second})
	if r, b := post(t, hs.URL, makeOffer(t)); r.StatusCode != http.StatusCreated {
		t.Fatalf("first POST: %d %s", r.StatusCode, b)
	}
	// Another address finds the one slot taken.
	r, body := postFrom(t, srv, "192.0.2.7:40000", makeOffer(t))
	if r.StatusCode != http.StatusServiceUnavailable {
		t.Fatalf("POST from another address: %d, want 503", r.StatusCode)
	}
	if got := r.Header.Get("Retry-After"); got != "3" {
		t.Errorf("Retry-After = %q, want 3 (the ICE timeout)", got)
	}
	if !strings.Contains(body, "busy") {
		t.Errorf("body %q", body)
	}
	if srv.Stats().Rejections[RejectTooManySessions] != 1 {
		t.Errorf("too_many_sessions not counted")
	}
}

// TestHalfOpenPerAddress: an address holds at most one session that has
// not connected; its newer offer replaces the older one, so offers that
// never connect pin one slot per address (RFC 9725 section 7, POST
// flooding).
func TestHalfOpenPerAddress(t *testing.T) {
	srv, hs := newTestServer(t, Config{MaxSessions: 2, ICETimeout: 5 * time.Second})
	for i := range 3 {
		if r, b := post(t, hs.URL, makeOffer(t)); r.StatusCode != http.StatusCreated {
			t.Fatalf("POST %d from one address: %d %s, want 201 (replacing the earlier half-open session)", i, r.StatusCode, b)
		}
	}
	st := srv.Stats()
	if st.Active != 1 || st.Rejections[RejectSuperseded] != 2 {
		t.Errorf("after 3 offers from one address: %d sessions, %d superseded; want 1 and 2", st.Active, st.Rejections[RejectSuperseded])
	}
	if r, b := postFrom(t, srv, "192.0.2.7:40000", makeOffer(t)); r.StatusCode != http.StatusCreated {
		t.Fatalf("POST from another address: %d %s, want 201: one address must not fill the server", r.StatusCode, b)
	}
	if st := srv.Stats(); st.Active != 2 {
		t.Errorf("%d sessions, want 2", st.Active)
	}
}

// postFrom POSTs offer to srv's handler directly, as if from remote.
func postFrom(t testing.TB, srv *Server, remote, offer string) (*http.Response, string) {
	t.Helper()
	req := httptest.NewRequest(http.MethodPost, "/whip", strings.NewReader(offer))
	req.RemoteAddr = remote
	req.Header.Set("Authorization", "Bearer "+testToken)
	req.Header.Set("Content-Type", "application/sdp")
	w := httptest.NewRecorder()
	srv.ServeHTTP(w, req)
	return w.Result(), w.Body.String()
}

func TestRateLimitedPost(t *testing.T) {
	clk := newFakeClock()
	srv, hs := newTestServer(t, Config{PostBurst: 2, PostRatePerS: 0.5, Clock: clk})
	// The burst is spent by any POST, even unauthenticated ones.
	for i := 0; i < 2; i++ {
		if r, _ := do(t, http.MethodPost, hs.URL+"/whip", "", "application/sdp", strings.NewReader("x")); r.StatusCode != http.StatusUnauthorized {
			t.Fatalf("POST %d: %d, want 401", i, r.StatusCode)
		}
	}
	r, _ := post(t, hs.URL, makeOffer(t))
	if r.StatusCode != http.StatusTooManyRequests {
		t.Fatalf("third POST: %d, want 429", r.StatusCode)
	}
	if got := r.Header.Get("Retry-After"); got != "2" { // 1 token at 0.5/s = 2 s
		t.Errorf("Retry-After = %q, want 2", got)
	}
	clk.Advance(2 * time.Second)
	if r, b := post(t, hs.URL, makeOffer(t)); r.StatusCode != http.StatusCreated {
		t.Fatalf("POST after refill: %d %s", r.StatusCode, b)
	}
	if n := srv.Stats().Rejections[RejectRateLimited]; n != 1 {
		t.Errorf("rate_limited count %d, want 1", n)
	}
}

// TestICETimeoutDropsHalfOpenSession posts an offer whose peer never applies the answer, so ICE can never
// connect; advancing the fake clock past ICETimeout must drop it.
func TestICETimeoutDropsHalfOpenSession(t *testing.T) {
	clk := newFakeClock()
	called := make(chan struct{}, 1)
	srv, hs := newTestServer(t, Config{ICETimeout: 10 * time.Second, Clock: clk,
		OnSession: func(*Session) { called <- struct{}{} }})
	if r, b := post(t, hs.URL, makeOffer(t)); r.StatusCode != http.StatusCreated {
		t.Fatalf("POST: %d %s", r.StatusCode, b)
	}
	sess := srv.Sessions()[0]
	clk.Advance(9 * time.Second)
	if srv.Stats().Active != 1 {
		t.Fatal("session dropped before the timeout")
	}
	clk.Advance(time.Second)
	select {
	case <-sess.Done():
	case <-time.After(2 * time.Second):
		t.Fatal("half-open session not dropped at the timeout")
	}
	st := srv.Stats()
	if st.Active != 0 || st.Rejections[RejectICETimeout] != 1 || sess.EndReason() != EndICETimeout {
		t.Fatalf("after timeout: %+v, end %v", st, sess.EndReason())
	}
	select {
	case <-called:
		t.Error("OnSession called for a session that never connected")
	default:
	}
	if err := sess.RequestKeyframe(); !errors.Is(err, ErrSessionClosed) {
		t.Errorf("RequestKeyframe after end: %v", err)
	}
}

func TestServerCloseRefusesNewSessions(t *testing.T) {
	srv, hs := newTestServer(t, Config{})
	if r, _ := post(t, hs.URL, makeOffer(t)); r.StatusCode != http.StatusCreated {
		t.Fatal("POST failed")
	}
	s := srv.Sessions()[0]
	srv.Close()
	if s.EndReason() != EndServerShutdown || srv.Stats().Active != 0 {
		t.Fatalf("after Close: end %v, active %d", s.EndReason(), srv.Stats().Active)
	}
	if r, _ := post(t, hs.URL, makeOffer(t)); r.StatusCode != http.StatusServiceUnavailable {
		t.Fatalf("POST after Close: %d, want 503", r.StatusCode)
	}
}

func TestReasonStrings(t *testing.T) {
	seen := map[string]bool{}
	for r := RejectInvalid; r < numRejectReasons; r++ {
		s := r.String()
		if s == "" || seen[s] {
			t.Errorf("RejectReason(%d).String() = %q (empty or repeated)", r, s)
		}
		seen[s] = true
	}
	if RejectReason(-1).String() != "invalid" || RejectReason(99).String() != "invalid" {
		t.Error("out-of-range RejectReason not reported as invalid")
	}
	seen = map[string]bool{}
	for r := EndInvalid; r < numEndReasons; r++ {
		s := r.String()
		if s == "" || seen[s] {
			t.Errorf("EndReason(%d).String() = %q", r, s)
		}
		seen[s] = true
	}
	if EndReason(42).String() != "invalid" {
		t.Error("out-of-range EndReason not invalid")
	}
}
