package rtpvp8

import (
	"fmt"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/pion/rtp"
	"github.com/pion/rtp/codecs"
	"github.com/pion/webrtc/v4/pkg/media/samplebuilder"
)

// Frame sizes for a 1280x720 stream at about 2.5 Mbit/s and 30 fps (common
// practice): an inter frame near the mean of 10 kB, a keyframe ten times
// that. Packets of at most DefaultMTU octets.
var benchSizes = []struct {
	name string
	size int
	key  bool
}{
	{"720p-inter-10kB", 10_000, false},
	{"720p-key-100kB", 100_000, true},
}

// benchFrame returns the packets of one frame of the given size with a valid
// VP8 header; payload octets are seeded random.
func benchFrame(b *testing.B, size int, key bool) []rtp.Packet {
	rng := rand.New(rand.NewPCG(1, 2))
	data := make([]byte, size)
	for i := range data {
		data[i] = byte(rng.Uint32())
	}
	hdr := interHeader
	if key {
		hdr = keyHeader
	}
	copy(data, hdr)
	p, err := NewPacketizer(PacketizerConfig{PayloadType: 96})
	if err != nil {
		b.Fatal(err)
	}
	pkts, err := p.Packetize(nil, data, 0)
	if err != nil {
		b.Fatal(err)
	}
	for i := range pkts { // own the payloads
		pkts[i].Payload = append([]byte(nil), pkts[i].Payload...)
	}
	return pkts
}

// BenchmarkPush measures Assembler.Push per frame (all its packets), in
// order and with neighbouring packets swapped; one op is one frame.
func BenchmarkPush(b *testing.B) {
	for _, bs := range benchSizes {
		for _, order := range []string{"in-order", "pairs-swapped"} {
			b.Run(fmt.Sprintf("%s/%s", bs.name, order), func(b *testing.B) {
				pkts := benchFrame(b, bs.size, bs.key)
				if order == "pairs-swapped" {
					for i := 0; i+1 < len(pkts); i += 2 {
						pkts[i], pkts[i+1] = pkts[i+1], pkts[i]
					}
				}
				frames := 0
				a, err := NewAssembler(AssemblerConfig{MaxFrameBytes: 2 * bs.size}, SinkFuncs{Frame: func(Frame) { frames++ }})
				if err != nil {
					b.Fatal(err)
				}
				n := uint16(len(pkts))
				ts, now := uint32(0), t0
				b.SetBytes(int64(bs.size))
				b.ReportAllocs()
				b.ResetTimer()
				for b.Loop() {
					for i := range pkts {
						pk := &pkts[i]
						pk.Timestamp = ts
						if err := a.Push(pk, now); err != nil {
							b.Fatal(err)
						}
					}
					for i := range pkts {
						pkts[i].SequenceNumber += n
					}
					ts += 3000
					now = now.Add(33 * time.Millisecond)
				}
				b.StopTimer()
				if s := a.Stats(); frames == 0 || s.Losses != 0 {
					b.Fatalf("%d frames, %d losses", frames, s.Losses)
				}
			})
		}
	}
}

// BenchmarkSampleBuilder runs pion's samplebuilder on the same in-order
// packets as a reference point. It keeps pointers to the caller's packets
// instead of copying them and releases a frame only when the next one
// starts, so it does less work per packet than Assembler; the ratio shows
// what our copying and checks cost.
func BenchmarkSampleBuilder(b *testing.B) {
	for _, bs := range benchSizes {
		b.Run(bs.name, func(b *testing.B) {
			pkts := benchFrame(b, bs.size, bs.key)
			sb := samplebuilder.New(uint16(4*len(pkts)), &codecs.VP8Packet{}, 90000)
			seq, ts := uint16(0), uint32(0)
			frames := 0
			b.SetBytes(int64(bs.size))
			b.ReportAllocs()
			for b.Loop() {
				for i := range pkts {
					pk := pkts[i] // samplebuilder keeps the pointer: give it its own header
					pk.SequenceNumber = seq
					pk.Timestamp = ts
					seq++
					sb.Push(&pk)
				}
				for sb.Pop() != nil {
					frames++
				}
				ts += 3000
			}
			b.StopTimer()
			if frames == 0 && b.N > 2 {
				b.Fatal("samplebuilder produced no frames")
			}
		})
	}
}
