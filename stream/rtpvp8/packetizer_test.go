package rtpvp8

import (
	"bytes"
	"errors"
	"testing"
	"time"

	"github.com/pion/rtp"
	"github.com/pion/rtp/codecs"
)

// TestPacketizeRoundTrip sends the libvpx-encoded reference stream through
// Packetizer, the RTP wire format (pion Marshal/Unmarshal) and Assembler,
// and expects every frame back unchanged.
func TestPacketizeRoundTrip(t *testing.T) {
	ref := loadReference(t)
	for _, mtu := range []int{19, 60, 200, 1200} {
		for _, short := range []bool{false, true} {
			p, err := NewPacketizer(PacketizerConfig{MTU: mtu, PayloadType: 96, SSRC: 42, FirstSeq: 65530,
				FirstPictureID: 120, ShortPictureID: short, MaxFramePackets: 4096})
			if err != nil {
				t.Fatal(err)
			}
			var got [][]byte
			var pics []uint16
			a, err := NewAssembler(AssemblerConfig{}, SinkFuncs{
				Frame: func(f Frame) { got = append(got, bytes.Clone(f.Data)); pics = append(pics, f.PictureID) },
				Loss:  func(l Loss) { t.Errorf("MTU %d: unexpected loss %+v", mtu, l) },
			})
			if err != nil {
				t.Fatal(err)
			}
			var pkts []rtp.Packet
			for i, f := range ref {
				pkts, err = p.Packetize(pkts[:0], f.data, uint32(i*3000))
				if err != nil {
					t.Fatal(err)
				}
				checkPackets(t, pkts, mtu, len(f.data))
				for _, pk := range pkts {
					wire, err := pk.Marshal()
					if err != nil {
						t.Fatal(err)
					}
					var back rtp.Packet
					if err := back.Unmarshal(wire); err != nil {
						t.Fatal(err)
					}
					if err := a.Push(&back, t0); err != nil {
						t.Fatal(err)
					}
				}
			}
			if len(got) != len(ref) {
				t.Fatalf("MTU %d short=%v: got %d frames, want %d", mtu, short, len(got), len(ref))
			}
			for i := range ref {
				if !bytes.Equal(got[i], ref[i].data) {
					t.Errorf("MTU %d: frame %d differs", mtu, i)
				}
				mask := uint16(0x7fff)
				if short {
					mask = 0x7f
				}
				if want := uint16(120+i) & mask; pics[i] != want {
					t.Errorf("MTU %d short=%v: frame %d picture ID %d, want %d", mtu, short, i, pics[i], want)
				}
			}
		}
	}
}

// checkPackets checks the packets of one frame: sizes within the MTU and
// within one octet of each other, S only on the first, marker only on the
// last, and pion's parser (the reference) reading the same descriptor.
func checkPackets(t *testing.T, pkts []rtp.Packet, mtu, frameLen int) {
	t.Helper()
	minData, maxData, total := 1<<30, 0, 0
	for i, pk := range pkts {
		if size := pk.MarshalSize(); size > mtu {
			t.Errorf("packet %d: %d octets, MTU %d", i, size, mtu)
		}
		var d Descriptor
		n, err := d.Unmarshal(pk.Payload)
		if err != nil {
			t.Fatal(err)
		}
		var ref codecs.VP8Packet
		if _, err := ref.Unmarshal(pk.Payload); err != nil || !samePion(&d, &ref) {
			t.Errorf("packet %d: pion reads %+v (%v), we read %+v", i, ref, err, d)
		}
		if d.Start != (i == 0) || pk.Marker != (i == len(pkts)-1) || d.PartitionID != 0 {
			t.Errorf("packet %d of %d: S=%v marker=%v PID=%d", i, len(pkts), d.Start, pk.Marker, d.PartitionID)
		}
		data := len(pk.Payload) - n
		total += data
		minData, maxData = min(minData, data), max(maxData, data)
	}
	if total != frameLen || maxData-minData > 1 {
		t.Errorf("%d packets carry %d of %d octets, sizes %d..%d", len(pkts), total, frameLen, minData, maxData)
	}
}

func TestPacketizerSequenceAndErrors(t *testing.T) {
	p, err := NewPacketizer(PacketizerConfig{MTU: 20, FirstSeq: 65535, FirstPictureID: 0x7fff, MaxFramePackets: 3})
	if err != nil {
		t.Fatal(err)
	}
	// 15-bit picture ID: 12 header + 4 descriptor leaves 4 data octets.
	pkts, err := p.Packetize(nil, make([]byte, 9), 1)
	if err != nil || len(pkts) != 3 {
		t.Fatalf("got %d packets, %v; want 3", len(pkts), err)
	}
	if pkts[0].SequenceNumber != 65535 || pkts[1].SequenceNumber != 0 || p.NextSeq() != 2 || p.NextPictureID() != 0 {
		t.Errorf("seqs %d,%d next %d picture %d", pkts[0].SequenceNumber, pkts[1].SequenceNumber, p.NextSeq(), p.NextPictureID())
	}
	if _, err := p.Packetize(nil, make([]byte, 13), 1); !errors.Is(err, ErrFrameTooLarge) || p.NextSeq() != 2 {
		t.Errorf("oversize frame: err %v, next seq %d", err, p.NextSeq())
	}
	if _, err := p.Packetize(nil, nil, 1); !errors.Is(err, ErrEmptyFrame) {
		t.Errorf("empty frame: err %v", err)
	}
	for _, cfg := range []PacketizerConfig{{MTU: 18}, {MTU: 70000}, {MaxFramePackets: -1}, {PayloadType: 128}} {
		if _, err := NewPacketizer(cfg); !errors.Is(err, ErrInvalidConfig) {
			t.Errorf("NewPacketizer(%+v): err %v, want ErrInvalidConfig", cfg, err)
		}
	}
	// No picture ID: a 1-octet descriptor leaves 13 data octets in 26;
	// 25 octets go as 13 + 12.
	q, _ := NewPacketizer(PacketizerConfig{OmitPictureID: true, MTU: 26})
	pkts, _ = q.Packetize(nil, make([]byte, 25), 0)
	if len(pkts) != 2 || len(pkts[0].Payload) != 14 || len(pkts[1].Payload) != 13 {
		t.Errorf("no picture ID: %d packets", len(pkts))
	}
}

func TestPacketizerLossThroughAssembler(t *testing.T) {
	// A frame split by the Packetizer with one packet dropped on the way is
	// reported lost, and the next keyframe recovers.
	ref := loadReference(t)
	p, _ := NewPacketizer(PacketizerConfig{MTU: 100, FirstSeq: 10})
	var events []string
	a, _ := NewAssembler(AssemblerConfig{}, SinkFuncs{
		Frame: func(f Frame) {
			if f.Keyframe {
				events = append(events, "key")
			} else if f.RefsMissing {
				events = append(events, "broken")
			} else {
				events = append(events, "ok")
			}
		},
		Loss: func(l Loss) { events = append(events, "loss:"+l.Reason.String()) },
	})
	var pkts []rtp.Packet
	for i, f := range ref {
		pkts, _ = p.Packetize(pkts[:0], f.data, uint32(i*3000))
		for j := range pkts {
			if i == 3 && j == 1 {
				continue
			}
			if err := a.Push(&pkts[j], t0.Add(time.Duration(i)*33*time.Millisecond)); err != nil {
				t.Fatal(err)
			}
		}
	}
	want := "key ok ok loss:newer-frame broken broken broken key ok ok ok ok"
	var got string
	for i, e := range events {
		if i > 0 {
			got += " "
		}
		got += e
	}
	if got != want {
		t.Errorf("events\n got %s\nwant %s", got, want)
	}
}
