package simvehicle

import (
	"context"
	"errors"
	"net/http/httptest"
	"path/filepath"
	"sync"
	"testing"
	"time"

	"stopgap/stream/ingest"
	"stopgap/stream/rtpvp8"
	"stopgap/stream/telemetry"
	"stopgap/stream/vp8"
	"stopgap/stream/whip"
)

const testToken = "simvehicle-test-token-0123456789"

// decodeSink decodes assembled frames and counts what it saw.
type decodeSink struct {
	dec               *vp8.Decoder
	img               vp8.Image
	decoded, keys     int
	losses            int
	lastTS            uint32
	keyAfterLoss      bool
	keyAfterLossAtSeq uint16
}

func (s *decodeSink) OnFrame(f rtpvp8.Frame) {
	if f.Keyframe && s.losses > 0 {
		s.keyAfterLoss = true
	}
	if f.Keyframe {
		s.keys++
	}
	if err := s.dec.Decode(f.Data, &s.img); err == nil {
		s.decoded++
		s.lastTS = f.RTPTimestamp
	}
}

func (s *decodeSink) OnLoss(rtpvp8.Loss) { s.losses++; s.dec.Lost() }

func TestPublishLoopback(t *testing.T) {
	if testing.Short() {
		t.Skip("1.5 s WebRTC loopback run")
	}
	rec := writeTestRecording(t, filepath.Join(t.TempDir(), "drive"), 160, 96, 36, 30)
	sessions := make(chan *whip.Session, 1)
	srv, err := whip.NewServer(whip.Config{Token: testToken, Network: whip.Network{LoopbackOnly: true},
		OnSession: func(s *whip.Session) { sessions <- s }})
	if err != nil {
		t.Fatal(err)
	}
	defer srv.Close()
	hs := httptest.NewServer(srv)
	defer hs.Close()

	link, err := NewLink(LinkConfig{Outages: []Outage{{At: 400 * time.Millisecond, Duration: 250 * time.Millisecond}}}, nil)
	if err != nil {
		t.Fatal(err)
	}
	var mu sync.Mutex
	sentAt := map[uint32]int64{} // RTP timestamp -> capture Unix us
	veh, err := New(Config{Recording: rec, Link: link, OnFrame: func(fi FrameInfo) {
		mu.Lock()
		sentAt[fi.RTPTimestamp] = fi.CaptureUs
		mu.Unlock()
	}})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 20*time.Second)
	defer cancel()
	pubErr := make(chan error, 1)
	go func() {
		pubErr <- veh.Publish(ctx, hs.URL+"/whip", testToken,
			whip.PublishConfig{Network: whip.Network{LoopbackOnly: true}, SenderReportInterval: 200 * time.Millisecond})
	}()
	var sess *whip.Session
	select {
	case sess = <-sessions:
	case err := <-pubErr:
		t.Fatalf("Publish: %v", err)
	case <-ctx.Done():
		t.Fatal("no session")
	}
	dec, err := vp8.NewDecoder()
	if err != nil {
		t.Fatal(err)
	}
	defer dec.Close()
	sink := &decodeSink{dec: dec}
	asm, err := rtpvp8.NewAssembler(rtpvp8.AssemblerConfig{}, sink)
	if err != nil {
		t.Fatal(err)
	}
	var telMsgs []telemetry.Message
	go func() {
		for m := range sess.Telemetry() {
			if msg, err := telemetry.Decode(m.Data); err == nil {
				mu.Lock()
				telMsgs = append(telMsgs, msg)
				mu.Unlock()
			}
		}
	}()
	var srMaxErrUs int64
	srChecked := 0
	for {
		rctx, rcancel := context.WithTimeout(ctx, 2*time.Second) // ends at the DELETE after the drive
		pkt, arr, err := sess.ReadRTP(rctx)
		rcancel()
		if err != nil {
			asm.Flush(time.Now())
			break
		}
		losses := sink.losses
		if err := asm.Push(pkt, arr); err != nil {
			t.Errorf("push: %v", err)
		}
		asm.Expire(arr)
		if sink.losses > losses || dec.NeedKeyframe() {
			_ = sess.RequestKeyframe() // rate-limited inside whip
		}
		if sr, ok := sess.SenderReport(); ok {
			mu.Lock()
			capUs, known := sentAt[pkt.Timestamp]
			mu.Unlock()
			if known {
				e := sr.SenderTimeUs(pkt.Timestamp, ingest.VideoClockRateHz) - capUs
				srMaxErrUs = max(srMaxErrUs, e, -e)
				srChecked++
			}
		}
	}
	if err := <-pubErr; err != nil && !errors.Is(err, context.Canceled) {
		t.Errorf("Publish returned %v after the drive", err)
	}
	st := veh.Stats()
	t.Logf("vehicle %+v", st)
	t.Logf("receiver: decoded %d, keyframes %d, losses %d, SR mapping max error %d us over %d packets",
		sink.decoded, sink.keys, sink.losses, srMaxErrUs, srChecked)
	if st.FramesEncoded+st.FramesSkipped != 36 {
		t.Errorf("encoded %d + skipped %d frames, want 36", st.FramesEncoded, st.FramesSkipped)
	}
	if st.Link.PacketsOutage == 0 || st.Link.TelemetryOutage == 0 {
		t.Errorf("the 250 ms outage dropped nothing: %+v", st.Link)
	}
	if sink.losses == 0 {
		t.Error("receiver saw no loss across the outage")
	}
	if st.KeyframeRequests == 0 || !sink.keyAfterLoss {
		t.Errorf("keyframe requests %d, keyframe after the loss %v: PLI did not force a keyframe", st.KeyframeRequests, sink.keyAfterLoss)
	}
	// 36 frames, about 8 lost in the outage; the rest decode once the keyframe came.
	if sink.decoded < 20 {
		t.Errorf("decoded %d frames, want >= 20", sink.decoded)
	}
	mu.Lock()
	defer mu.Unlock()
	// telemetry: 100 Hz over 1.2 s minus the 250 ms outage
	if len(telMsgs) < 60 || uint64(len(telMsgs)) > st.TelemetryRows-st.Link.TelemetryOutage {
		t.Errorf("received %d telemetry messages of %d sent, %d dropped in the outage", len(telMsgs), st.TelemetryRows, st.Link.TelemetryOutage)
	}
	start := veh.StartTime().UnixMicro()
	for _, m := range telMsgs {
		if m.TimeUs < start || m.TimeUs > start+2_000_000 || !m.HasSeq {
			t.Fatalf("telemetry %+v not on the vehicle clock (start %d us)", m, start)
		}
	}
	// The sender report maps RTP time to the send time: capture + encode (+ 0 delay here).
	if srChecked == 0 || srMaxErrUs > 30_000 {
		t.Errorf("sender report mapping error %d us over %d packets, want <= 30 ms", srMaxErrUs, srChecked)
	}
}
