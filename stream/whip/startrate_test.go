package whip

import (
	"errors"
	"net/http"
	"reflect"
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

// FuzzWithStartBitrate: the answer's edit never panics; on any description the SDP library reads and
// writes back readably, the edited one reads too, the first fmtp line of every VP8 payload type of a video
// section carries the parameter exactly once with the value asked, and the other sections are unchanged.
// (The answer is the stack's, but it copies the offer's format parameters, which the sender chose.)
func FuzzWithStartBitrate(f *testing.F) {
	const head = "v=0\r\no=- 1 2 IN IP4 127.0.0.1\r\ns=-\r\nt=0 0\r\n"
	f.Add(head+"m=video 9 UDP/TLS/RTP/SAVPF 96 97\r\nc=IN IP4 0.0.0.0\r\na=rtpmap:96 VP8/90000\r\n"+
		"a=rtpmap:97 rtx/90000\r\na=fmtp:97 apt=96\r\n", 2500)
	f.Add(head+"m=video 9 UDP/TLS/RTP/SAVPF 96\r\nc=IN IP4 0.0.0.0\r\na=rtpmap:96 VP8/90000\r\n"+
		"a=fmtp:96 max-fr=30; x-google-start-bitrate=300;;\r\n"+
		"m=audio 9 UDP/TLS/RTP/SAVPF 111\r\nc=IN IP4 0.0.0.0\r\na=rtpmap:111 opus/48000/2\r\n", 1)
	f.Add(head+"m=video 9 RTP/AVP 100 101\r\na=rtpmap:100 vp8/90000\r\na=rtpmap:101 VP8/90000/1\r\n"+
		"a=fmtp:100\r\na=fmtp:101 x-google-start-bitrate\r\n", 100000)
	f.Add("not sdp", 2500)
	f.Fuzz(func(t *testing.T, desc string, kbps int) {
		got, err := withStartBitrate(desc, kbps)
		var in sdp.SessionDescription
		if in.Unmarshal([]byte(desc)) != nil {
			if err == nil {
				t.Fatalf("no error for a description that does not parse:\n%q", desc)
			}
			return
		}
		// The description as the library writes and reads it back, unedited; where that is not what
		// it read (a stray CR inside a line), what the edit did cannot be told from the round trip.
		var rt sdp.SessionDescription
		b, merr := in.Marshal()
		if merr != nil || rt.Unmarshal(b) != nil {
			return
		}
		if b2, merr := rt.Marshal(); merr != nil || string(b2) != string(b) || !reflect.DeepEqual(&rt, &in) {
			return
		}
		if err != nil {
			t.Fatalf("error %v for a description that parses:\n%q", err, desc)
		}
		var out sdp.SessionDescription
		if err := out.Unmarshal([]byte(got)); err != nil {
			t.Fatalf("edited answer does not parse: %v\n%q\n->\n%q", err, desc, got)
		}
		if len(out.MediaDescriptions) != len(rt.MediaDescriptions) {
			t.Fatalf("%d sections, want %d", len(out.MediaDescriptions), len(rt.MediaDescriptions))
		}
		param := StartBitrateParam + "=" + strconv.Itoa(kbps)
		for i, md := range out.MediaDescriptions {
			if md == nil || md.MediaName.Media != "video" {
				if !reflect.DeepEqual(md, rt.MediaDescriptions[i]) {
					t.Fatalf("section %d (not video) changed:\n%+v\n->\n%+v", i, rt.MediaDescriptions[i], md)
				}
				continue
			}
			for _, pt := range vp8PayloadTypes(md) {
				var first string
				found := false
				for _, a := range md.Attributes {
					if p, v, _ := strings.Cut(a.Value, " "); a.Key == "fmtp" && p == pt {
						first, found = v, true
						break
					}
				}
				if !found {
					t.Fatalf("VP8 payload type %q has no fmtp line:\n%s", pt, got)
				}
				n := 0
				for _, fp := range strings.Split(first, ";") {
					k, _, _ := strings.Cut(strings.TrimSpace(fp), "=")
					if strings.EqualFold(k, StartBitrateParam) {
						n++
						if strings.TrimSpace(fp) != param {
							t.Fatalf("payload type %q: %q, want %q", pt, fp, param)
						}
					}
				}
				if n != 1 {
					t.Fatalf("payload type %q: parameter %d times in %q", pt, n, first)
				}
			}
		}
	})
}
