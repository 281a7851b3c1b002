package rtpudp

import (
	"net/netip"
	"testing"
	"time"

	"github.com/pion/rtcp"
	"github.com/pion/rtp"
)

// FuzzDatagram feeds arbitrary bytes to the RTP/RTCP demultiplexer and
// parsers, and to the telemetry path, of a session without sockets. Nothing
// may panic; each datagram must be accounted for exactly once.
func FuzzDatagram(f *testing.F) {
	good, _ := (&rtp.Packet{Header: rtp.Header{Version: 2, PayloadType: 96, SequenceNumber: 1, Timestamp: 3000, SSRC: 5},
		Payload: []byte{0x90, 0x80, 0x01, 0x10, 0x02, 0x00, 0x9d, 0x01, 0x2a}}).Marshal()
	padded, _ := (&rtp.Packet{Header: rtp.Header{Version: 2, Padding: true, PayloadType: 96, SSRC: 5},
		Payload: []byte{1}, PaddingSize: 3}).Marshal()
	sr, _ := rtcp.Marshal([]rtcp.Packet{&rtcp.SenderReport{SSRC: 5, NTPTime: 1 << 40, RTPTime: 9}})
	bye, _ := rtcp.Marshal([]rtcp.Packet{&rtcp.Goodbye{Sources: []uint32{5}}})
	pli, _ := rtcp.Marshal([]rtcp.Packet{&rtcp.PictureLossIndication{MediaSSRC: 5}})
	for _, seed := range [][]byte{good, padded, sr, bye, pli, {}, {0x80}, good[:11], {0xa0, 96, 0, 1, 0, 0, 0, 0, 0, 0, 0, 5, 0xff}} {
		f.Add(seed)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		s, err := newSession(Config{RTPAddr: "127.0.0.1:0", Logger: quietLogger(), RTPQueue: 4, TelemetryQueue: 4, IdleTimeout: -1})
		if err != nil {
			t.Fatal(err)
		}
		from := netip.MustParseAddrPort("127.0.0.1:5004")
		now := time.Unix(100, 0)
		// Twice, so the second pass sees a locked SSRC (and a pending SR adopted).
		s.handleDatagram(data, from, now)
		s.handleDatagram(data, from, now.Add(time.Millisecond))
		s.handleTelemetry(data, from, now)
		c := s.Counts()
		handled := c.RTPPackets + c.RTPQueueFull + c.RTCPPackets + c.Malformed + c.Oversize + c.WrongSSRC + c.WrongPayloadType
		if handled != 2 {
			t.Fatalf("%d outcomes counted for 2 datagrams: %+v", handled, c)
		}
		_ = s.Stats()
		_ = s.RequestKeyframe()
		s.mu.Lock()
		_ = s.receiverReportLocked(now)
		s.mu.Unlock()
		for range len(s.rtpq) {
			a := <-s.rtpq
			if _, err := a.Packet.Marshal(); err != nil {
				t.Fatalf("a queued packet does not marshal again: %v", err)
			}
		}
	})
}
