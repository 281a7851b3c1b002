package vp8splice_test

import (
	"fmt"

	"stopgap/stream/rtpvp8"
	"stopgap/stream/vp8splice"
)

// A relay forwards the vehicle's keyframe, encodes one frame of its own (a
// keyframe: the receiver's decoder must not mix references), then forwards
// again from the vehicle's next keyframe. The receiver sees one stream.
func Example() {
	vehicleKey := []byte{0x30, 0x00, 0x00, 0x9d, 0x01, 0x2a, 64, 0, 48, 0, 0xaa, 0xbb}
	relayKey := []byte{0x30, 0x00, 0x00, 0x9d, 0x01, 0x2a, 64, 0, 48, 0, 0xcc}
	part := func(pictureID uint16, data []byte) []rtpvp8.Part {
		d := rtpvp8.Descriptor{Start: true, HasPictureID: true, PictureID: pictureID}
		return []rtpvp8.Part{{Desc: d, Marker: true, Data: data}}
	}
	s := &vp8splice.Splicer{FirstSeq: 100}
	show := func(what string, n int, err error, s *vp8splice.Splicer) {
		fmt.Printf("%-9s packets %d err %v, next seq %d\n", what, n, err, s.NextSeq())
	}
	pkts, err := s.Forward(nil, vp8splice.ForwardFrame{Parts: part(7, vehicleKey), RTPTimestamp: 123456})
	show("forwarded", len(pkts), err, s)
	pkts, err = s.Encode(nil, relayKey, 3000)
	show("encoded", len(pkts), err, s)
	inter := []byte{0x31, 0x00, 0x00, 0x01}
	pkts, err = s.Forward(nil, vp8splice.ForwardFrame{Parts: part(8, inter), RTPTimestamp: 126456, StepTicks: 3000})
	show("forwarded", len(pkts), err, s)
	pkts, err = s.Forward(nil, vp8splice.ForwardFrame{Parts: part(9, vehicleKey), RTPTimestamp: 129456, StepTicks: 3000})
	show("forwarded", len(pkts), err, s)
	fmt.Println("timestamp", pkts[0].Timestamp)
	// Output:
	// forwarded packets 1 err <nil>, next seq 101
	// encoded   packets 1 err <nil>, next seq 102
	// forwarded packets 0 err vp8splice: a switch of source must start with a keyframe: forwarded inter frame after encoded frames, next seq 102
	// forwarded packets 1 err <nil>, next seq 103
	// timestamp 6000
}
