package rtpudp_test

import (
	"context"
	"fmt"
	"net"
	"time"

	"github.com/pion/rtp"

	"stopgap/stream/rtpudp"
)

// A camera stand-in sends one VP8 RTP packet to a loopback session, which
// locks onto its SSRC and hands the packet on. A relay would instead call
// relay.Offer(s) once s.Started() is closed.
func ExampleListen() {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Second)
	defer cancel()
	s, err := rtpudp.Listen(ctx, rtpudp.Config{RTPAddr: "127.0.0.1:0"})
	if err != nil {
		fmt.Println(err)
		return
	}
	defer s.Close()

	camera, err := net.DialUDP("udp", nil, s.RTPAddr().(*net.UDPAddr))
	if err != nil {
		fmt.Println(err)
		return
	}
	defer camera.Close()
	pkt := rtp.Packet{Header: rtp.Header{Version: 2, PayloadType: rtpudp.DefaultPayloadType, SequenceNumber: 7, Timestamp: 90000, SSRC: 0xCAFE, Marker: true},
		Payload: []byte{0x10, 0x00, 0x00, 0x00}} // VP8 descriptor (S=1) and a stand-in frame
	b, _ := pkt.Marshal()
	camera.Write(b)

	got, _, err := s.ReadRTP(ctx)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("seq %d, ssrc %#x, %d payload octets\n", got.SequenceNumber, got.SSRC, len(got.Payload))
	// Output: seq 7, ssrc 0xcafe, 4 payload octets
}

// Off loopback, Listen refuses to run without an allow list: plain RTP has no
// authentication.
func ExampleListen_allowList() {
	_, err := rtpudp.Listen(context.Background(), rtpudp.Config{RTPAddr: "0.0.0.0:0"})
	fmt.Println(err)
	// Output: RTP address 0.0.0.0:0: rtpudp: a non-loopback listen address needs a non-empty allow list of source addresses
}
