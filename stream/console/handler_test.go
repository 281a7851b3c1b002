package console

import (
	"encoding/json"
	"fmt"
	"html"
	"net/http"
	"net/http/httptest"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"

	"stopgap/internal/display"
	"stopgap/internal/vocab"
)

const testToken = "test-token-0123456789abcdef"

func newTestConsole(t *testing.T, cfg Config) *Console {
	t.Helper()
	if cfg.Token == "" {
		cfg.Token = testToken
	}
	if cfg.Logger == nil {
		cfg.Logger = quietLogger()
	}
	c, err := New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.Close() })
	return c
}

func do(c http.Handler, method, path, ctype, body string, hdr map[string][]string) *httptest.ResponseRecorder {
	r := httptest.NewRequest(method, path, strings.NewReader(body))
	if ctype != "" {
		r.Header.Set("Content-Type", ctype)
	}
	for k, vs := range hdr {
		for _, v := range vs {
			r.Header.Add(k, v)
		}
	}
	w := httptest.NewRecorder()
	c.ServeHTTP(w, r)
	return w
}

func bearer(tok string) map[string][]string {
	return map[string][]string{"Authorization": {"Bearer " + tok}}
}

// TestAuthRequired: every /api/ endpoint answers 401 with WWW-Authenticate
// (RFC 6750 section 3) unless exactly one correct bearer token is sent.
func TestAuthRequired(t *testing.T) {
	c := newTestConsole(t, Config{})
	endpoints := []struct{ method, path, ctype, body string }{
		{"POST", "/api/view", "application/sdp", "v=0"},
		{"DELETE", "/api/view/00112233445566778899aabbccddeeff", "", ""},
		{"GET", "/api/state", "", ""},
		{"POST", "/api/cutoff", "application/json", `{"cutoff":0.5}`},
		{"GET", "/api/meta", "", ""},
	}
	headers := []struct {
		name string
		hdr  map[string][]string
		ok   bool
	}{
		{"none", nil, false},
		{"wrong token", bearer("test-token-0123456789abcdeX"), false},
		{"prefix of token", bearer(testToken[:20]), false},
		{"token plus extra", bearer(testToken + "x"), false},
		{"basic scheme", map[string][]string{"Authorization": {"Basic " + testToken}}, false},
		{"no scheme", map[string][]string{"Authorization": {testToken}}, false},
		{"two headers", map[string][]string{"Authorization": {"Bearer " + testToken, "Bearer " + testToken}}, false},
		{"token in query is not enough", nil, false},
		{"right token", bearer(testToken), true},
		{"scheme case-insensitive", map[string][]string{"Authorization": {"bearer " + testToken}}, true},
	}
	for _, ep := range endpoints {
		for _, h := range headers {
			t.Run(ep.method+" "+ep.path+"/"+h.name, func(t *testing.T) {
				path := ep.path
				if h.name == "token in query is not enough" {
					path += "?token=" + testToken
				}
				w := do(c, ep.method, path, ep.ctype, ep.body, h.hdr)
				if h.ok && w.Code == http.StatusUnauthorized {
					t.Fatalf("refused with the right token: %s", w.Body)
				}
				if !h.ok {
					if w.Code != http.StatusUnauthorized {
						t.Fatalf("status %d, want 401", w.Code)
					}
					if !strings.HasPrefix(w.Header().Get("WWW-Authenticate"), "Bearer") {
						t.Errorf("WWW-Authenticate = %q", w.Header().Get("WWW-Authenticate"))
					}
					if strings.Contains(w.Body.String(), testToken) {
						t.Error("response body echoes the token")
					}
				}
			})
		}
	}
}

// TestPageWithoutToken: the page and its assets need no token, carry a
// strict CSP, and contain the safety caution.
func TestPageWithoutToken(t *testing.T) {
	c := newTestConsole(t, Config{})
	for _, tc := range []struct{ path, ctype, contains string }{
		{"/", "text/html", "SAFETY CAUTION"},
		{"/console.js", "text/javascript", "__stateLog"},
		{"/console.css", "text/css", "data-state=\"PREDICTED\""},
	} {
		t.Run(tc.path, func(t *testing.T) {
			w := do(c, "GET", tc.path, "", "", nil)
			if w.Code != 200 {
				t.Fatalf("status %d", w.Code)
			}
			if !strings.HasPrefix(w.Header().Get("Content-Type"), tc.ctype) {
				t.Errorf("Content-Type %q", w.Header().Get("Content-Type"))
			}
			if csp := w.Header().Get("Content-Security-Policy"); !strings.Contains(csp, "default-src 'none'") {
				t.Errorf("CSP %q", csp)
			}
			if w.Header().Get("X-Content-Type-Options") != "nosniff" {
				t.Error("no nosniff")
			}
			if !strings.Contains(w.Body.String(), tc.contains) {
				t.Errorf("body lacks %q", tc.contains)
			}
			if strings.Contains(w.Body.String(), testToken) {
				t.Error("page contains the token")
			}
		})
	}
	page := do(c, "GET", "/", "", "", nil).Body.String()
	for _, ext := range []string{"http://", "https://", "//cdn", "<style", "onclick="} {
		if strings.Contains(page, ext) {
			t.Errorf("page contains %q: no external resources or inline code allowed", ext)
		}
	}
	if w := do(c, "GET", "/nope", "", "", nil); w.Code != 404 {
		t.Errorf("unknown path: %d", w.Code)
	}
}

func TestCutoffEndpoint(t *testing.T) {
	auth := bearer(testToken)
	cases := []struct {
		name       string
		ctype      string
		body       string
		wantCode   int
		wantMsg    string
		wantCutoff float64
	}{
		{"within limits", "application/json", `{"cutoff":0.7}`, 200, "", 0.7},
		{"min edge", "application/json", `{"cutoff":0.3}`, 200, "", 0.3},
		{"max edge", "application/json", `{"cutoff":0.9}`, 200, "", 0.9},
		{"above max", "application/json", `{"cutoff":0.95}`, 400, "outside the administrator's limits [0.3, 0.9]", 0.6},
		{"below min", "application/json", `{"cutoff":0.1}`, 400, "outside the administrator's limits", 0.6},
		{"overflow number", "application/json", `{"cutoff":1e999}`, 400, "JSON", 0.6},
		{"string cutoff", "application/json", `{"cutoff":"0.5"}`, 400, "JSON", 0.6},
		{"unknown field", "application/json", `{"cutof":0.5}`, 400, "unknown field", 0.6},
		{"empty object", "application/json", `{}`, 400, "give", 0.6},
		{"two objects", "application/json", `{"cutoff":0.5}{"cutoff":0.6}`, 400, "extra data", 0.6},
		{"unknown profile", "application/json", `{"profile":"rain"}`, 400, "known profiles: city, highway", 0.6},
		{"switch profile", "application/json", `{"profile":"highway"}`, 200, "", 0.8},
		{"wrong content type", "text/plain", `{"cutoff":0.7}`, 415, "application/json", 0.6},
		{"body too large", "application/json", `{"profile":"` + strings.Repeat("a", MaxJSONBytes) + `"}`, 413, "larger than", 0.6},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			c := newTestConsole(t, Config{Limits: Limits{0.3, 0.9}, Profiles: []Profile{{"city", 0.6}, {"highway", 0.8}}})
			w := do(c, "POST", "/api/cutoff", tc.ctype, tc.body, auth)
			if w.Code != tc.wantCode {
				t.Fatalf("status %d, want %d: %s", w.Code, tc.wantCode, w.Body)
			}
			if tc.wantCode != 200 {
				var e struct{ Error string }
				if err := json.Unmarshal(w.Body.Bytes(), &e); err != nil || !strings.Contains(e.Error, tc.wantMsg) {
					t.Errorf("error body %s lacks %q", w.Body, tc.wantMsg)
				}
			} else {
				var st ControlState
				if err := json.Unmarshal(w.Body.Bytes(), &st); err != nil || st.Cutoff != tc.wantCutoff {
					t.Errorf("response %s", w.Body)
				}
			}
			if c.Cutoff() != tc.wantCutoff {
				t.Errorf("Cutoff() = %v, want %v", c.Cutoff(), tc.wantCutoff)
			}
		})
	}
}

func TestStateAndMetaEndpoints(t *testing.T) {
	c := newTestConsole(t, Config{Limits: Limits{0.3, 0.9}, Profiles: []Profile{{"city", 0.6}}})
	auth := bearer(testToken)
	w := do(c, "GET", "/api/state", "", "", auth)
	var st map[string]any
	if err := json.Unmarshal(w.Body.Bytes(), &st); err != nil {
		t.Fatal(err)
	}
	want := `{"cutoff":0.6,"limits":{"max_cutoff":0.9,"min_cutoff":0.3},"profile":"city","profiles":[{"cutoff":0.6,"name":"city"}],"viewers":0}`
	if got := mustJSON(t, st); got != want {
		t.Errorf("state\n got %s\nwant %s", got, want)
	}
	if w := do(c, "GET", "/api/meta", "", "", auth); w.Code != 204 {
		t.Errorf("meta before any: %d", w.Code)
	}
	m := sampleMeta()
	if err := c.WriteMeta(m); err != nil {
		t.Fatal(err)
	}
	w = do(c, "GET", "/api/meta", "", "", auth)
	var got Meta
	if err := json.Unmarshal(w.Body.Bytes(), &got); err != nil || got != m {
		t.Errorf("meta %s, err %v", w.Body, err)
	}
}

func TestOfferEndpointRejects(t *testing.T) {
	auth := bearer(testToken)
	c := newTestConsole(t, Config{})
	cases := []struct {
		name, ctype, body string
		code              int
		msg               string
	}{
		{"wrong content type", "application/json", "v=0", 415, "application/sdp"},
		{"garbage", "application/sdp", "hello", 400, "cannot parse SDP"},
		{"too large", "application/sdp", strings.Repeat("a", MaxOfferBytes+1), 413, "larger than"},
		{"audio only", "application/sdp", minimalOffer("audio", "recvonly", "opus/48000/2", true), 400, "no video section"},
		{"video sendonly", "application/sdp", minimalOffer("video", "sendonly", "VP8/90000", true), 400, "no video section"},
		{"no VP8", "application/sdp", minimalOffer("video", "recvonly", "H264/90000", true), 400, "VP8"},
		{"no data channel", "application/sdp", minimalOffer("video", "recvonly", "VP8/90000", false), 400, "meta"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			w := do(c, "POST", "/api/view", tc.ctype, tc.body, auth)
			if w.Code != tc.code || !strings.Contains(w.Body.String(), tc.msg) {
				t.Errorf("status %d body %s; want %d with %q", w.Code, w.Body, tc.code, tc.msg)
			}
		})
	}
	if c.Stats().Sessions != 0 {
		t.Errorf("rejected offers left %d sessions", c.Stats().Sessions)
	}
	if w := do(c, "DELETE", "/api/view/0000", "", "", auth); w.Code != 404 {
		t.Errorf("DELETE unknown session: %d", w.Code)
	}
}

// minimalOffer builds a small SDP offer for the rejection tests.
func minimalOffer(kind, dir, rtpmap string, withApp bool) string {
	s := "v=0\r\no=- 1 1 IN IP4 127.0.0.1\r\ns=-\r\nt=0 0\r\n" +
		"m=" + kind + " 9 UDP/TLS/RTP/SAVPF 96\r\nc=IN IP4 0.0.0.0\r\na=mid:0\r\na=" + dir + "\r\na=rtpmap:96 " + rtpmap + "\r\n"
	if withApp {
		s += "m=application 9 UDP/DTLS/SCTP webrtc-datachannel\r\nc=IN IP4 0.0.0.0\r\na=mid:1\r\na=sctp-port:5000\r\n"
	}
	return s
}

// TestPageSaysSharedWords: the served page carries the shared caution of
// package vocab word for word (no placeholder left), and the page script
// knows exactly the frame states this package sends, under their String
// names.
func TestPageSaysSharedWords(t *testing.T) {
	c := newTestConsole(t, Config{})
	page := do(c, "GET", "/", "", "", nil).Body.String()
	if !strings.Contains(page, html.EscapeString(vocab.Caution)) || !strings.Contains(page, vocab.CautionTitle) {
		t.Errorf("page lacks the shared caution %q", vocab.Caution)
	}
	if strings.Contains(page, "{{") {
		t.Errorf("page keeps a placeholder: %s", page[strings.Index(page, "{{"):][:40])
	}
	js := do(c, "GET", "/console.js", "", "", nil).Body.String()
	var names []string
	for _, s := range display.States {
		names = append(names, strconv.Quote(s.String()))
	}
	if want := "const STATES = [" + strings.Join(names, ", ") + "];"; !strings.Contains(js, want) {
		t.Errorf("console.js lacks %s", want)
	}
	css := do(c, "GET", "/console.css", "", "", nil).Body.String()
	for _, s := range display.States {
		if want := `body[data-state="` + s.String() + `"]`; !strings.Contains(css, want) {
			t.Errorf("console.css has no style for %s", want)
		}
	}
	checkPageReasons(t, js)
}

// checkPageReasons: the page's reasons for STATE UNKNOWN are exactly
// UnknownReasons, in order; it gives only those (every `reason = "..."` is
// one), has a banner text for each (`case "...":`), and its watchdog limits
// are this package's.
func checkPageReasons(t *testing.T, js string) {
	t.Helper()
	var quoted []string
	for _, r := range UnknownReasons {
		quoted = append(quoted, strconv.Quote(r))
		if !strings.Contains(js, "case "+strconv.Quote(r)+":") {
			t.Errorf("console.js has no banner text (case %q:) for the reason %s", r, r)
		}
	}
	if want := "const REASONS = [" + strings.Join(quoted, ", ") + "];"; !strings.Contains(js, want) {
		t.Errorf("console.js lacks %s", want)
	}
	var given []string
	for _, m := range regexp.MustCompile(`reason = "([^"]+)"`).FindAllStringSubmatch(js, -1) {
		given = append(given, m[1])
	}
	slices.Sort(given)
	want := slices.Sorted(slices.Values(UnknownReasons))
	if !slices.Equal(given, want) {
		t.Errorf("console.js gives the reasons %v (reason = \"...\"), want each of console.UnknownReasons once: %v", given, want)
	}
	for _, want := range []string{
		fmt.Sprintf("const META_SILENCE_MS = %d;", MetaSilenceMs),
		fmt.Sprintf("const VIDEO_FREEZE_MS = %d;", VideoFreezeMs),
		fmt.Sprintf("const STATUS_LATE = { intervals: %d, min_ms: %d, max_ms: %d };", StatusLateIntervals, StatusLateMinMs, StatusLateMaxMs),
	} {
		if !strings.Contains(js, want) {
			t.Errorf("console.js lacks %s", want)
		}
	}
}
