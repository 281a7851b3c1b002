package vp8splice

import (
	"bytes"
	"testing"

	"github.com/pion/rtp"

	"stopgap/stream/rtpvp8"
)

// FuzzSplicer offers the Splicer a sequence of forwarded and encoded frames
// described by the input (source, keyframe, packet count, the sender's
// timestamp and picture ID steps, descriptor fields; 5 octets per frame) and
// checks the output stream whatever it accepted: sequence numbers without a
// gap, one timestamp per frame and never going back, picture IDs rising by
// 1 to 16383 per frame, the VP8 data of every frame unchanged, each output
// packet's descriptor readable, and every switch of source on a keyframe.
func FuzzSplicer(f *testing.F) {
	f.Add([]byte{0x02, 0, 30, 1, 0x80, 0x00, 0, 30, 1, 0x80, 0x03, 0, 30, 1, 0, 0x01, 0, 30, 1, 0})
	f.Add([]byte{0x06, 0xff, 0xff, 0x7f, 0xc0, 0x04, 0x00, 0x01, 0x81, 0x40, 0x01, 0x01, 0x00, 0, 0})
	f.Add([]byte{0x0a, 0x80, 0x00, 2, 0x00, 0x08, 0x80, 0x00, 0x40, 0xc0})
	f.Fuzz(func(t *testing.T, in []byte) {
		s := &Splicer{FirstSeq: 65530, FirstPictureID: 32760, MTU: 40}
		var (
			inTS    uint32
			inPID   uint16
			nextSeq uint16
			lastTS  uint32
			lastPID uint16
			started bool
			last    Source
			dst     []rtp.Packet
		)
		for len(in) >= 5 && len(dst) < 1000 {
			op, tsStep, pidStep, flags := in[0], uint32(in[1])<<8|uint32(in[2]), uint16(in[3]), in[4]
			in = in[5:]
			enc, key, nparts := op&1 != 0, op&2 != 0, 1+int(op>>2&7)
			var data []byte
			if key {
				data = keyData(60+int(op>>5)*17, op)
			} else {
				data = interData(60+int(op>>5)*17, op)
			}
			var err error
			n0 := len(dst)
			if enc {
				dst, err = s.Encode(dst, data, tsStep)
			} else {
				inTS += tsStep - 0x4000 // the sender's step may be negative
				inPID += pidStep
				d := rtpvp8.Descriptor{HasPictureID: flags&0x80 != 0, WidePictureID: flags&0x40 != 0,
					HasTL0PicIdx: flags&0x20 != 0, TL0PicIdx: flags, HasTID: flags&0x10 != 0, TID: flags & 3,
					HasKeyIdx: flags&8 != 0, KeyIdx: flags & 0x1f, NonReference: flags&4 != 0}
				if d.WidePictureID {
					d.PictureID = inPID & 0x7fff
				} else {
					d.PictureID = inPID & 0x7f
				}
				dst, err = s.Forward(dst, ForwardFrame{Parts: senderFrame(data, min(nparts, len(data)), d), RTPTimestamp: inTS, StepTicks: tsStep})
			}
			if err != nil {
				if len(dst) != n0 {
					t.Fatalf("refused frame (%v) appended %d packets", err, len(dst)-n0)
				}
				continue
			}
			src := SourceForwarded
			if enc {
				src = SourceEncoded
			}
			if src != last && !key {
				t.Fatalf("switch %v -> %v on an inter frame was accepted", last, src)
			}
			pkts := dst[n0:]
			if len(pkts) == 0 {
				t.Fatal("accepted frame wrote no packets")
			}
			var joined []byte
			for j, p := range pkts {
				if !started && j == 0 {
					nextSeq = 65530
				}
				if p.SequenceNumber != nextSeq {
					t.Fatalf("sequence number %d, want %d", p.SequenceNumber, nextSeq)
				}
				nextSeq++
				if p.Timestamp != pkts[0].Timestamp || p.Marker != (j == len(pkts)-1) {
					t.Fatalf("packet %d of a frame: timestamp %d (first %d), marker %v", j, p.Timestamp, pkts[0].Timestamp, p.Marker)
				}
				var d rtpvp8.Descriptor
				n, err := d.Unmarshal(p.Payload)
				if err != nil {
					t.Fatalf("output descriptor: %v", err)
				}
				if !d.HasPictureID || !d.WidePictureID {
					t.Fatal("output without a 15-bit picture ID")
				}
				if started && j == 0 {
					if step := (d.PictureID - lastPID) & 0x7fff; step == 0 || step > 0x3fff {
						t.Fatalf("picture ID %d after %d", d.PictureID, lastPID)
					}
				}
				joined = append(joined, p.Payload[n:]...)
				if j == len(pkts)-1 {
					lastPID = d.PictureID
				}
			}
			if started && int32(pkts[0].Timestamp-lastTS) < 0 {
				t.Fatalf("timestamp %d after %d", pkts[0].Timestamp, lastTS)
			}
			if !bytes.Equal(joined, data) {
				t.Fatal("VP8 data changed")
			}
			lastTS, started, last = pkts[0].Timestamp, true, src
			// Payloads alias the Splicer's buffer until its next call: keep
			// only the headers.
			for i := n0; i < len(dst); i++ {
				dst[i].Payload = nil
			}
		}
	})
}
