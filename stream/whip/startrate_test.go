package whip

import (
	"errors"
	"net/http"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/pion/sdp/v3"
	"github.com/pion/webrtc/v4"
)

// fmtpLines returns the a=fmtp values of payload type pt in the video section of an SDP.
func fmtpLines(t *testing.T, desc, pt string) []string {
	t.Helper()
	var sd sdp.SessionDescription
	if err := sd.Unmarshal([]byte(desc)); err != nil {
		t.Fatalf("answer does not parse: %v\n%s", err, desc)
	}
	var out []string
	for _, md := range sd.MediaDescriptions {
		if md.MediaName.Media != "video" {
			continue
		}
		for _, a := range md.Attributes {
			if p, v, _ := strings.Cut(a.Value, " "); a.Key == "fmtp" && p == pt {
				out = append(out, v)
			}
		}
	}
	return out
}

// withOfferFmtp adds an a=fmtp line for payload type 96 to an offer (after its VP8 rtpmap).
func withOfferFmtp(offer, params string) string {
	return strings.Replace(offer, "a=rtpmap:96 VP8/90000\r\n", "a=rtpmap:96 VP8/90000\r\na=fmtp:96 "+params+"\r\n", 1)
}

func TestWithStartBitrate(t *testing.T) {
	const head = "v=0\r\no=- 1 2 IN IP4 127.0.0.1\r\ns=-\r\nt=0 0\r\n"
	const video = "m=video 9 UDP/TLS/RTP/SAVPF 96 97 98\r\nc=IN IP4 0.0.0.0\r\n" +
		"a=rtpmap:96 VP8/90000\r\n%s" +
		"a=rtpmap:97 rtx/90000\r\na=fmtp:97 apt=96\r\n" +
		"a=rtpmap:98 VP9/90000\r\na=fmtp:98 profile-id=0\r\n"
	const audio = "m=audio 9 UDP/TLS/RTP/SAVPF 111\r\nc=IN IP4 0.0.0.0\r\na=rtpmap:111 opus/48000/2\r\n" +
		"a=fmtp:111 minptime=10\r\n"
	for _, tc := range []struct {
		name, fmtp96, want96 string
	}{
		{"no fmtp line", "", "x-google-start-bitrate=1800"},
		{"other parameters kept", "a=fmtp:96 max-fr=30;max-fs=3600\r\n", "max-fr=30;max-fs=3600;x-google-start-bitrate=1800"},
		{"value replaced", "a=fmtp:96 max-fr=30; X-Google-Start-Bitrate=300\r\n", "max-fr=30;x-google-start-bitrate=1800"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			in := head + strings.Replace(video, "%s", tc.fmtp96, 1) + audio
			got, err := withStartBitrate(in, 1800)
			if err != nil {
				t.Fatal(err)
			}
			if f := fmtpLines(t, got, "96"); len(f) != 1 || f[0] != tc.want96 {
				t.Errorf("VP8 fmtp %q, want [%q]", f, tc.want96)
			}
			for pt, want := range map[string]string{"97": "apt=96", "98": "profile-id=0"} {
				if f := fmtpLines(t, got, pt); len(f) != 1 || f[0] != want {
					t.Errorf("payload type %s fmtp %q, want [%q] unchanged", pt, f, want)
				}
			}
			if !strings.Contains(got, "a=fmtp:111 minptime=10\r\n") || strings.Count(got, StartBitrateParam) != 1 {
				t.Errorf("audio section changed or parameter set more than once:\n%s", got)
			}
			if tc.fmtp96 == "" && !strings.Contains(got, "a=rtpmap:96 VP8/90000\r\na=fmtp:96 ") {
				t.Errorf("fmtp line not right after the VP8 rtpmap:\n%s", got)
			}
		})
	}
	if _, err := withStartBitrate("not sdp", 1800); err == nil {
		t.Error("no error for an answer that does not parse")
	}
}

// TestAnswerCarriesStartBitrate: the answer the sender gets asks it to start at SenderStartKbps (the
// default when zero, nothing with SenderStartOwn), whether its offer had no fmtp line for VP8 or one of
// its own, and a pion sender accepts that answer and connects.
func TestAnswerCarriesStartBitrate(t *testing.T) {
	for _, tc := range []struct {
		name      string
		kbps      int
		offerFmtp string
		want      string // the answer's VP8 fmtp; "" = no line
	}{
		{"default", 0, "", StartBitrateParam + "=" + strconv.Itoa(DefaultSenderStartKbps)},
		{"set", 800, "", "x-google-start-bitrate=800"},
		{"offer with fmtp", 800, "max-fr=30", "max-fr=30;x-google-start-bitrate=800"},
		{"offer asks another start", 800, "x-google-start-bitrate=300", "x-google-start-bitrate=800"},
		{"sender's own", SenderStartOwn, "", ""},
		{"sender's own, offer with fmtp", SenderStartOwn, "max-fr=30", "max-fr=30"},
	} {
		t.Run(tc.name, func(t *testing.T) {
			sessions := make(chan *Session, 1)
			_, hs := newTestServer(t, Config{SenderStartKbps: tc.kbps, OnSession: func(s *Session) { sessions <- s }})
			pc, offer := makeOfferPC(t)
			if tc.offerFmtp != "" {
				offer = withOfferFmtp(offer, tc.offerFmtp)
			}
			resp, answer := post(t, hs.URL, offer)
			if resp.StatusCode != http.StatusCreated {
				t.Fatalf("POST: %d %s", resp.StatusCode, answer)
			}
			f := fmtpLines(t, answer, "96")
			if tc.want == "" && len(f) != 0 || tc.want != "" && (len(f) != 1 || f[0] != tc.want) {
				t.Errorf("answer's VP8 fmtp %q, want %q", f, tc.want)
			}
			if err := pc.SetRemoteDescription(webrtc.SessionDescription{Type: webrtc.SDPTypeAnswer, SDP: answer}); err != nil {
				t.Fatalf("the sender refuses the answer: %v", err)
			}
			select {
			case <-sessions:
			case <-time.After(10 * time.Second):
				t.Fatal("the session did not connect")
			}
		})
	}
}

func TestSenderStartKbpsValidation(t *testing.T) {
	for _, k := range []int{-2, maxSenderStartKbps + 1} {
		if _, err := NewServer(Config{Token: testToken, SenderStartKbps: k}); !errors.Is(err, ErrBadConfig) {
			t.Errorf("SenderStartKbps %d: err %v, want ErrBadConfig", k, err)
		}
	}
}
