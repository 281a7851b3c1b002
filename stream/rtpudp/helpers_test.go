package rtpudp

import (
	"io"
	"log/slog"
	"net"
	"sync/atomic"
	"testing"
	"time"

	"github.com/pion/rtcp"
	"github.com/pion/rtp"

	"stopgap/stream/rtpvp8"
)

// fakeClock is an injectable receiver clock.
type fakeClock struct{ ns atomic.Int64 }

func newFakeClock() *fakeClock {
	c := &fakeClock{}
	c.ns.Store(time.Date(2026, 1, 2, 3, 4, 5, 0, time.UTC).UnixNano())
	return c
}

func (c *fakeClock) Now() time.Time          { return time.Unix(0, c.ns.Load()) }
func (c *fakeClock) Advance(d time.Duration) { c.ns.Add(int64(d)) }

func quietLogger() *slog.Logger { return slog.New(slog.NewTextHandler(io.Discard, nil)) }

// sender is a camera stand-in: a UDP socket on 127.0.0.1.
type sender struct {
	t    testing.TB
	conn *net.UDPConn
	to   *net.UDPAddr
}

func newSender(t testing.TB, to net.Addr) *sender {
	t.Helper()
	c, err := net.ListenUDP("udp", &net.UDPAddr{IP: net.IPv4(127, 0, 0, 1)})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { c.Close() })
	snd := &sender{t: t, conn: c}
	if to != nil {
		snd.to = to.(*net.UDPAddr)
	}
	return snd
}

func (s *sender) port() int { return s.conn.LocalAddr().(*net.UDPAddr).Port }

func (s *sender) send(b []byte) {
	s.t.Helper()
	if _, err := s.conn.WriteToUDP(b, s.to); err != nil {
		s.t.Fatal(err)
	}
}

func (s *sender) sendRTP(p *rtp.Packet) {
	s.t.Helper()
	b, err := p.Marshal()
	if err != nil {
		s.t.Fatal(err)
	}
	s.send(b)
}

func (s *sender) sendRTCP(pkts ...rtcp.Packet) {
	s.t.Helper()
	b, err := rtcp.Marshal(pkts)
	if err != nil {
		s.t.Fatal(err)
	}
	s.send(b)
}

// readRTCP returns the next RTCP datagram the sender receives, or fails
// after the timeout.
func (s *sender) readRTCP(timeout time.Duration) []rtcp.Packet {
	s.t.Helper()
	buf := make([]byte, 1500)
	s.conn.SetReadDeadline(time.Now().Add(timeout))
	n, _, err := s.conn.ReadFromUDP(buf)
	if err != nil {
		s.t.Fatalf("no RTCP back at the sender: %v", err)
	}
	pkts, err := rtcp.Unmarshal(buf[:n])
	if err != nil {
		s.t.Fatalf("sender got unparsable RTCP: %v", err)
	}
	return pkts
}

// vp8Packets packetises frames of arbitrary bytes (the session does not look
// inside the payload).
func vp8Packets(t testing.TB, frames, frameBytes int, ssrc uint32, firstSeq uint16) []rtp.Packet {
	t.Helper()
	pkz, err := rtpvp8.NewPacketizer(rtpvp8.PacketizerConfig{MTU: 1200, PayloadType: 96, SSRC: ssrc, FirstSeq: firstSeq})
	if err != nil {
		t.Fatal(err)
	}
	var out []rtp.Packet
	for i := range frames {
		frame := make([]byte, frameBytes)
		for j := range frame {
			frame[j] = byte(i*31 + j)
		}
		pk, err := pkz.Packetize(nil, frame, uint32(1000+i*3000))
		if err != nil {
			t.Fatal(err)
		}
		for _, p := range pk { // copy: the packetizer reuses its buffer
			c := p.Clone()
			out = append(out, *c)
		}
	}
	return out
}

// waitFor polls cond until it holds or 2 s pass.
func waitFor(t testing.TB, what string, cond func() bool) {
	t.Helper()
	deadline := time.Now().Add(2 * time.Second)
	for !cond() {
		if time.Now().After(deadline) {
			t.Fatalf("timed out waiting for %s", what)
		}
		time.Sleep(2 * time.Millisecond)
	}
}

// listenTest starts a loopback session with the fake clock; cfg may override.
func listenTest(t testing.TB, clock *fakeClock, mod func(*Config)) *Session {
	t.Helper()
	cfg := Config{RTPAddr: "127.0.0.1:0", TelemetryAddr: "127.0.0.1:0", Logger: quietLogger(), Now: clock.Now, ReportInterval: -1}
	if mod != nil {
		mod(&cfg)
	}
	s, err := Listen(t.Context(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { s.Close() })
	return s
}
