package whip

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"net/http"
	"sync/atomic"
	"testing"
	"time"

	"github.com/pion/rtp"
	"github.com/pion/webrtc/v4"

	"stopgap/stream/ingest"
)

// connect starts a loopback server and publishes to it, returning both ends once the server session is
// connected.
func connect(t *testing.T, scfg Config, pcfg PublishConfig) (*Server, *Session, *Publisher) {
	t.Helper()
	sessions := make(chan *Session, 1)
	scfg.OnSession = func(s *Session) { sessions <- s }
	srv, hs := newTestServer(t, scfg)
	pcfg.Network.LoopbackOnly = true
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	pub, err := Publish(ctx, hs.URL+"/whip", testToken, pcfg)
	if err != nil {
		t.Fatalf("Publish: %v", err)
	}
	t.Cleanup(func() { _ = pub.Close() })
	select {
	case s := <-sessions:
		return srv, s, pub
	case <-time.After(5 * time.Second):
		t.Fatal("OnSession not called")
		return nil, nil, nil
	}
}

// vp8Payload returns a recognisable payload for packet i (content is opaque to this package).
func vp8Payload(i int) []byte { return []byte(fmt.Sprintf("\x10\x00frame-%03d-payload", i)) }

func TestPublishEndToEnd(t *testing.T) {
	srv, sess, pub := connect(t, Config{}, PublishConfig{SenderReportInterval: 100 * time.Millisecond})
	if sess.RemoteAddr() == "" || len(sess.ID()) != 32 {
		t.Errorf("session id %q remote %q", sess.ID(), sess.RemoteAddr())
	}
	if err := sess.RequestKeyframe(); !errors.Is(err, ErrNoTrack) {
		t.Errorf("RequestKeyframe before any packet: %v, want ErrNoTrack", err)
	}

	// 40 packets whose sequence numbers wrap past 65535 and whose RTP timestamps follow the wall clock,
	// so the sender reports can be checked against the known send times.
	const n = 40
	const seq0 = 65520
	tsBase := uint32(0xFFFF0000) // the RTP timestamp wraps during the test as well
	t0 := time.Now()
	sendUs := map[uint16]int64{}
	for i := 0; i < n; i++ {
		now := time.Now()
		ts := tsBase + uint32(now.Sub(t0).Microseconds()*90/1000)
		seq := uint16(seq0 + i)
		pkt := &rtp.Packet{Header: rtp.Header{Version: 2, SequenceNumber: seq, Timestamp: ts, Marker: true},
			Payload: vp8Payload(i)}
		if err := pub.WriteRTP(pkt); err != nil {
			t.Fatalf("WriteRTP %d: %v", i, err)
		}
		sendUs[seq] = now.UnixMicro()
		time.Sleep(3 * time.Millisecond)
	}
	telemetry := [][]byte{[]byte(`{"t_us":1}`), []byte(`{"t_us":2}`), {0, 1, 2, 255}}
	for _, m := range telemetry {
		if err := pub.SendTelemetry(m); err != nil {
			t.Fatalf("SendTelemetry: %v", err)
		}
	}

	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	type got struct {
		pkt     *rtp.Packet
		arrival time.Time
	}
	recv := map[uint16]got{}
	for len(recv) < n {
		pkt, arr, err := sess.ReadRTP(ctx)
		if err != nil {
			t.Fatalf("ReadRTP after %d packets: %v", len(recv), err)
		}
		recv[pkt.SequenceNumber] = got{pkt, arr}
	}
	for i := 0; i < n; i++ {
		seq := uint16(seq0 + i)
		g, ok := recv[seq]
		if !ok {
			t.Fatalf("seq %d missing", seq)
		}
		if !bytes.Equal(g.pkt.Payload, vp8Payload(i)) {
			t.Errorf("seq %d payload %q, want %q", seq, g.pkt.Payload, vp8Payload(i))
		}
	}
	for _, want := range telemetry {
		select {
		case m := <-sess.Telemetry():
			if !bytes.Equal(m.Data, want) && !containsMsg(telemetry, m.Data) {
				t.Errorf("unexpected telemetry %q", m.Data)
			}
			if m.Arrival.IsZero() {
				t.Error("telemetry without arrival time")
			}
		case <-ctx.Done():
			t.Fatal("telemetry not received")
		}
	}

	// Keyframe request: reaches the publisher; a second one right away is refused.
	if err := sess.RequestKeyframe(); err != nil {
		t.Fatalf("RequestKeyframe: %v", err)
	}
	if err := sess.RequestKeyframe(); !errors.Is(err, ErrKeyframeRateLimited) {
		t.Errorf("second RequestKeyframe: %v, want ErrKeyframeRateLimited", err)
	}
	select {
	case <-pub.KeyframeRequests():
	case <-ctx.Done():
		t.Fatal("PLI did not reach the publisher")
	}

	// Sender reports: RTP timestamps map back to the send times (same host, so one clock; the sender's
	// report interpolates from its latest packet, so allow a few ms).
	waitFor(t, 3*time.Second, "a sender report", func() bool { _, ok := sess.SenderReport(); return ok })
	sr, _ := sess.SenderReport()
	var est OffsetEstimator
	for seq, g := range recv {
		mapped := sr.SenderTimeUs(g.pkt.Timestamp, ingest.VideoClockRateHz)
		if d := mapped - sendUs[seq]; d < -5_000 || d > 5_000 {
			t.Errorf("seq %d: mapped send time off by %d us", seq, d)
		}
		est.Add(mapped, g.arrival.UnixMicro())
	}
	// Synchronised clocks (one host): BaseUs is the base one-way delay over loopback, small and >= ~0.
	if base, _ := est.BaseUs(); base < -5_000 || base > 50_000 {
		t.Errorf("base one-way delay over loopback = %d us", base)
	}

	st := sess.Stats()
	if st.PacketsReceived != n || st.PacketsLost != 0 || st.HighestSeq != uint32(seq0+n-1) {
		t.Errorf("rx stats %+v", st)
	}
	if st.PLIsSent != 1 || st.PLIsSuppressed != 1 || st.SenderReports < 1 || st.TelemetryMessages != 3 {
		t.Errorf("counters %+v", st)
	}
	if st.BytesReceived != uint64(n*len(vp8Payload(0))) {
		t.Errorf("bytes %d", st.BytesReceived)
	}
	if !st.HasRTT || st.RTT <= 0 || st.RTT > 100*time.Millisecond {
		t.Errorf("RTT %v (has %v)", st.RTT, st.HasRTT)
	}
	if ps := pub.Stats(); ps.PacketsWritten != n || ps.KeyframeRequests != 1 {
		t.Errorf("publisher stats %+v", ps)
	}

	// Close: DELETE ends the server session.
	if err := pub.Close(); err != nil {
		t.Fatalf("Close: %v", err)
	}
	select {
	case <-sess.Done():
	case <-time.After(2 * time.Second):
		t.Fatal("server session not ended by DELETE")
	}
	if sess.EndReason() != EndDeleted || srv.Stats().Active != 0 {
		t.Errorf("end %v, active %d", sess.EndReason(), srv.Stats().Active)
	}
	if _, _, err := sess.ReadRTP(context.Background()); !errors.Is(err, ErrSessionClosed) {
		t.Errorf("ReadRTP after end: %v", err)
	}
	if err := pub.WriteRTP(&rtp.Packet{}); !errors.Is(err, ErrSessionClosed) {
		t.Errorf("WriteRTP after Close: %v", err)
	}
}

func containsMsg(list [][]byte, m []byte) bool {
	for _, x := range list {
		if bytes.Equal(x, m) {
			return true
		}
	}
	return false
}

// TestNACKRecoversDroppedPacket drops the first transmission of one packet on the publisher's wire; the
// server's NACK generator must ask for it and the publisher's responder must resend it.
func TestNACKRecoversDroppedPacket(t *testing.T) {
	const lostSeq = 105
	var dropped atomic.Bool // originals and retransmissions pass the filter on different goroutines
	_, sess, pub := connect(t, Config{}, PublishConfig{WireFilter: func(h *rtp.Header, _ []byte) bool {
		return h.SequenceNumber != lostSeq || !dropped.CompareAndSwap(false, true)
	}})
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	seen := map[uint16]bool{}
	var order []uint16
	done := make(chan error, 1)
	go func() {
		for len(seen) < 41 {
			pkt, _, err := sess.ReadRTP(ctx)
			if err != nil {
				done <- err
				return
			}
			seen[pkt.SequenceNumber] = true
			order = append(order, pkt.SequenceNumber)
		}
		done <- nil
	}()
	for i := 0; i <= 40; i++ {
		seq := uint16(100 + i)
		// One packet per frame (marker set): the loss shows when the next packet arrives.
		if err := pub.WriteRTP(&rtp.Packet{Header: rtp.Header{Version: 2, SequenceNumber: seq, Timestamp: uint32(i) * 3000, Marker: true},
			Payload: vp8Payload(i)}); err != nil {
			t.Fatal(err)
		}
		time.Sleep(10 * time.Millisecond)
	}
	if err := <-done; err != nil {
		t.Fatalf("reading (have %d packets, lost one recovered: %v): %v", len(seen), seen[lostSeq], err)
	}
	// The retransmission arrives after its successors.
	idx := -1
	for i, s := range order {
		if s == lostSeq {
			idx = i
		}
	}
	if idx < lostSeq-100+1 {
		t.Errorf("seq %d at position %d of %v: expected after its successors", lostSeq, idx, order)
	}
	st := sess.Stats()
	if st.NACKPackets < 1 || st.NACKedPackets < 1 || st.PacketsLost != 0 {
		t.Errorf("server stats %+v", st)
	}
	if ps := pub.Stats(); ps.PacketsFiltered != 1 || ps.NACKsReceived < 1 {
		t.Errorf("publisher stats %+v", ps)
	}
}

// TestFullQueueDropsNewest fills a tiny RTP queue without reading: later packets are dropped and counted,
// the queued ones come out intact and in order.
func TestFullQueueDropsNewest(t *testing.T) {
	_, sess, pub := connect(t, Config{RTPQueue: 4}, PublishConfig{})
	for i := 0; i < 20; i++ {
		if err := pub.WriteRTP(&rtp.Packet{Header: rtp.Header{Version: 2, SequenceNumber: uint16(i)}, Payload: vp8Payload(i)}); err != nil {
			t.Fatal(err)
		}
	}
	waitFor(t, 3*time.Second, "20 packets counted", func() bool { return sess.Stats().PacketsReceived == 20 })
	if d := sess.Stats().PacketsDropped; d != 16 {
		t.Errorf("dropped %d, want 16", d)
	}
	for i := 0; i < 4; i++ {
		pkt, _, err := sess.ReadRTP(context.Background())
		if err != nil || pkt.SequenceNumber != uint16(i) {
			t.Fatalf("read %d: seq %v err %v", i, pkt, err)
		}
	}
}

func TestPublishErrors(t *testing.T) {
	srv, hs := newTestServer(t, Config{MaxSessions: 1})
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	_, err := Publish(ctx, hs.URL+"/whip", "wrong", PublishConfig{Network: Network{LoopbackOnly: true}})
	var he *HTTPError
	if !errors.As(err, &he) || he.StatusCode != http.StatusUnauthorized {
		t.Fatalf("wrong token: %v, want HTTPError 401", err)
	}
	if _, err := Publish(ctx, "ftp://x", testToken, PublishConfig{}); !errors.Is(err, ErrBadConfig) {
		t.Errorf("bad URL: %v", err)
	}
	// Fill the only slot with an offer from another address that never connects, then a real publisher
	// gets 503.
	if r, _ := postFrom(t, srv, "192.0.2.9:40000", makeOffer(t)); r.StatusCode != http.StatusCreated {
		t.Fatal("POST failed")
	}
	_, err = Publish(ctx, hs.URL+"/whip", testToken, PublishConfig{Network: Network{LoopbackOnly: true}})
	if !errors.As(err, &he) || he.StatusCode != http.StatusServiceUnavailable || he.RetryAfter == "" {
		t.Fatalf("full server: %v, want HTTPError 503 with Retry-After", err)
	}
	if srv.Stats().Active != 1 {
		t.Errorf("active %d", srv.Stats().Active)
	}
}

// TestTelemetryLimits: oversized messages and messages arriving at a full queue are dropped and counted.
func TestTelemetryLimits(t *testing.T) {
	_, sess, pub := connect(t, Config{MaxTelemetryBytes: 8, TelemetryQueue: 2}, PublishConfig{TelemetryReliable: true})
	if err := pub.SendTelemetry([]byte("123456789")); err != nil { // 9 bytes > 8
		t.Fatal(err)
	}
	for i := 0; i < 4; i++ {
		if err := pub.SendTelemetry([]byte{byte('a' + i)}); err != nil {
			t.Fatal(err)
		}
	}
	waitFor(t, 3*time.Second, "5 telemetry messages accounted", func() bool {
		st := sess.Stats()
		return st.TelemetryMessages+st.TelemetryDropped == 5
	})
	if st := sess.Stats(); st.TelemetryMessages != 2 || st.TelemetryDropped != 3 {
		t.Fatalf("messages %d dropped %d, want 2 and 3", st.TelemetryMessages, st.TelemetryDropped)
	}
	for _, want := range []string{"a", "b"} { // reliable and ordered: the first two small ones were kept
		if m := <-sess.Telemetry(); string(m.Data) != want {
			t.Errorf("got %q, want %q", m.Data, want)
		}
	}
}

// TestConcurrentPostsRespectMaxSessions fires more simultaneous offers than slots, from distinct
// addresses (one address holds one unconnected session): exactly MaxSessions win.
func TestConcurrentPostsRespectMaxSessions(t *testing.T) {
	srv, _ := newTestServer(t, Config{MaxSessions: 2})
	const n = 6
	offers := make([]string, n)
	for i := range offers {
		offers[i] = makeOffer(t)
	}
	codes := make(chan int, n)
	for i := 0; i < n; i++ {
		go func(i int) {
			resp, _ := postFrom(t, srv, fmt.Sprintf("192.0.2.%d:40000", i+1), offers[i])
			codes <- resp.StatusCode
		}(i)
	}
	count := map[int]int{}
	for i := 0; i < n; i++ {
		count[<-codes]++
	}
	if count[http.StatusCreated] != 2 || count[http.StatusServiceUnavailable] != n-2 {
		t.Fatalf("status counts %v, want 2x201 and %dx503", count, n-2)
	}
	if a := srv.Stats().Active; a != 2 {
		t.Errorf("active %d", a)
	}
}

// TestOtherDataChannelClosed: a data channel with a label other than TelemetryLabel is closed and counted.
func TestOtherDataChannelClosed(t *testing.T) {
	sessions := make(chan *Session, 1)
	_, hs := newTestServer(t, Config{OnSession: func(s *Session) { sessions <- s }})
	pc, offer := makeOfferPC(t, "camera-control")
	resp, answer := post(t, hs.URL, offer)
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("POST: %d %s", resp.StatusCode, answer)
	}
	if err := pc.SetRemoteDescription(webrtc.SessionDescription{Type: webrtc.SDPTypeAnswer, SDP: answer}); err != nil {
		t.Fatal(err)
	}
	var sess *Session
	select {
	case sess = <-sessions:
	case <-time.After(5 * time.Second):
		t.Fatal("no session")
	}
	waitFor(t, 3*time.Second, "the extra channel to be refused", func() bool { return sess.Stats().OtherDataChannels == 1 })
}
