package rtpudp

import (
	"encoding/binary"
	"net/netip"
	"testing"
	"time"

	"github.com/pion/rtp"
)

// BenchmarkHandleDatagram measures the per-packet path of the socket reader
// (allow list, demultiplexing, parse, statistics, queue) for a 1200-octet
// RTP packet. The queued packet owns a copy of the datagram, so two
// allocations per packet are expected (the bytes and the rtp.Packet).
func BenchmarkHandleDatagram(b *testing.B) {
	s, err := newSession(Config{RTPAddr: "127.0.0.1:0", Logger: quietLogger(), AllowedSources: []string{"192.0.2.1", "127.0.0.1:5004"}})
	if err != nil {
		b.Fatal(err)
	}
	p := rtp.Packet{Header: rtp.Header{Version: 2, PayloadType: 96, SSRC: 1}, Payload: make([]byte, 1188)}
	from := netip.MustParseAddrPort("127.0.0.1:5004")
	now := time.Unix(1000, 0)
	b.ReportAllocs()
	b.SetBytes(1200)
	buf, err := p.Marshal()
	if err != nil {
		b.Fatal(err)
	}
	for i := 0; b.Loop(); i++ {
		binary.BigEndian.PutUint16(buf[2:], uint16(i))        // sequence number
		binary.BigEndian.PutUint32(buf[4:], uint32(i/3*3000)) // timestamp: 3 packets a frame
		s.handleDatagram(buf, from, now.Add(time.Duration(i)*time.Millisecond))
		<-s.rtpq
	}
}
