package whip

import (
	"bytes"
	"net/http"
	"net/http/httptest"
	"testing"
)

// staticOffer is a hand-written offer in the shape browsers and pion produce (fake but well-formed ICE
// credentials and fingerprint), so the fuzzer starts from input that passes the offer check and reaches the
// WebRTC stack.
const staticOffer = "v=0\r\n" +
	"o=- 4215775240449105457 2 IN IP4 127.0.0.1\r\n" +
	"s=-\r\n" +
	"t=0 0\r\n" +
	"a=group:BUNDLE 0 1\r\n" +
	"a=fingerprint:sha-256 7B:8B:F0:65:5F:78:E2:51:3B:AC:6F:F3:3F:46:1B:35:DC:B8:5F:64:1A:24:C2:43:F0:A1:58:D0:A1:2C:19:08\r\n" +
	"m=video 9 UDP/TLS/RTP/SAVPF 96\r\n" +
	"c=IN IP4 0.0.0.0\r\n" +
	"a=setup:actpass\r\n" +
	"a=mid:0\r\n" +
	"a=ice-ufrag:abcdEFGHijklMNOP\r\n" +
	"a=ice-pwd:0123456789abcdefghijklmnopqrstuv\r\n" +
	"a=rtcp-mux\r\n" +
	"a=rtpmap:96 VP8/90000\r\n" +
	"a=rtcp-fb:96 nack\r\n" +
	"a=rtcp-fb:96 nack pli\r\n" +
	"a=ssrc:1111 cname:vehicle\r\n" +
	"a=sendonly\r\n" +
	"m=application 9 UDP/DTLS/SCTP webrtc-datachannel\r\n" +
	"c=IN IP4 0.0.0.0\r\n" +
	"a=setup:actpass\r\n" +
	"a=mid:1\r\n" +
	"a=ice-ufrag:abcdEFGHijklMNOP\r\n" +
	"a=ice-pwd:0123456789abcdefghijklmnopqrstuv\r\n" +
	"a=sctp-port:5000\r\n"

// FuzzOffer posts arbitrary bodies as SDP offers. Whatever the body, the handler must not panic, must answer
// 201 or 400 (or 413 past the size limit), and must leave no session behind: rejected offers free their
// slot at once, accepted ones are freed by DELETE.
func FuzzOffer(f *testing.F) {
	f.Add([]byte(staticOffer))
	f.Add([]byte(makeOffer(f)))
	f.Add([]byte(""))
	f.Add([]byte("v=0\r\n"))
	f.Add([]byte(sdpHead + "m=video 9 UDP/TLS/RTP/SAVPF 96\r\na=rtpmap:96 VP8/90000\r\n"))
	f.Add([]byte(sdpHead + "m=video 0 UDP/TLS/RTP/SAVPF 96\r\na=rtpmap:96 VP8/90000\r\n"))
	f.Add([]byte(staticOffer[:len(staticOffer)/2]))

	srv, err := NewServer(Config{Token: testToken, MaxSessions: 2, PostBurst: 1 << 30, PostRatePerS: 1e9,
		MaxOfferBytes: 16 << 10, Network: Network{LoopbackOnly: true}})
	if err != nil {
		f.Fatal(err)
	}
	f.Cleanup(func() { srv.Close() })

	f.Fuzz(func(t *testing.T, body []byte) {
		req := httptest.NewRequest(http.MethodPost, "/whip", bytes.NewReader(body))
		req.Header.Set("Authorization", "Bearer "+testToken)
		req.Header.Set("Content-Type", "application/sdp")
		rec := httptest.NewRecorder()
		srv.ServeHTTP(rec, req)
		switch rec.Code {
		case http.StatusCreated:
			loc := rec.Header().Get("Location")
			del := httptest.NewRequest(http.MethodDelete, loc, nil)
			del.Header.Set("Authorization", "Bearer "+testToken)
			drec := httptest.NewRecorder()
			srv.ServeHTTP(drec, del)
			if drec.Code != http.StatusOK {
				t.Fatalf("DELETE %s after 201: %d", loc, drec.Code)
			}
		case http.StatusBadRequest, http.StatusRequestEntityTooLarge:
			if rec.Body.Len() == 0 {
				t.Fatalf("%d without an explanation", rec.Code)
			}
		default:
			t.Fatalf("status %d for body %q: %s", rec.Code, body, rec.Body.String())
		}
		if a := srv.Stats().Active; a != 0 {
			t.Fatalf("%d sessions leaked after status %d", a, rec.Code)
		}
	})
}

// TestStaticOfferAccepted makes sure the hand-written fuzz seed passes every check, so fuzzing starts on the
// path that reaches the WebRTC stack rather than only on rejections.
func TestStaticOfferAccepted(t *testing.T) {
	srv, hs := newTestServer(t, Config{})
	resp, body := post(t, hs.URL, staticOffer)
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("static offer: %d %s", resp.StatusCode, body)
	}
	if srv.Stats().Active != 1 {
		t.Fatal("no session for the static offer")
	}
}
