package rtpvp8

import (
	"bytes"
	"errors"
	"testing"
	"time"

	"github.com/pion/rtp"
	"github.com/pion/rtp/codecs"
)

// FuzzDescriptor parses arbitrary payloads. It must never panic; an
// accepted descriptor must write back to octets that parse to the same
// descriptor, and pion's parser (the reference) must agree on every field
// and reject what we reject as truncated.
func FuzzDescriptor(f *testing.F) {
	for _, s := range [][]byte{
		{0x10, 0xaa},
		{0x90, 0x80, 0x55, 0xaa},
		{0x90, 0x80, 0x81, 0x02, 0xaa},
		{0xb2, 0xf0, 0xff, 0xff, 0x07, 0xe9, 0xaa},
		{0x80, 0x10, 0xff, 0xaa},
		{0x80}, {0x80, 0x80, 0x80}, {0x10},
		{0x10, 0x10, 0x00, 0x00, 0x9d, 0x01, 0x2a, 0x60, 0x00, 0x40, 0x00},
	} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, b []byte) {
		var d Descriptor
		n, err := d.Unmarshal(b)
		var ref codecs.VP8Packet
		refData, refErr := ref.Unmarshal(b)
		if err != nil {
			var de *DescriptorError
			if !errors.As(err, &de) || de.Len != len(b) || de.Offset < 0 || de.Offset > len(b) {
				t.Fatalf("error %v is not a well-formed *DescriptorError", err)
			}
			if errors.Is(err, ErrShortDescriptor) && refErr == nil {
				t.Fatalf("we call % x truncated, pion accepts it", b)
			}
			if errors.Is(err, ErrNoVP8Data) && (refErr != nil || len(refData) != 0) {
				t.Fatalf("we find no VP8 data in % x, pion finds %d octets (%v)", b, len(refData), refErr)
			}
			return
		}
		if n < 1 || n > 6 || n >= len(b) {
			t.Fatalf("descriptor length %d for %d octets", n, len(b))
		}
		if refErr != nil || !samePion(&d, &ref) || len(refData) != len(b)-n {
			t.Fatalf("pion reads %+v (%v), we read %+v", ref, refErr, d)
		}
		if err := d.Validate(); err != nil {
			t.Fatalf("parsed descriptor fails Validate: %v", err)
		}
		buf := make([]byte, d.MarshalSize()+len(b)-n)
		w, err := d.MarshalTo(buf)
		if err != nil || w != d.MarshalSize() || w > n {
			t.Fatalf("MarshalTo wrote %d (size %d, read %d): %v", w, d.MarshalSize(), n, err)
		}
		copy(buf[w:], b[n:])
		var d2 Descriptor
		n2, err := d2.Unmarshal(buf)
		if err != nil || n2 != w || d2 != d {
			t.Fatalf("round trip: %+v -> % x -> %+v (%v)", d, buf[:w], d2, err)
		}
		_, _ = ParseFrameHeader(b[n:]) // must not panic
	})
}

// Fuzz stream encoding: each packet is 3 octets (op, x, y).
//
//	op bits 0-2: 0-3 next seq, 4 seq += int8(x), 5 seq += x<<8,
//	             6 Expire after x ms, 7 Flush if x == 0 else seq -= 1
//	op bit 3: marker, bit 4: frame start, bit 5: keyframe, bit 6: new
//	timestamp, bit 7: not media (x odd: padding only; x even: malformed)
//	y bits 0-5: data octets; bits 6-7: ms since the previous packet
//
// The VP8 data of each media packet is a chunk that names its sequence
// number and timestamp, so every delivered frame can be checked piece by
// piece: the assembler must only ever concatenate whole, contiguous packets
// of one timestamp.
const chunkMagic = 0xc5

func chunk(seq uint16, ts uint32, n int) []byte {
	b := []byte{chunkMagic, byte(seq >> 8), byte(seq), byte(ts), byte(n)}
	for i := 0; i < n; i++ {
		b = append(b, byte(seq)^byte(i))
	}
	return b
}

// fuzzConfigs are small limits so the fuzzer reaches every path.
var fuzzConfigs = []AssemblerConfig{
	{ReorderPackets: 16, ReorderDelay: 20 * time.Millisecond, MaxPackets: 64, MaxPayloadBytes: 80, MaxFrameBytes: 400, ResyncPackets: 8},
	{ReorderPackets: 3, ReorderDelay: 5 * time.Millisecond, MaxPackets: 4, MaxPayloadBytes: 90, MaxFrameBytes: 100, ResyncPackets: 2},
	{},
}

func FuzzAssembler(f *testing.F) {
	// Seeds: an in-order stream, one with a lost packet, reordering,
	// duplicates, padding, a wrap, garbage, jumps and expiry.
	f.Add(byte(0), []byte{0x38, 0, 10, 0x40, 0, 5, 0x48, 0, 5, 0x58, 0, 20, 0x50, 0, 7, 0x08, 0, 3})
	f.Add(byte(0), []byte{0x30, 0, 10, 0x00, 0, 5, 0x08, 0, 5, 0x50, 0, 20, 0x04, 2, 7, 0x0c, 0xff, 3, 0x58, 0, 3})
	f.Add(byte(1), []byte{0x30, 0, 10, 0x04, 0, 10, 0x88, 1, 5, 0x80, 2, 5, 0x06, 30, 0, 0x58, 0, 9, 0x07, 0, 0})
	f.Add(byte(2), []byte{0x35, 0xff, 10, 0x05, 0xfe, 5, 0x08, 0, 5, 0x5c, 0x80, 3, 0x18, 0, 9, 0x77, 0, 4})
	f.Add(byte(0), bytes.Repeat([]byte{0x0c, 0xf0, 0x3f}, 40))
	f.Fuzz(func(t *testing.T, cfgSel byte, in []byte) {
		cfg := fuzzConfigs[int(cfgSel)%len(fuzzConfigs)]
		var a *Assembler
		var frames, losses uint64
		var prevLast uint16
		havePrev := false
		resyncs := uint64(0)
		checkOrder := func(first, last uint16, what string) {
			if uint16(last-first) >= 1<<15 {
				t.Fatalf("%s range %d..%d runs backwards", what, first, last)
			}
			if s := a.Stats(); s.Resyncs != resyncs {
				resyncs, havePrev = s.Resyncs, false
			}
			if havePrev && int16(first-prevLast) <= 0 {
				t.Fatalf("%s %d..%d does not follow the previous event ending at %d", what, first, last, prevLast)
			}
			prevLast, havePrev = last, true
		}
		sink := SinkFuncs{
			Frame: func(fr Frame) {
				frames++
				checkOrder(fr.FirstSeq, fr.LastSeq, "frame")
				checkFrame(t, fr, a.cfg.MaxFrameBytes)
				if fr.Keyframe && a.NeedKeyframe() {
					t.Fatal("NeedKeyframe still true after a keyframe")
				}
			},
			Loss: func(l Loss) {
				losses++
				if l.Reason == LossInvalid || l.Reason >= lossReasonCount || l.Missing+l.Dropped == 0 {
					t.Fatalf("bad loss %+v", l)
				}
				if l.Reason != LossReset {
					checkOrder(l.FirstSeq, l.LastSeq, "loss")
				} else {
					havePrev = false
				}
				if !a.NeedKeyframe() {
					t.Fatal("NeedKeyframe false after a loss")
				}
			},
		}
		var err error
		a, err = NewAssembler(cfg, sink)
		if err != nil {
			t.Fatal(err)
		}
		memLimit := a.cfg.MaxPackets*a.cfg.MaxPayloadBytes + a.cfg.MaxFrameBytes
		now := t0
		seq, ts := uint16(1000), uint32(0)
		for len(in) >= 3 {
			op, x, y := in[0], in[1], in[2]
			in = in[3:]
			now = now.Add(time.Duration(y>>6) * time.Millisecond)
			switch op & 7 {
			case 4:
				seq += uint16(int8(x))
			case 5:
				seq += uint16(x) << 8
			case 6:
				now = now.Add(time.Duration(x) * time.Millisecond)
				a.Expire(now)
				continue
			case 7:
				if x == 0 {
					a.Flush(now)
					continue
				}
				seq--
			default:
				seq++
			}
			if op&0x40 != 0 {
				ts += 3000
			}
			pk := &rtp.Packet{Header: rtp.Header{Version: 2, SequenceNumber: seq, Timestamp: ts, Marker: op&0x08 != 0}}
			switch {
			case op&0x80 != 0 && x&1 == 1:
				// padding only
			case op&0x80 != 0:
				switch x & 6 {
				case 0:
					pk.Payload = []byte{0x80, 0x80 | x} // truncated PictureID
				case 2:
					pk.Payload = []byte{0x10}
				case 4:
					pk.Version = 1
					pk.Payload = []byte{0x10, 0x11, 0, 0}
				default:
					pk.Payload = make([]byte, a.cfg.MaxPayloadBytes+1) // oversize
				}
			default:
				start := op&0x10 != 0
				d := Descriptor{Start: start, HasPictureID: x&2 != 0, WidePictureID: x&4 != 0, PictureID: uint16(x >> 3)}
				if !start {
					d.PartitionID = x >> 5
				}
				pay := make([]byte, d.MarshalSize())
				if _, err := d.MarshalTo(pay); err != nil {
					t.Fatal(err)
				}
				if start && op&0x20 != 0 {
					pay = append(pay, keyHeader...)
				} else if start {
					pay = append(pay, interHeader...)
				}
				pk.Payload = append(pay, chunk(seq, ts, int(y&63))...)
			}
			_ = a.Push(pk, now)
			if m := a.memBytes(); m > memLimit {
				t.Fatalf("buffers hold %d octets, limit %d", m, memLimit)
			}
		}
		a.Flush(now)
		s := a.Stats()
		if s.Frames != frames || s.Losses != losses {
			t.Fatalf("stats count %d frames %d losses, sink saw %d and %d", s.Frames, s.Losses, frames, losses)
		}
		if s.Accepted+s.Padding+s.Malformed+s.Duplicate+s.TooOld+s.Oversize != s.Packets {
			t.Fatalf("packet counters do not add up: %+v", s)
		}
	})
}

// checkFrame checks that a delivered frame is a VP8 frame header followed by
// whole chunks of consecutive sequence numbers (gaps only where padding may
// have filled them) sharing the frame's timestamp.
func checkFrame(t *testing.T, fr Frame, maxBytes int) {
	t.Helper()
	if len(fr.Data) > maxBytes {
		t.Fatalf("frame of %d octets, limit %d", len(fr.Data), maxBytes)
	}
	h, err := ParseFrameHeader(fr.Data)
	if err != nil {
		t.Fatalf("delivered frame has a bad header: %v", err)
	}
	b := fr.Data[h.HeaderLen:]
	var n int
	var prev uint16
	for len(b) > 0 {
		if len(b) < 5 || b[0] != chunkMagic || len(b) < 5+int(b[4]) {
			t.Fatalf("frame %d..%d: broken chunk at %d", fr.FirstSeq, fr.LastSeq, len(fr.Data)-len(b))
		}
		seq := uint16(b[1])<<8 | uint16(b[2])
		if !bytes.Equal(b[:5+int(b[4])], chunk(seq, fr.RTPTimestamp, int(b[4]))) {
			t.Fatalf("frame ts %d: chunk of seq %d is corrupt or from another timestamp", fr.RTPTimestamp, seq)
		}
		switch {
		case n == 0 && seq != fr.FirstSeq:
			t.Fatalf("frame starts with seq %d, FirstSeq %d", seq, fr.FirstSeq)
		case n > 0 && int16(seq-prev) <= 0:
			t.Fatalf("frame %d..%d: seq %d after %d", fr.FirstSeq, fr.LastSeq, seq, prev)
		}
		prev = seq
		n++
		b = b[5+int(b[4]):]
	}
	if n != fr.Packets || n == 0 || (!fr.MissingMarker && prev != fr.LastSeq) || uint16(fr.LastSeq-prev) >= 1<<15 {
		t.Fatalf("frame %d..%d: %d chunks ending at %d, Packets %d", fr.FirstSeq, fr.LastSeq, n, prev, fr.Packets)
	}
}
