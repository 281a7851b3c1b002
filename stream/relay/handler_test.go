package relay

import (
	"context"
	"encoding/json"
	"io"
	"net/http"
	"net/http/httptest"
	"strings"
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/stream/rtpvp8"
	"stopgap/stream/telemetry"
	"stopgap/stream/vp8"
	"stopgap/stream/whip"
)

func TestHandler(t *testing.T) {
	r := testRelay(t, &fakeClock{}, "")
	srv := httptest.NewServer(r.Handler())
	defer srv.Close()
	get := func(path, token string) (*http.Response, string) {
		req, _ := http.NewRequest(http.MethodGet, srv.URL+path, nil)
		if token != "" {
			req.Header.Set("Authorization", "Bearer "+token)
		}
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		b, _ := io.ReadAll(resp.Body)
		resp.Body.Close()
		return resp, string(b)
	}
	tests := []struct {
		name, path, token string
		status            int
		contains          string
	}{
		{"healthz", "/healthz", "", 200, `"status":"ok"`},
		{"metrics without token", "/metrics", "", 401, ""},
		{"metrics with the ingest token", "/metrics", testIngestToken, 401, ""},
		{"metrics", "/metrics", testConsoleToken, 200, `stopgap_ticks_total{state="live"} 0`},
		{"metrics histogram", "/metrics", testConsoleToken, 200, `stopgap_added_latency_seconds_bucket{le="+Inf"} 0`},
		{"console page", "/", "", 200, "<"},
		{"console api needs token", "/api/state", "", 401, ""},
		{"console api", "/api/state", testConsoleToken, 200, `"cutoff"`},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			resp, body := get(tc.path, tc.token)
			if resp.StatusCode != tc.status || !strings.Contains(body, tc.contains) {
				t.Fatalf("GET %s: %d %q", tc.path, resp.StatusCode, body)
			}
			if tc.path == "/healthz" {
				var m map[string]any
				if err := json.Unmarshal([]byte(body), &m); err != nil {
					t.Fatal(err)
				}
			}
			if strings.Contains(body, testConsoleToken) || strings.Contains(body, testIngestToken) {
				t.Fatal("a token leaked into a response")
			}
		})
	}
	t.Run("whip needs token", func(t *testing.T) {
		resp, err := http.Post(srv.URL+"/whip", "application/sdp", strings.NewReader("v=0\r\n"))
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode != http.StatusUnauthorized {
			t.Fatalf("POST /whip without token: %d", resp.StatusCode)
		}
	})
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := r.Run(ctx); err != nil {
		t.Fatal(err)
	}
}

func TestConsoleURLCarriesTokenInFragment(t *testing.T) {
	r := testRelay(t, &fakeClock{}, "")
	u := r.ConsoleURL("http://127.0.0.1:8443")
	if !strings.HasPrefix(u, "http://127.0.0.1:8443") || !strings.Contains(u, "#token="+testConsoleToken) {
		t.Fatalf("console URL %q", u)
	}
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	r.Run(ctx)
}

// TestLoopbackWebRTC publishes real VP8 over WebRTC on 127.0.0.1 with whip.Publish,
// drops every packet of frames 30-35 on the wire and checks that the relay
// counted the outage, asked for a keyframe and went LIVE again. Real time:
// about 2.5 s.
func TestLoopbackWebRTC(t *testing.T) {
	if testing.Short() {
		t.Skip("real-time WebRTC session")
	}
	r, err := New(Config{
		FPS: testFPS, Camera: testCamera(), IngestToken: testIngestToken, ConsoleToken: testConsoleToken,
		Logger: quietLogger(), Whip: whip.Config{Network: whip.Network{LoopbackOnly: true}},
	})
	if err != nil {
		t.Fatal(err)
	}
	srv := httptest.NewServer(r.Handler())
	defer srv.Close()
	ctx, cancel := context.WithCancel(context.Background())
	runDone := make(chan error, 1)
	go func() { runDone <- r.Run(ctx) }()
	defer func() {
		cancel()
		if err := <-runDone; err != nil {
			t.Error(err)
		}
	}()

	dropping := make(chan bool, 1)
	dropping <- false
	pctx, pcancel := context.WithTimeout(ctx, 10*time.Second)
	defer pcancel()
	pub, err := whip.Publish(pctx, srv.URL+"/whip", testIngestToken, whip.PublishConfig{
		Network: whip.Network{LoopbackOnly: true}, SenderReportInterval: 100 * time.Millisecond,
		WireFilter: func(*rtp.Header, []byte) bool { d := <-dropping; dropping <- d; return !d },
	})
	if err != nil {
		t.Fatal(err)
	}
	defer pub.Close()
	enc, err := vp8.NewEncoder(vp8.EncoderConfig{Width: testW, Height: testH, FrameRateHz: testFPS})
	if err != nil {
		t.Fatal(err)
	}
	defer enc.Close()
	pkz, err := rtpvp8.NewPacketizer(rtpvp8.PacketizerConfig{PayloadType: 96})
	if err != nil {
		t.Fatal(err)
	}
	bgr := make([]byte, testW*testH*3)
	var frame []byte
	var pkts []rtp.Packet
	start := time.Now()
	const frames = 75
	for i := 0; i < frames; i++ {
		time.Sleep(time.Until(start.Add(time.Duration(i) * time.Second / testFPS)))
		select {
		case <-pub.KeyframeRequests():
			enc.ForceKeyframe()
		default:
		}
		for j := range bgr {
			bgr[j] = byte(j/3 + i*3)
		}
		nowUs := time.Now().UnixMicro()
		frame, _, err = enc.EncodeBGR(frame[:0], bgr, nowUs)
		if err != nil {
			t.Fatal(err)
		}
		<-dropping
		// 500 ms, longer than whip.DefaultRepairWindow: the gap is not
		// asked for again, the relay needs a keyframe. (A shorter cut is
		// repaired by NACKs from the publisher's history.)
		dropping <- i >= 30 && i <= 44
		pkts, err = pkz.Packetize(pkts[:0], frame, uint32(i*90000/testFPS))
		if err != nil {
			t.Fatal(err)
		}
		for j := range pkts {
			if err := pub.WriteRTP(&pkts[j]); err != nil {
				t.Fatal(err)
			}
		}
		b, _ := telemetry.Encode(telemetry.Message{TimeUs: nowUs, SpeedMps: 5, YawRateRps: 0.02})
		pub.SendTelemetry(b)
	}
	time.Sleep(300 * time.Millisecond)
	st := r.Stats()
	t.Logf("stats: %+v", st)
	if st.FramesIn < frames/2 || st.TicksLive < frames/2 {
		t.Errorf("too few frames through the relay: %+v", st)
	}
	if st.KeyframeRequests == 0 || st.Losses == 0 {
		t.Errorf("outage not detected: %+v", st)
	}
	if st.TicksPredicted+st.TicksStale < 5 {
		t.Errorf("outage of 6 frames filled with only %d ticks", st.TicksPredicted+st.TicksStale)
	}
	if st.TelemetryIn == 0 {
		t.Errorf("no telemetry reached the filter")
	}
}
