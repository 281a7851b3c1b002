package vp8splice

import (
	"bytes"
	"errors"
	"testing"

	"github.com/pion/rtp"

	"stopgap/stream/rtpvp8"
)

// keyData returns a VP8 keyframe of n octets whose header checks out (RFC
// 6386 section 9.1: tag with P=0, show_frame=1, first partition of 1
// octet; start code 9d 01 2a; 64x48), the rest a pattern seeded by seed.
func keyData(n int, seed byte) []byte {
	b := []byte{0x30, 0x00, 0x00, 0x9d, 0x01, 0x2a, 64, 0, 48, 0}
	for len(b) < n {
		b = append(b, seed+byte(len(b))*7)
	}
	return b
}

// interData returns a VP8 inter frame of n octets (tag with P=1,
// show_frame=1, first partition of 1 octet).
func interData(n int, seed byte) []byte {
	b := []byte{0x31, 0x00, 0x00}
	for len(b) < n {
		b = append(b, seed+byte(len(b))*5)
	}
	return b
}

// senderFrame splits data into parts packets as a sender would, with the
// given descriptor fields on every packet (S=1 on the first).
func senderFrame(data []byte, parts int, d rtpvp8.Descriptor) []rtpvp8.Part {
	var out []rtpvp8.Part
	size := (len(data) + parts - 1) / parts
	for i := 0; i < parts; i++ {
		lo, hi := i*size, min((i+1)*size, len(data))
		pd := d
		pd.Start = i == 0
		out = append(out, rtpvp8.Part{Desc: pd, Seq: uint16(1000 + i), Marker: i == parts-1, Data: data[lo:hi]})
	}
	return out
}

// step is one frame offered to the Splicer and what must come out.
type step struct {
	enc   bool   // an encoded frame (else forwarded)
	key   bool   // keyframe
	parts int    // forwarded: packets (0 means 2)
	inTS  uint32 // forwarded: sender's timestamp
	desc  rtpvp8.Descriptor
	ticks uint32 // StepTicks / stepTicks

	err      error  // expected error; nothing else is checked then
	seq      uint16 // first output sequence number
	ts       uint32 // output timestamp
	pid      uint16 // output picture ID
	tl0      uint8  // output TL0PICIDX (checked when the sender wrote one)
	checkTL0 bool
}

func pid7(id uint16) rtpvp8.Descriptor {
	return rtpvp8.Descriptor{HasPictureID: true, PictureID: id}
}

func pid15(id uint16) rtpvp8.Descriptor {
	return rtpvp8.Descriptor{HasPictureID: true, WidePictureID: true, PictureID: id}
}

func withTL0(d rtpvp8.Descriptor, tl0 uint8) rtpvp8.Descriptor {
	d.HasTL0PicIdx, d.TL0PicIdx = true, tl0
	return d
}

func TestSplicer(t *testing.T) {
	tests := []struct {
		name  string
		first uint16 // FirstSeq
		fpid  uint16 // FirstPictureID
		steps []step
	}{
		{
			name: "a forwarded run keeps the sender's timing and picture ID steps",
			steps: []step{
				{key: true, inTS: 90000, desc: pid15(500), seq: 0, ts: 0, pid: 0},
				{inTS: 93000, desc: pid15(501), seq: 2, ts: 3000, pid: 1},
				{inTS: 99060, desc: pid15(503), seq: 4, ts: 9060, pid: 3}, // the sender skipped 502
			},
		},
		{
			name: "a forwarded keyframe re-anchors the run (a sender that restarted)",
			steps: []step{
				{key: true, inTS: 90000, desc: pid15(500), seq: 0, ts: 0, pid: 0},
				{inTS: 93000, desc: pid15(501), seq: 2, ts: 3000, pid: 1},
				{key: true, inTS: 7, desc: pid15(20000), ticks: 3000, seq: 4, ts: 6000, pid: 2},
				{inTS: 3007, desc: pid15(20001), seq: 6, ts: 9000, pid: 3},
				{inTS: 6007, desc: pid15(19000), err: ErrOutOfOrder},
			},
		},
		{
			name:  "the first frame must be a keyframe, forwarded or encoded",
			steps: []step{{desc: pid15(1), err: ErrNeedKeyframe}, {enc: true, err: ErrNeedKeyframe}, {enc: true, key: true, seq: 0, pid: 0}},
		},
		{
			name:  "forwarded -> encoded -> forwarded: one numbering, steps from the caller at the switches",
			first: 65534, fpid: 32767,
			steps: []step{
				{key: true, inTS: 5000, desc: pid15(9), seq: 65534, ts: 0, pid: 32767},
				{inTS: 8000, desc: pid15(10), seq: 0, ts: 3000, pid: 0},
				{enc: true, ticks: 3003, err: ErrNeedKeyframe},
				{enc: true, key: true, ticks: 3003, seq: 2, ts: 6003, pid: 1},
				{enc: true, ticks: 3000, seq: 5, ts: 9003, pid: 2}, // 2500 octets: 3 packets each
				{inTS: 20000, desc: pid15(14), err: ErrNeedKeyframe},
				{key: true, inTS: 23000, desc: pid15(15), ticks: 2997, seq: 8, ts: 12000, pid: 3},
				{inTS: 26000, desc: pid15(16), seq: 10, ts: 15000, pid: 4},
			},
		},
		{
			name: "7-bit picture IDs are widened and wrap at 127",
			fpid: 40,
			steps: []step{
				{key: true, inTS: 0, desc: pid7(126), seq: 0, pid: 40},
				{inTS: 3000, desc: pid7(127), seq: 2, ts: 3000, pid: 41},
				{inTS: 6000, desc: pid7(0), seq: 4, ts: 6000, pid: 42},
				{inTS: 9000, desc: pid7(0), err: ErrOutOfOrder},
				{inTS: 9000, desc: pid7(120), err: ErrOutOfOrder},
				{inTS: 9000, desc: pid7(1), seq: 6, ts: 9000, pid: 43},
			},
		},
		{
			name: "a sender without picture IDs gets consecutive ones",
			steps: []step{
				{key: true, inTS: 0, seq: 0, pid: 0},
				{inTS: 3000, seq: 2, ts: 3000, pid: 1},
				{inTS: 6000, parts: 3, seq: 4, ts: 6000, pid: 2},
				{inTS: 9000, seq: 7, ts: 9000, pid: 3},
			},
		},
		{
			name: "TL0PICIDX continues across encoded frames",
			steps: []step{
				{key: true, inTS: 0, desc: withTL0(pid15(7), 200), seq: 0, pid: 0, tl0: 1, checkTL0: true},
				{inTS: 3000, desc: withTL0(pid15(8), 201), seq: 2, ts: 3000, pid: 1, tl0: 2, checkTL0: true},
				{enc: true, key: true, ticks: 3000, seq: 4, ts: 6000, pid: 2},
				{enc: true, ticks: 3000, seq: 7, ts: 9000, pid: 3},
				{key: true, inTS: 50, desc: withTL0(pid15(20), 255), ticks: 3000, seq: 10, ts: 12000, pid: 4, tl0: 5, checkTL0: true},
				{inTS: 3050, desc: withTL0(pid15(21), 0), seq: 12, ts: 15000, pid: 5, tl0: 6, checkTL0: true},
			},
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			s := &Splicer{SSRC: 77, PayloadType: 96, FirstSeq: tc.first, FirstPictureID: tc.fpid}
			for i, st := range tc.steps {
				before := *s
				var pkts []rtp.Packet
				var err error
				var sent [][]byte // VP8 data offered, per packet for forwarded frames
				var frame []byte
				if st.enc {
					frame = interData(2500, byte(i))
					if st.key {
						frame = keyData(2500, byte(i))
					}
					pkts, err = s.Encode(nil, frame, st.ticks)
				} else {
					data := interData(300, byte(i))
					if st.key {
						data = keyData(300, byte(i))
					}
					n := st.parts
					if n == 0 {
						n = 2
					}
					parts := senderFrame(data, n, st.desc)
					for _, p := range parts {
						sent = append(sent, p.Data)
					}
					frame = data
					pkts, err = s.Forward(nil, ForwardFrame{Parts: parts, RTPTimestamp: st.inTS, StepTicks: st.ticks})
				}
				if st.err != nil {
					if !errors.Is(err, st.err) {
						t.Fatalf("step %d: err %v, want %v", i, err, st.err)
					}
					if len(pkts) != 0 || s.seq != before.seq || s.pid != before.pid || s.ts != before.ts || s.last != before.last {
						t.Fatalf("step %d: a refused frame changed the output: %d packets, state %+v -> %+v", i, len(pkts), before, *s)
					}
					continue
				}
				if err != nil {
					t.Fatalf("step %d: %v", i, err)
				}
				var joined []byte
				for j, p := range pkts {
					if p.SequenceNumber != st.seq+uint16(j) || p.Timestamp != st.ts || p.SSRC != 77 || p.PayloadType != 96 || p.Marker != (j == len(pkts)-1) {
						t.Errorf("step %d packet %d: seq %d ts %d ssrc %d pt %d marker %v; want seq %d ts %d, marker on the last only",
							i, j, p.SequenceNumber, p.Timestamp, p.SSRC, p.PayloadType, p.Marker, st.seq+uint16(j), st.ts)
					}
					var d rtpvp8.Descriptor
					n, err := d.Unmarshal(p.Payload)
					if err != nil {
						t.Fatalf("step %d packet %d: %v", i, j, err)
					}
					if !d.HasPictureID || !d.WidePictureID || d.PictureID != st.pid {
						t.Errorf("step %d packet %d: picture ID %v/%v/%d, want 15-bit %d", i, j, d.HasPictureID, d.WidePictureID, d.PictureID, st.pid)
					}
					if st.checkTL0 && (!d.HasTL0PicIdx || d.TL0PicIdx != st.tl0) {
						t.Errorf("step %d packet %d: TL0PICIDX %v/%d, want %d", i, j, d.HasTL0PicIdx, d.TL0PicIdx, st.tl0)
					}
					if d.Start != (j == 0) {
						t.Errorf("step %d packet %d: S=%v", i, j, d.Start)
					}
					if !st.enc && !bytes.Equal(p.Payload[n:], sent[j]) {
						t.Errorf("step %d packet %d: forwarded data changed", i, j)
					}
					joined = append(joined, p.Payload[n:]...)
				}
				if !bytes.Equal(joined, frame) {
					t.Errorf("step %d: the packets' VP8 data is not the frame", i)
				}
				want := SourceForwarded
				if st.enc {
					want = SourceEncoded
				}
				if s.Last() != want {
					t.Errorf("step %d: Last() = %v, want %v", i, s.Last(), want)
				}
			}
		})
	}
}

// TestForwardKeepsDescriptorFields checks that a forwarded packet keeps the
// descriptor fields the Splicer does not own: N, PID with S=0, TID, Y and
// KEYIDX.
func TestForwardKeepsDescriptorFields(t *testing.T) {
	d := rtpvp8.Descriptor{NonReference: true, HasPictureID: true, PictureID: 5, HasTID: true, TID: 2, LayerSync: true, HasKeyIdx: true, KeyIdx: 17}
	parts := senderFrame(keyData(200, 1), 3, d)
	parts[2].Desc.PartitionID = 1
	var s Splicer
	pkts, err := s.Forward(nil, ForwardFrame{Parts: parts})
	if err != nil {
		t.Fatal(err)
	}
	for i, p := range pkts {
		var got rtpvp8.Descriptor
		if _, err := got.Unmarshal(p.Payload); err != nil {
			t.Fatal(err)
		}
		want := parts[i].Desc
		want.WidePictureID, want.PictureID = true, 0
		if got != want {
			t.Errorf("packet %d descriptor %+v, want %+v", i, got, want)
		}
	}
}

func TestSplicerBadFrames(t *testing.T) {
	var s Splicer
	for _, tc := range []struct {
		name string
		run  func() error
		want error
	}{
		{"no parts", func() error { _, err := s.Forward(nil, ForwardFrame{}); return err }, ErrEmptyFrame},
		{"no start", func() error {
			p := senderFrame(keyData(100, 0), 2, rtpvp8.Descriptor{})
			_, err := s.Forward(nil, ForwardFrame{Parts: p[1:]})
			return err
		}, ErrBadFrame},
		{"empty part", func() error {
			p := senderFrame(keyData(100, 0), 2, rtpvp8.Descriptor{})
			p[1].Data = nil
			_, err := s.Forward(nil, ForwardFrame{Parts: p})
			return err
		}, ErrBadFrame},
		{"empty encoded", func() error { _, err := s.Encode(nil, nil, 1); return err }, ErrEmptyFrame},
		{"truncated encoded keyframe", func() error { _, err := s.Encode(nil, keyData(10, 0)[:8], 1); return err }, ErrBadFrame},
		{"first partition past the end", func() error {
			_, err := s.Encode(nil, []byte{0x30, 0x10, 0x00, 0x9d, 0x01, 0x2a, 64, 0, 48, 0, 1}, 1)
			return err
		}, ErrBadFrame},
	} {
		if err := tc.run(); !errors.Is(err, tc.want) {
			t.Errorf("%s: err %v, want %v", tc.name, err, tc.want)
		}
	}
	if s.Last() != SourceInvalid || s.NextSeq() != 0 {
		t.Errorf("refused frames changed the state: last %v, next seq %d", s.Last(), s.NextSeq())
	}
}

func TestSourceString(t *testing.T) {
	for s, want := range map[Source]string{SourceInvalid: "invalid", SourceForwarded: "forwarded", SourceEncoded: "encoded", 9: "invalid"} {
		if got := s.String(); got != want {
			t.Errorf("%d: %q, want %q", s, got, want)
		}
	}
}

// TestSplicerDoesNotAllocate checks the per-frame path after warm-up.
func TestSplicerDoesNotAllocate(t *testing.T) {
	var s Splicer
	key, inter := keyData(20000, 1), interData(5000, 2)
	kp, ip := senderFrame(key, 20, pid15(1)), senderFrame(inter, 5, pid15(2))
	dst := make([]rtp.Packet, 0, 64)
	ts := uint32(0)
	pid := uint16(2)
	round := func() {
		var err error
		if _, err = s.Encode(dst[:0], key, 3000); err != nil {
			t.Fatal(err)
		}
		if _, err = s.Forward(dst[:0], ForwardFrame{Parts: kp, RTPTimestamp: ts, StepTicks: 3000}); err != nil {
			t.Fatal(err)
		}
		ts += 3000
		pid++
		for i := range ip {
			ip[i].Desc.PictureID = pid
		}
		if _, err = s.Forward(dst[:0], ForwardFrame{Parts: ip, RTPTimestamp: ts}); err != nil {
			t.Fatal(err)
		}
		ts += 3000
		pid++
		for i := range kp {
			kp[i].Desc.PictureID = pid
		}
	}
	round()
	if n := testing.AllocsPerRun(50, round); n != 0 {
		t.Errorf("%.1f allocations per round, want 0", n)
	}
}
