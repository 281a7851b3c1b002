package console

import (
	"errors"
	"io"
	"net"
	"net/http"
	"net/http/httptest"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/pion/ice/v4"
	"github.com/pion/rtp/codecs"
	"github.com/pion/webrtc/v4"

	"stopgap/internal/display"
)

// goViewer is a receive-only pion peer standing in for the browser.
type goViewer struct {
	pc *webrtc.PeerConnection

	mu        sync.Mutex
	firstKey  *bool // was the first frame received a keyframe
	packets   int
	metas     []string
	connected chan struct{}
	gotMeta   chan struct{}
	gotVideo  chan struct{}
}

func newGoViewer(t *testing.T) *goViewer {
	t.Helper()
	m := &webrtc.MediaEngine{}
	if err := m.RegisterDefaultCodecs(); err != nil {
		t.Fatal(err)
	}
	se := webrtc.SettingEngine{}
	se.SetICEMulticastDNSMode(ice.MulticastDNSModeDisabled)
	se.SetIncludeLoopbackCandidate(true)
	se.SetIPFilter(func(ip net.IP) bool { return ip.IsLoopback() })
	se.SetNetworkTypes([]webrtc.NetworkType{webrtc.NetworkTypeUDP4})
	pc, err := webrtc.NewAPI(webrtc.WithMediaEngine(m), webrtc.WithSettingEngine(se)).NewPeerConnection(webrtc.Configuration{})
	if err != nil {
		t.Fatal(err)
	}
	v := &goViewer{pc: pc, connected: make(chan struct{}), gotMeta: make(chan struct{}, 1000), gotVideo: make(chan struct{}, 1000)}
	if _, err := pc.AddTransceiverFromKind(webrtc.RTPCodecTypeVideo, webrtc.RTPTransceiverInit{Direction: webrtc.RTPTransceiverDirectionRecvonly}); err != nil {
		t.Fatal(err)
	}
	negotiated, id, ordered, retr := true, uint16(0), false, uint16(0)
	dc, err := pc.CreateDataChannel("meta", &webrtc.DataChannelInit{Negotiated: &negotiated, ID: &id, Ordered: &ordered, MaxRetransmits: &retr})
	if err != nil {
		t.Fatal(err)
	}
	dc.OnMessage(func(msg webrtc.DataChannelMessage) {
		v.mu.Lock()
		v.metas = append(v.metas, string(msg.Data))
		v.mu.Unlock()
		v.gotMeta <- struct{}{}
	})
	var once sync.Once
	pc.OnConnectionStateChange(func(s webrtc.PeerConnectionState) {
		if s == webrtc.PeerConnectionStateConnected {
			once.Do(func() { close(v.connected) })
		}
	})
	pc.OnTrack(func(tr *webrtc.TrackRemote, _ *webrtc.RTPReceiver) {
		for {
			p, _, err := tr.ReadRTP()
			if err != nil {
				return
			}
			var d codecs.VP8Packet
			payload, err := d.Unmarshal(p.Payload)
			v.mu.Lock()
			v.packets++
			if err == nil && d.S == 1 && d.PID == 0 && v.firstKey == nil {
				k := vp8IsKeyframe(payload)
				v.firstKey = &k
			}
			v.mu.Unlock()
			v.gotVideo <- struct{}{}
		}
	})
	t.Cleanup(func() { pc.Close() })
	return v
}

// offer makes the offer with all candidates.
func (v *goViewer) offer(t *testing.T) string {
	t.Helper()
	o, err := v.pc.CreateOffer(nil)
	if err != nil {
		t.Fatal(err)
	}
	g := webrtc.GatheringCompletePromise(v.pc)
	if err := v.pc.SetLocalDescription(o); err != nil {
		t.Fatal(err)
	}
	<-g
	return v.pc.LocalDescription().SDP
}

func postOffer(t *testing.T, url, sdp string) *http.Response {
	t.Helper()
	req, _ := http.NewRequest("POST", url+"/api/view", strings.NewReader(sdp))
	req.Header.Set("Content-Type", "application/sdp")
	req.Header.Set("Authorization", "Bearer "+testToken)
	res, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	return res
}

func waitFor(t *testing.T, what string, ch <-chan struct{}) {
	t.Helper()
	select {
	case <-ch:
	case <-time.After(10 * time.Second):
		t.Fatalf("timed out waiting for %s", what)
	}
}

// TestSessionEndToEnd connects a pion viewer over loopback, checks that it
// receives video starting at a keyframe and the meta messages, that a
// keyframe was requested when it joined, and that DELETE ends the session.
func TestSessionEndToEnd(t *testing.T) {
	var reasons reasonLog
	viewersCh := make(chan int, 10)
	c := newTestConsole(t, Config{KeyframeNeeded: reasons.add, OnViewersChanged: func(n int) { viewersCh <- n }})
	srv := httptest.NewServer(c)
	defer srv.Close()

	v := newGoViewer(t)
	res := postOffer(t, srv.URL, v.offer(t))
	answer, _ := io.ReadAll(res.Body)
	res.Body.Close()
	if res.StatusCode != http.StatusCreated || res.Header.Get("Content-Type") != "application/sdp" {
		t.Fatalf("offer: %d %s", res.StatusCode, answer)
	}
	loc := res.Header.Get("Location")
	if !strings.HasPrefix(loc, "/api/view/") || len(loc) != len("/api/view/")+32 {
		t.Fatalf("Location %q, want /api/view/ + 32 hex digits", loc)
	}
	if err := v.pc.SetRemoteDescription(webrtc.SessionDescription{Type: webrtc.SDPTypeAnswer, SDP: string(answer)}); err != nil {
		t.Fatal(err)
	}
	waitFor(t, "ICE/DTLS connected", v.connected)
	select {
	case n := <-viewersCh:
		if n != 1 {
			t.Fatalf("OnViewersChanged(%d), want 1", n)
		}
	case <-time.After(10 * time.Second):
		t.Fatal("server never saw the viewer connect")
	}
	if rs := reasons.get(); len(rs) == 0 || rs[0] != KeyframeViewerJoined {
		t.Errorf("keyframe reasons %v, want viewer-joined first", rs)
	}

	// Pump: a delta first (must not reach the viewer), then a keyframe and
	// deltas, with meta, until the viewer has both.
	m := sampleMeta()
	deadline := time.After(10 * time.Second)
	for i := 0; ; i++ {
		frame := deltaFrame
		if i == 1 {
			frame = keyFrame
		}
		if err := c.WriteFrame(frame, tick); err != nil {
			t.Fatal(err)
		}
		m.Seq = uint64(i)
		if err := c.WriteMeta(m); err != nil {
			t.Fatal(err)
		}
		v.mu.Lock()
		done := v.packets >= 3 && len(v.metas) >= 3
		v.mu.Unlock()
		if done {
			break
		}
		select {
		case <-deadline:
			t.Fatalf("viewer got %d packets and %d meta messages", v.packets, len(v.metas))
		case <-time.After(10 * time.Millisecond):
		}
	}
	v.mu.Lock()
	if v.firstKey == nil || !*v.firstKey {
		t.Error("first frame the viewer received is not a keyframe")
	}
	if got, err := ParseMeta([]byte(v.metas[0])); err != nil || got.State != display.StatePredicted || got.Profile != "city" {
		t.Errorf("meta %q: %v", v.metas[0], err)
	}
	v.mu.Unlock()
	if st := c.Stats(); st.FramesSkipped < 1 || st.FramesSent < 3 || st.MetaSent < 3 {
		t.Errorf("stats %+v", st)
	}

	// DELETE ends it.
	req, _ := http.NewRequest("DELETE", srv.URL+loc, nil)
	req.Header.Set("Authorization", "Bearer "+testToken)
	dres, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	dres.Body.Close()
	if dres.StatusCode != 200 {
		t.Fatalf("DELETE: %d", dres.StatusCode)
	}
	if st := c.Stats(); st.Sessions != 0 || st.Viewers != 0 {
		t.Errorf("after DELETE: %+v", st)
	}
	dres2, _ := http.DefaultClient.Do(req.Clone(req.Context()))
	if dres2 != nil {
		dres2.Body.Close()
		if dres2.StatusCode != 404 {
			t.Errorf("second DELETE: %d, want 404", dres2.StatusCode)
		}
	}
}

// TestSessionLimitsAndTimeout: with MaxViewers 1 a second offer gets 503
// with Retry-After while the first is half-open; the half-open session is
// closed after ConnectTimeout, freeing the slot.
func TestSessionLimitsAndTimeout(t *testing.T) {
	c := newTestConsole(t, Config{MaxViewers: 1, ConnectTimeout: 300 * time.Millisecond})
	srv := httptest.NewServer(c)
	defer srv.Close()

	res := postOffer(t, srv.URL, newGoViewer(t).offer(t)) // never completes ICE: no answer applied
	res.Body.Close()
	if res.StatusCode != http.StatusCreated {
		t.Fatalf("first offer: %d", res.StatusCode)
	}
	res = postOffer(t, srv.URL, newGoViewer(t).offer(t))
	body, _ := io.ReadAll(res.Body)
	res.Body.Close()
	if res.StatusCode != http.StatusServiceUnavailable || res.Header.Get("Retry-After") == "" {
		t.Fatalf("second offer: %d Retry-After=%q %s", res.StatusCode, res.Header.Get("Retry-After"), body)
	}
	deadline := time.Now().Add(5 * time.Second)
	for c.Stats().Sessions != 0 {
		if time.Now().After(deadline) {
			t.Fatal("half-open session not closed after ConnectTimeout")
		}
		time.Sleep(20 * time.Millisecond)
	}
	c.Close()
	res = postOffer(t, srv.URL, newGoViewer(t).offer(t))
	res.Body.Close()
	if res.StatusCode != http.StatusServiceUnavailable {
		t.Errorf("offer after Close: %d, want 503", res.StatusCode)
	}
	if err := c.WriteFrame(keyFrame, tick); !errors.Is(err, ErrClosed) {
		t.Errorf("WriteFrame after Close: %v", err)
	}
}

// TestCloseDuringOffers: Close racing with offers leaves no session behind
// (run with -race).
func TestCloseDuringOffers(t *testing.T) {
	c := newTestConsole(t, Config{})
	srv := httptest.NewServer(c)
	defer srv.Close()
	offers := make([]string, 3)
	for i := range offers {
		offers[i] = newGoViewer(t).offer(t)
	}
	var wg sync.WaitGroup
	for _, o := range offers {
		wg.Add(1)
		go func() {
			defer wg.Done()
			res := postOffer(t, srv.URL, o)
			res.Body.Close()
			if res.StatusCode != http.StatusCreated && res.StatusCode != http.StatusServiceUnavailable {
				t.Errorf("offer during Close: %d", res.StatusCode)
			}
		}()
	}
	time.Sleep(5 * time.Millisecond)
	c.Close()
	wg.Wait()
	if n := c.Stats().Sessions; n != 0 {
		t.Errorf("%d sessions left after Close", n)
	}
}
