package rtpudp

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"net"
	"net/netip"
	"testing"
	"time"

	"github.com/pion/rtcp"
	"github.com/pion/rtp"

	"stopgap/stream/ingest"
	"stopgap/stream/telemetry"
)

func TestPacketsAndSenderReport(t *testing.T) {
	clock := newFakeClock()
	s := listenTest(t, clock, nil)
	snd := newSender(t, s.RTPAddr())
	// Frames of 3000 octets in packets of at most 1200: 3 packets each; the
	// first sequence number makes the stream wrap 65535 -> 0.
	sent := vp8Packets(t, 5, 3000, 0x1234, 65530)
	if len(sent) != 15 {
		t.Fatalf("packetizer made %d packets, want 15", len(sent))
	}
	for i := range sent {
		snd.sendRTP(&sent[i])
	}
	const ntp = uint64(0xE5A1_2B3C_8000_0000) // some 2022 instant, half a second past
	snd.sendRTCP(&rtcp.SenderReport{SSRC: 0x1234, NTPTime: ntp, RTPTime: 1000, PacketCount: 15, OctetCount: 45000})

	select {
	case <-s.Started():
	case <-time.After(2 * time.Second):
		t.Fatal("Started not closed after the first packet")
	}
	ctx, cancel := context.WithTimeout(t.Context(), 2*time.Second)
	defer cancel()
	for i := range sent {
		got, at, err := s.ReadRTP(ctx)
		if err != nil {
			t.Fatalf("packet %d: %v", i, err)
		}
		if !at.Equal(clock.Now()) {
			t.Errorf("packet %d arrival %v, want the injected clock %v", i, at, clock.Now())
		}
		want, _ := sent[i].Marshal()
		gotB, _ := got.Marshal()
		if !bytes.Equal(gotB, want) {
			t.Fatalf("packet %d differs after the trip (seq %d vs %d)", i, got.SequenceNumber, sent[i].SequenceNumber)
		}
	}
	waitFor(t, "sender report", func() bool { _, ok := s.SenderReport(); return ok })
	sr, _ := s.SenderReport()
	if sr.SSRC != 0x1234 || sr.NTPTime != ntp || sr.RTPTime != 1000 || sr.PacketCount != 15 || sr.OctetCount != 45000 || !sr.Arrival.Equal(clock.Now()) {
		t.Fatalf("sender report %+v does not match what was sent", sr)
	}
	// One second of 90 kHz ticks after the SR's RTP time is one second after
	// its NTP time (RFC 3550 section 6.4.1).
	if d := sr.SenderTimeUs(1000+90000, ingest.VideoClockRateHz) - sr.SenderTimeUs(1000, ingest.VideoClockRateHz); d != 1_000_000 {
		t.Errorf("SR mapping: 90000 ticks -> %d us, want 1000000", d)
	}
	st := s.Stats()
	if st.PacketsReceived != 15 || st.PacketsLost != 0 || st.SenderReports != 1 {
		t.Errorf("stats %+v: want 15 packets, 0 lost, 1 SR", st)
	}
	// 65530 + 14 = 65544 extended: one wrap (RFC 3550 A.1).
	if st.HighestSeq != 65544 {
		t.Errorf("HighestSeq %d, want 65544", st.HighestSeq)
	}
	var payload uint64
	for _, p := range sent {
		payload += uint64(len(p.Payload))
	}
	if st.BytesReceived != payload {
		t.Errorf("BytesReceived %d, want %d", st.BytesReceived, payload)
	}
}

func TestKeyframeRequestReachesSender(t *testing.T) {
	clock := newFakeClock()
	s := listenTest(t, clock, nil)
	if err := s.RequestKeyframe(); !errors.Is(err, ErrNoSource) {
		t.Fatalf("PLI before any packet: %v, want ErrNoSource", err)
	}
	snd := newSender(t, s.RTPAddr())
	pk := vp8Packets(t, 1, 100, 0xBEEF, 7)
	snd.sendRTP(&pk[0])
	<-s.Started()
	if err := s.RequestKeyframe(); err != nil {
		t.Fatal(err)
	}
	pkts := snd.readRTCP(2 * time.Second)
	pli, ok := pkts[0].(*rtcp.PictureLossIndication)
	if !ok || pli.MediaSSRC != 0xBEEF {
		t.Fatalf("sender got %T %+v, want a PLI for SSRC 0xBEEF", pkts[0], pkts[0])
	}
	if err := s.RequestKeyframe(); !errors.Is(err, ErrKeyframeRateLimited) {
		t.Fatalf("second PLI at once: %v, want ErrKeyframeRateLimited", err)
	}
	clock.Advance(MinPLIInterval)
	if err := s.RequestKeyframe(); err != nil {
		t.Fatalf("PLI after %v: %v", MinPLIInterval, err)
	}
	if _, ok := snd.readRTCP(2 * time.Second)[0].(*rtcp.PictureLossIndication); !ok {
		t.Fatal("second PLI did not reach the sender")
	}
	st := s.Stats()
	if st.PLIsSent != 2 || st.PLIsSuppressed != 1 {
		t.Errorf("PLIsSent %d PLIsSuppressed %d, want 2 and 1", st.PLIsSent, st.PLIsSuppressed)
	}
}

func TestReceiverReport(t *testing.T) {
	clock := newFakeClock()
	s := listenTest(t, clock, func(c *Config) { c.ReportInterval = time.Second })
	snd := newSender(t, s.RTPAddr())
	pk := vp8Packets(t, 4, 100, 0x55, 100) // seq 100..103
	const ntp = uint64(0x0001_2345_6789_0000)
	snd.sendRTCP(&rtcp.SenderReport{SSRC: 0x55, NTPTime: ntp, RTPTime: 1000})
	for i, p := range pk {
		if i == 2 {
			continue // lost
		}
		snd.sendRTP(&p)
	}
	waitFor(t, "3 packets", func() bool { return s.Stats().PacketsReceived == 3 })
	waitFor(t, "sender report", func() bool { _, ok := s.SenderReport(); return ok })
	clock.Advance(time.Second) // the report is due
	for {
		pkts := snd.readRTCP(2 * time.Second)
		rr, ok := pkts[0].(*rtcp.ReceiverReport)
		if !ok || len(rr.Reports) != 1 {
			t.Fatalf("got %T, want a receiver report with one block", pkts[0])
		}
		r := rr.Reports[0]
		if r.TotalLost == 0 { // an earlier report sent before all packets were in
			continue
		}
		// 4 expected, 3 received (RFC 3550 A.3); highest 103.
		if r.SSRC != 0x55 || r.TotalLost != 1 || r.LastSequenceNumber != 103 {
			t.Fatalf("report block %+v: want SSRC 0x55, 1 lost, highest 103", r)
		}
		if r.LastSenderReport != 0x2345_6789 {
			t.Errorf("LSR %#x, want the middle 32 bits of the SR's NTP time 0x23456789", r.LastSenderReport)
		}
		return
	}
}

func TestAllowList(t *testing.T) {
	clock := newFakeClock()
	okSnd := newSender(t, nil)
	s := listenTest(t, clock, func(c *Config) {
		c.AllowedSources = []string{fmt.Sprintf("127.0.0.1:%d", okSnd.port())}
	})
	okSnd.to = s.RTPAddr().(*net.UDPAddr)
	bad := newSender(t, s.RTPAddr())
	pk := vp8Packets(t, 1, 100, 9, 1)
	bad.sendRTP(&pk[0])
	badTel := newSender(t, s.TelemetryAddr())
	badTel.send([]byte(`{"t_us":1}`))
	waitFor(t, "two forbidden datagrams", func() bool { return s.Counts().Forbidden == 2 })
	okSnd.sendRTP(&pk[0])
	<-s.Started()
	c := s.Counts()
	if c.RTPPackets != 1 || c.TelemetryForwarded != 0 {
		t.Fatalf("counts %+v: want only the allowed packet accepted", c)
	}
}

func TestDroppedDatagramsAreCounted(t *testing.T) {
	clock := newFakeClock()
	s := listenTest(t, clock, func(c *Config) { c.MaxDatagramBytes = 200; c.SSRC = 0x77; c.RTPQueue = 2 })
	snd := newSender(t, s.RTPAddr())
	good := vp8Packets(t, 6, 100, 0x77, 1)
	other := vp8Packets(t, 1, 100, 0x78, 1)
	wrongPT := good[0]
	wrongPT.PayloadType = 100
	hdr, _ := good[0].Marshal()
	tests := []struct {
		name  string
		data  []byte
		field func(Counts) uint64
	}{
		{"one octet", []byte{0x80}, func(c Counts) uint64 { return c.Malformed }},
		{"version 0", append([]byte{0x00}, hdr[1:]...), func(c Counts) uint64 { return c.Malformed }},
		{"RTP header cut to 11 octets", hdr[:11], func(c Counts) uint64 { return c.Malformed }},
		{"RTCP type with a bad length", []byte{0x80, 200, 0xff, 0xff, 1, 2, 3, 4}, func(c Counts) uint64 { return c.Malformed }},
		{"oversize", append([]byte{0x80, 96}, make([]byte, 250)...), func(c Counts) uint64 { return c.Oversize }},
		{"other SSRC", mustMarshal(t, &other[0]), func(c Counts) uint64 { return c.WrongSSRC }},
		{"other payload type", mustMarshal(t, &wrongPT), func(c Counts) uint64 { return c.WrongPayloadType }},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			before := tc.field(s.Counts())
			snd.send(tc.data)
			waitFor(t, tc.name+" counted", func() bool { return tc.field(s.Counts()) == before+1 })
		})
	}
	// Nothing read: a queue of 2 keeps the first two, drops the rest.
	for i := range good {
		snd.sendRTP(&good[i])
	}
	waitFor(t, "queue overflow", func() bool { return s.Counts().RTPQueueFull == 4 })
	st := s.Stats()
	if st.PacketsDropped != 4 || st.ReadErrors != 5 || st.PacketsReceived != 6 {
		t.Errorf("stats %+v: want 4 dropped, 5 read errors, 6 received", st)
	}
	if c := s.Counts(); c.RTPPackets != 2 {
		t.Errorf("RTPPackets %d, want 2 queued", c.RTPPackets)
	}
}

func mustMarshal(t testing.TB, p *rtp.Packet) []byte {
	t.Helper()
	b, err := p.Marshal()
	if err != nil {
		t.Fatal(err)
	}
	return b
}

func TestTelemetryForwarded(t *testing.T) {
	clock := newFakeClock()
	s := listenTest(t, clock, nil)
	snd := newSender(t, s.TelemetryAddr())
	var want [][]byte
	for i := range 3 {
		b, err := telemetry.Encode(telemetry.Message{TimeUs: int64(1_000_000 + i*20_000), SpeedMps: 3.5})
		if err != nil {
			t.Fatal(err)
		}
		want = append(want, b)
		snd.send(b)
	}
	for i, w := range want {
		select {
		case m := <-s.Telemetry():
			if !bytes.Equal(m.Data, w) || !m.Arrival.Equal(clock.Now()) {
				t.Fatalf("datagram %d: got %q at %v, want %q at %v", i, m.Data, m.Arrival, w, clock.Now())
			}
		case <-time.After(2 * time.Second):
			t.Fatalf("datagram %d not forwarded", i)
		}
	}
	snd.send(make([]byte, DefaultMaxTelemetryBytes+1))
	waitFor(t, "oversize telemetry counted", func() bool { return s.Counts().TelemetryOversize == 1 })
	s.Close()
	if _, ok := <-s.Telemetry(); ok {
		t.Fatal("Telemetry channel still open after Close")
	}
	if _, _, err := s.ReadRTP(t.Context()); !errors.Is(err, ingest.ErrSessionClosed) {
		t.Fatalf("ReadRTP after Close: %v, want ingest.ErrSessionClosed", err)
	}
	if s.EndReason() != EndClosed {
		t.Errorf("EndReason %v, want %v", s.EndReason(), EndClosed)
	}
}

func TestSessionEnds(t *testing.T) {
	tests := []struct {
		name string
		end  func(*Session, *sender, *fakeClock)
		want EndReason
	}{
		{"bye", func(_ *Session, snd *sender, _ *fakeClock) {
			snd.sendRTCP(&rtcp.Goodbye{Sources: []uint32{0x42}})
		}, EndBye},
		{"idle", func(_ *Session, _ *sender, c *fakeClock) { c.Advance(DefaultIdleTimeout) }, EndIdle},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			clock := newFakeClock()
			s := listenTest(t, clock, nil)
			snd := newSender(t, s.RTPAddr())
			pk := vp8Packets(t, 1, 100, 0x42, 1)
			snd.sendRTP(&pk[0])
			<-s.Started()
			tc.end(s, snd, clock)
			select {
			case <-s.Done():
			case <-time.After(2 * time.Second):
				t.Fatal("session did not end")
			}
			if s.EndReason() != tc.want {
				t.Fatalf("EndReason %v, want %v", s.EndReason(), tc.want)
			}
			// The queued packet is still delivered, then the end.
			if _, _, err := s.ReadRTP(t.Context()); err != nil {
				t.Fatalf("queued packet lost at the end: %v", err)
			}
			if _, _, err := s.ReadRTP(t.Context()); !errors.Is(err, ErrSessionClosed) {
				t.Fatalf("ReadRTP after the end: %v", err)
			}
		})
	}
}

func TestListenConfigErrors(t *testing.T) {
	tests := []struct {
		name string
		cfg  Config
		want error
	}{
		{"no address", Config{}, ErrBadConfig},
		{"wildcard without allow list", Config{RTPAddr: "0.0.0.0:0"}, ErrNeedAllowList},
		{"empty host without allow list", Config{RTPAddr: ":0"}, ErrNeedAllowList},
		{"telemetry wildcard without allow list", Config{RTPAddr: "127.0.0.1:0", TelemetryAddr: "0.0.0.0:0"}, ErrNeedAllowList},
		{"payload type in the RTCP range", Config{RTPAddr: "127.0.0.1:0", PayloadType: 72}, ErrBadConfig},
		{"host name in allow list", Config{RTPAddr: "127.0.0.1:0", AllowedSources: []string{"camera.invalid"}}, ErrBadConfig},
		{"port 0 in allow list", Config{RTPAddr: "127.0.0.1:0", AllowedSources: []string{"127.0.0.1:0"}}, ErrBadConfig},
		{"no port", Config{RTPAddr: "127.0.0.1"}, ErrBadConfig},
		{"tiny datagrams", Config{RTPAddr: "127.0.0.1:0", MaxDatagramBytes: 5}, ErrBadConfig},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			tc.cfg.Logger = quietLogger()
			s, err := Listen(t.Context(), tc.cfg)
			if err == nil {
				s.Close()
				t.Fatal("Listen accepted the config")
			}
			if !errors.Is(err, tc.want) {
				t.Fatalf("err %v, want %v", err, tc.want)
			}
		})
	}
}

func TestAllowedSourceMatching(t *testing.T) {
	srcs, err := parseSources([]string{"192.0.2.7", "198.51.100.1:5004", "[2001:db8::7]:6000", " "})
	if err != nil {
		t.Fatal(err)
	}
	tests := []struct {
		from string
		want bool
	}{
		{"192.0.2.7:1", true},
		{"[::ffff:192.0.2.7]:9", true}, // IPv4-mapped IPv6 is the same host
		{"192.0.2.8:1", false},
		{"198.51.100.1:5004", true},
		{"198.51.100.1:5005", false},
		{"[2001:db8::7]:6000", true},
		{"[2001:db8::7]:6001", false},
	}
	for _, tc := range tests {
		t.Run(tc.from, func(t *testing.T) {
			if got := allowed(srcs, netip.MustParseAddrPort(tc.from)); got != tc.want {
				t.Errorf("allowed(%s) = %v, want %v", tc.from, got, tc.want)
			}
		})
	}
}
