package rtpvp8_test

import (
	"fmt"
	"time"

	"github.com/pion/rtp"

	"stopgap/stream/rtpvp8"
)

// vp8Frame returns a stand-in VP8 frame of n octets with a valid
// uncompressed header: a 320x240 keyframe or an inter frame.
func vp8Frame(n int, key bool) []byte {
	b := make([]byte, n)
	if key {
		copy(b, []byte{0x10, 0, 0, 0x9d, 0x01, 0x2a, 0x40, 0x01, 0xf0, 0x00})
	} else {
		copy(b, []byte{0x11, 0, 0})
	}
	return b
}

// A sender packetises three frames; the second loses a packet on the way.
// The receiver gets the keyframe, a loss naming the broken frame, the third
// frame flagged as missing references, and a request for a keyframe.
func ExampleAssembler() {
	tx, _ := rtpvp8.NewPacketizer(rtpvp8.PacketizerConfig{MTU: 500, PayloadType: 96, FirstSeq: 65534})
	rx, _ := rtpvp8.NewAssembler(rtpvp8.AssemblerConfig{}, rtpvp8.SinkFuncs{
		Frame: func(f rtpvp8.Frame) {
			fmt.Printf("frame ts=%d seq %d..%d key=%v %dx%d refsMissing=%v\n",
				f.RTPTimestamp, f.FirstSeq, f.LastSeq, f.Keyframe, f.Width, f.Height, f.RefsMissing)
		},
		Loss: func(l rtpvp8.Loss) {
			fmt.Printf("loss %s seq %d..%d missing=%d dropped=%d ts=%d\n",
				l.Reason, l.FirstSeq, l.LastSeq, l.Missing, l.Dropped, l.FirstRTPTimestamp)
		},
	})
	arrival := time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)
	var pkts []rtp.Packet
	for i, size := range []int{1200, 1200, 400} {
		pkts, _ = tx.Packetize(pkts[:0], vp8Frame(size, i == 0), uint32(i*3000))
		for j := range pkts {
			if i == 1 && j == 1 {
				continue // lost on the link
			}
			if err := rx.Push(&pkts[j], arrival); err != nil {
				fmt.Println(err)
			}
		}
		arrival = arrival.Add(33 * time.Millisecond)
	}
	fmt.Println("need keyframe:", rx.NeedKeyframe())
	// Output:
	// frame ts=0 seq 65534..0 key=true 320x240 refsMissing=false
	// loss newer-frame seq 1..3 missing=1 dropped=2 ts=3000
	// frame ts=6000 seq 4..4 key=false 0x0 refsMissing=true
	// need keyframe: true
}

func ExampleDescriptor_Unmarshal() {
	payload := []byte{0x90, 0x80, 0x81, 0x02, 0x10, 0x02, 0x00} // descriptor, then VP8 data
	var d rtpvp8.Descriptor
	n, err := d.Unmarshal(payload)
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Println(n, d.Start, d.PartitionID, d.HasPictureID, d.WidePictureID, d.PictureID, rtpvp8.IsKeyframe(payload[n:]))

	_, err = d.Unmarshal([]byte{0x90, 0x80})
	fmt.Println(err)
	// Output:
	// 4 true 0 true true 258 true
	// rtpvp8: VP8 payload descriptor truncated: PictureID at offset 2 of a 2-octet payload
}

func ExampleParseFrameHeader() {
	h, err := rtpvp8.ParseFrameHeader(vp8Frame(100, true))
	fmt.Println(h.Keyframe, h.Width, h.Height, h.FirstPartSize, err)
	// Output:
	// true 320 240 0 <nil>
}
