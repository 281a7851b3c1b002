package whip

import (
	"bytes"
	"context"
	"errors"
	"log/slog"
	"net"
	"net/http"
	"net/http/httptest"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/pion/rtp"
)

// freeUDPPort returns a UDP port that was free on 127.0.0.1 a moment ago.
func freeUDPPort(t *testing.T) int {
	t.Helper()
	c, err := net.ListenUDP("udp4", &net.UDPAddr{IP: net.IPv4(127, 0, 0, 1)})
	if err != nil {
		t.Fatal(err)
	}
	port := c.LocalAddr().(*net.UDPAddr).Port
	c.Close()
	return port
}

// candidates returns the a=candidate lines of an SDP.
func candidates(sdp string) []string {
	var out []string
	for _, l := range strings.Split(sdp, "\r\n") {
		if strings.HasPrefix(l, "a=candidate:") {
			out = append(out, l)
		}
	}
	return out
}

// TestUDPPortSharedBySessions: with Network.UDPPort the answer offers that one port, and Close frees it.
func TestUDPPortSharedBySessions(t *testing.T) {
	port := freeUDPPort(t)
	cfg := Config{Network: Network{LoopbackOnly: true, UDPPort: port}, MaxSessions: 2}
	srv, hs := newTestServer(t, cfg)
	resp, answer := post(t, hs.URL, staticOffer)
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("status %d: %s", resp.StatusCode, answer)
	}
	cands := candidates(answer)
	if len(cands) == 0 {
		t.Fatalf("answer has no candidates:\n%s", answer)
	}
	for _, c := range cands {
		f := strings.Fields(c)
		if len(f) < 6 || f[5] != strconv.Itoa(port) || f[4] != "127.0.0.1" {
			t.Errorf("candidate %q: want 127.0.0.1 port %d", c, port)
		}
	}
	if err := srv.Close(); err != nil {
		t.Fatalf("Close: %v", err)
	}
	c, err := net.ListenUDP("udp4", &net.UDPAddr{IP: net.IPv4(127, 0, 0, 1), Port: port})
	if err != nil {
		t.Fatalf("port %d still taken after Close: %v", port, err)
	}
	c.Close()
}

// TestUDPPortCarriesMedia publishes through a server on one UDP port: the packets arrive.
func TestUDPPortCarriesMedia(t *testing.T) {
	port := freeUDPPort(t)
	_, sess, pub := connect(t, Config{Network: Network{LoopbackOnly: true, UDPPort: port}}, PublishConfig{})
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Second)
	defer cancel()
	for i := 0; i < 5; i++ {
		if err := pub.WriteRTP(&rtp.Packet{Header: rtp.Header{Version: 2, SequenceNumber: uint16(i), Timestamp: uint32(i) * 3000},
			Payload: vp8Payload(i)}); err != nil {
			t.Fatal(err)
		}
	}
	for i := 0; i < 5; i++ {
		if _, _, err := sess.ReadRTP(ctx); err != nil {
			t.Fatalf("packet %d: %v", i, err)
		}
	}
}

// TestNetworkValidation: bad ports and announced addresses are refused with ErrBadConfig.
func TestNetworkValidation(t *testing.T) {
	for _, n := range []Network{{UDPPort: -1}, {UDPPort: 70000}, {NAT1To1IPs: []string{"relay.example"}}} {
		if _, err := NewServer(Config{Token: testToken, Network: n}); !errors.Is(err, ErrBadConfig) {
			t.Errorf("%+v: err %v, want ErrBadConfig", n, err)
		}
	}
}

// TestAnnouncedAddress: NAT1To1IPs replaces the host address in the answer.
func TestAnnouncedAddress(t *testing.T) {
	_, hs := newTestServer(t, Config{Network: Network{LoopbackOnly: true, NAT1To1IPs: []string{"203.0.113.7"}}})
	resp, answer := post(t, hs.URL, staticOffer)
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("status %d: %s", resp.StatusCode, answer)
	}
	cands := candidates(answer)
	if len(cands) == 0 {
		t.Fatal("no candidates")
	}
	for _, c := range cands {
		if f := strings.Fields(c); len(f) < 6 || f[4] != "203.0.113.7" {
			t.Errorf("candidate %q: want the announced 203.0.113.7", c)
		}
	}
}

// TestIncludeLoopback: loopback candidates are offered only when asked for. Gathering is limited to the
// loopback interface (Network.Interfaces), so the test binds nothing else.
func TestIncludeLoopback(t *testing.T) {
	for _, include := range []bool{false, true} {
		srv, err := NewServer(Config{Token: testToken, Network: Network{IncludeLoopback: include, Interfaces: []string{loopbackName(t)}}})
		if err != nil {
			t.Fatal(err)
		}
		hs := httptest.NewServer(srv)
		resp, answer := post(t, hs.URL, staticOffer)
		hs.Close()
		srv.Close()
		if resp.StatusCode != http.StatusCreated {
			t.Fatalf("status %d: %s", resp.StatusCode, answer)
		}
		loop := false
		for _, c := range candidates(answer) {
			if f := strings.Fields(c); len(f) > 4 && (f[4] == "127.0.0.1" || f[4] == "::1") {
				loop = true
			}
		}
		if loop != include {
			t.Errorf("IncludeLoopback %v: loopback candidate offered = %v", include, loop)
		}
	}
}

// loopbackName returns the name of the loopback interface.
func loopbackName(t *testing.T) string {
	t.Helper()
	ifs, err := net.Interfaces()
	if err != nil {
		t.Fatal(err)
	}
	for _, i := range ifs {
		if i.Flags&net.FlagLoopback != 0 {
			return i.Name
		}
	}
	t.Skip("no loopback interface")
	return ""
}

// TestTelemetryChannelKind: the session reports how the telemetry channel was opened and warns once
// about an ordered, reliable one (head-of-line blocking), never about an unordered, unreliable one.
func TestTelemetryChannelKind(t *testing.T) {
	for _, reliable := range []bool{false, true} {
		var buf syncBuffer
		log := slog.New(slog.NewTextHandler(&buf, &slog.HandlerOptions{Level: slog.LevelWarn}))
		_, sess, pub := connect(t, Config{Logger: log}, PublishConfig{TelemetryReliable: reliable})
		if err := pub.SendTelemetry([]byte(`{}`)); err != nil {
			t.Fatal(err)
		}
		waitFor(t, 5*time.Second, "the telemetry message", func() bool { return sess.Stats().TelemetryMessages == 1 })
		st := sess.Stats()
		if st.TelemetryOrdered != reliable || st.TelemetryReliable != reliable {
			t.Errorf("reliable publisher %v: ordered %v reliable %v", reliable, st.TelemetryOrdered, st.TelemetryReliable)
		}
		want := 0
		if reliable {
			want = 1
		}
		if n := strings.Count(buf.String(), "telemetry data channel is ordered or reliable"); n != want {
			t.Errorf("reliable publisher %v: %d warnings, want %d:\n%s", reliable, n, want, buf.String())
		}
	}
}

// syncBuffer is a bytes.Buffer safe for the logger's concurrent writes.
type syncBuffer struct {
	mu sync.Mutex
	b  bytes.Buffer
}

func (s *syncBuffer) Write(p []byte) (int, error) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.Write(p)
}

func (s *syncBuffer) String() string {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.b.String()
}
