package rtpudp_test

import (
	"context"
	"io"
	"log/slog"
	"net"
	"sync/atomic"
	"testing"
	"time"

	"github.com/pion/rtcp"

	"stopgap/predictor"
	"stopgap/stream/ingest"
	"stopgap/stream/relay"
	"stopgap/stream/rtpudp"
	"stopgap/stream/rtpvp8"
	"stopgap/stream/telemetry"
	"stopgap/stream/vp8"
)

// TestRelayOverUDP runs a real relay fed by a real VP8 stream over RTP/UDP on
// loopback (real clock, 1.5 s of 30 fps video, 160x120) and checks that the
// relay decodes frames and shows LIVE ticks, and that telemetry gets through;
// with a frame lost on the way, that the relay's keyframe request reaches the
// sender as an RTCP PLI and video resumes.
func TestRelayOverUDP(t *testing.T) {
	if testing.Short() {
		t.Skip("real-time relay runs (about 2 s each)")
	}
	tests := []struct {
		name      string
		dropFrame int // -1: none
	}{
		{"clean", -1},
		{"one frame lost", 15},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) { runRelayOverUDP(t, tc.dropFrame) })
	}
}

func runRelayOverUDP(t *testing.T, dropFrame int) {
	const (
		w, h   = 160, 120
		fps    = 30
		frames = 45
	)
	log := slog.New(slog.NewTextHandler(io.Discard, nil))
	cam := predictor.Camera{Width: w, Height: h, Fx: 140, Fy: 140, Cx: 80, Cy: 60, HeightM: 1.4, PitchDeg: 6}
	r, err := relay.New(relay.Config{FPS: fps, Camera: cam, Logger: log,
		IngestToken: "ingest-token-0123456789abcdef", ConsoleToken: "console-token-0123456789abcdef"})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithCancel(t.Context())
	runErr := make(chan error, 1)
	go func() { runErr <- r.Run(ctx) }()
	defer func() {
		cancel()
		if err := <-runErr; err != nil {
			t.Errorf("Run: %v", err)
		}
	}()

	s, err := rtpudp.Listen(ctx, rtpudp.Config{RTPAddr: "127.0.0.1:0", TelemetryAddr: "127.0.0.1:0", Logger: log})
	if err != nil {
		t.Fatal(err)
	}
	r.Offer(s)

	conn, err := net.ListenUDP("udp", &net.UDPAddr{IP: net.IPv4(127, 0, 0, 1)})
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	rtpTo, telTo := s.RTPAddr().(*net.UDPAddr), s.TelemetryAddr().(*net.UDPAddr)

	// Keyframe requests from the relay come back on the sender's socket.
	var forceKey, plis atomic.Int32
	go func() {
		buf := make([]byte, 1500)
		for {
			n, _, err := conn.ReadFromUDP(buf)
			if err != nil {
				return
			}
			pkts, err := rtcp.Unmarshal(buf[:n])
			if err != nil {
				continue
			}
			for _, p := range pkts {
				if _, ok := p.(*rtcp.PictureLossIndication); ok {
					plis.Add(1)
					forceKey.Store(1)
				}
			}
		}
	}()

	enc, err := vp8.NewEncoder(vp8.EncoderConfig{Width: w, Height: h, FrameRateHz: fps, BitrateBps: 300_000})
	if err != nil {
		t.Fatal(err)
	}
	defer enc.Close()
	pkz, err := rtpvp8.NewPacketizer(rtpvp8.PacketizerConfig{PayloadType: rtpudp.DefaultPayloadType, SSRC: 0xCAFE, FirstSeq: 65500})
	if err != nil {
		t.Fatal(err)
	}
	bgr := make([]byte, w*h*3)
	var frame []byte
	start := time.Now()
	for i := range frames {
		capture := start.Add(time.Duration(i) * time.Second / fps)
		time.Sleep(time.Until(capture))
		for y := range h {
			for x := range w {
				o := (y*w + x) * 3
				bgr[o], bgr[o+1], bgr[o+2] = byte((x+i)*7), byte(y*5+((x+i)/16)*40), byte((x+y+i)*3)
			}
		}
		if forceKey.Swap(0) == 1 {
			enc.ForceKeyframe()
		}
		frame, _, err = enc.EncodeBGR(frame[:0], bgr, capture.UnixMicro())
		if err != nil {
			t.Fatal(err)
		}
		ts := uint32(1000 + i*90000/fps)
		pk, err := pkz.Packetize(nil, frame, ts)
		if err != nil {
			t.Fatal(err)
		}
		if i%10 == 0 { // sender report pairing this frame's RTP time with its capture time
			b, _ := (&rtcp.SenderReport{SSRC: 0xCAFE, NTPTime: ingest.UnixUsToNTP(capture.UnixMicro()), RTPTime: ts}).Marshal()
			conn.WriteToUDP(b, rtpTo)
		}
		for j := range pk {
			if i == dropFrame {
				break
			}
			b, err := pk[j].Marshal()
			if err != nil {
				t.Fatal(err)
			}
			conn.WriteToUDP(b, rtpTo)
		}
		tb, err := telemetry.Encode(telemetry.Message{TimeUs: capture.UnixMicro(), SpeedMps: 2})
		if err != nil {
			t.Fatal(err)
		}
		conn.WriteToUDP(tb, telTo)
	}
	deadline := time.Now().Add(3 * time.Second)
	for {
		st := r.Stats()
		// A lost frame costs it and the inter frames until the keyframe the
		// PLI asked for: a few at 30 fps on loopback.
		if st.FramesIn >= frames-8 && st.TicksLive > 0 && (dropFrame < 0 || st.KeyframeRequests > 0) {
			t.Logf("relay: %d frames in, %d live / %d predicted / %d stale ticks, %d telemetry in; session %+v; PLIs at sender %d",
				st.FramesIn, st.TicksLive, st.TicksPredicted, st.TicksStale, st.TelemetryIn, s.Counts(), plis.Load())
			if dropFrame >= 0 && plis.Load() == 0 {
				t.Errorf("the relay asked for %d keyframes but no PLI reached the sender", st.KeyframeRequests)
			}
			if st.TelemetryIn == 0 {
				t.Errorf("no telemetry reached the filter (session counts %+v)", s.Counts())
			}
			return
		}
		if time.Now().After(deadline) {
			t.Fatalf("relay stats %+v after %d frames sent; session %+v", st, frames, s.Counts())
		}
		time.Sleep(20 * time.Millisecond)
	}
}
