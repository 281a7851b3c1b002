package rtpvp8

import (
	"bytes"
	"fmt"
	"testing"
	"time"

	"github.com/pion/rtp"
)

// t0 is the arbitrary start of the test clock.
var t0 = time.Date(2025, 3, 1, 12, 0, 0, 0, time.UTC)

// tp describes one test step: a packet to push, or (expire) a call to
// Expire, or (flush) a call to Flush, at t0+atMs.
type tp struct {
	seq    uint16
	ts     uint32
	marker bool
	start  bool // S=1, PID=0 and a VP8 frame header at the start of data
	key    bool // with start: a keyframe header
	size   int  // VP8 data octets (after any frame header); 0 means 4
	pad    bool // padding only: empty payload
	raw    []byte
	ver    uint8 // RTP version; 0 means 2
	nilp   bool
	atMs   int
	expire bool
	flush  bool
}

// interHeader is a VP8 inter-frame tag: P=1, version 0, show_frame=1,
// first_part_size 0 (RFC 6386 section 9.1).
var interHeader = []byte{0x11, 0x00, 0x00}

// keyHeader is a VP8 keyframe tag (P=0, show_frame=1, first_part_size 0),
// start code, and a 96x64 size.
var keyHeader = []byte{0x10, 0x00, 0x00, 0x9d, 0x01, 0x2a, 96, 0, 64, 0}

// vp8Data returns the VP8 data of a test packet: a frame header for start
// packets, then size octets that identify the sequence number.
func (p tp) vp8Data() []byte {
	var b []byte
	if p.start {
		if p.key {
			b = append(b, keyHeader...)
		} else {
			b = append(b, interHeader...)
		}
	}
	n := p.size
	if n == 0 {
		n = 4
	}
	for i := 0; i < n; i++ {
		b = append(b, byte(int(p.seq)*31+i)^byte(p.seq>>8))
	}
	return b
}

func (p tp) packet() *rtp.Packet {
	if p.nilp {
		return nil
	}
	pk := &rtp.Packet{Header: rtp.Header{Version: 2, SequenceNumber: p.seq, Timestamp: p.ts, Marker: p.marker, PayloadType: 96, SSRC: 7}}
	if p.ver != 0 {
		pk.Version = p.ver
	}
	switch {
	case p.raw != nil:
		pk.Payload = p.raw
	case p.pad:
		pk.Padding = true
		pk.PaddingSize = 200
	default:
		d := Descriptor{Start: p.start, HasPictureID: true, WidePictureID: true, PictureID: uint16(p.ts / 3000 & 0x7fff)}
		buf := make([]byte, d.MarshalSize())
		if _, err := d.MarshalTo(buf); err != nil {
			panic(err)
		}
		pk.Payload = append(buf, p.vp8Data()...)
	}
	return pk
}

// frame returns the n packets of one frame from seq on, first with S=1 and
// last with the marker, all arriving at atMs.
func frame(seq uint16, ts uint32, n int, key bool, atMs int) []tp {
	out := make([]tp, n)
	for i := range out {
		out[i] = tp{seq: seq + uint16(i), ts: ts, start: i == 0, key: key && i == 0, marker: i == n-1, atMs: atMs}
	}
	return out
}

// ev is a comparable summary of one Sink event.
type ev struct {
	loss        bool
	ts          uint32
	first, last uint16
	key         bool
	refsMissing bool
	noMarker    bool
	packets     int
	reason      LossReason
	missing     int
	dropped     int
}

func (e ev) String() string {
	if e.loss {
		return fmt.Sprintf("loss{%s %d..%d missing=%d dropped=%d ts=%d}", e.reason, e.first, e.last, e.missing, e.dropped, e.ts)
	}
	return fmt.Sprintf("frame{ts=%d %d..%d n=%d key=%v refsMissing=%v noMarker=%v}", e.ts, e.first, e.last, e.packets, e.key, e.refsMissing, e.noMarker)
}

func fr(ts uint32, first, last uint16, n int, key, refsMissing bool) ev {
	return ev{ts: ts, first: first, last: last, packets: n, key: key, refsMissing: refsMissing}
}

func lo(r LossReason, first, last uint16, missing, dropped int, ts uint32) ev {
	return ev{loss: true, reason: r, first: first, last: last, missing: missing, dropped: dropped, ts: ts}
}

// recorder is a Sink that records events and checks each frame's data
// against the packets pushed.
type recorder struct {
	t      testing.TB
	events []ev
	sent   map[uint16][]byte // first VP8 data pushed per sequence number
}

func (r *recorder) OnFrame(f Frame) {
	var want []byte
	for s := f.FirstSeq; ; s++ {
		want = append(want, r.sent[s]...)
		if s == f.LastSeq {
			break
		}
	}
	if !bytes.Equal(f.Data, want) {
		r.t.Errorf("frame ts=%d %d..%d: data differs from the packets pushed (%d vs %d octets)", f.RTPTimestamp, f.FirstSeq, f.LastSeq, len(f.Data), len(want))
	}
	r.events = append(r.events, ev{ts: f.RTPTimestamp, first: f.FirstSeq, last: f.LastSeq, packets: f.Packets,
		key: f.Keyframe, refsMissing: f.RefsMissing, noMarker: f.MissingMarker})
}

func (r *recorder) OnLoss(l Loss) {
	e := ev{loss: true, reason: l.Reason, first: l.FirstSeq, last: l.LastSeq, missing: l.Missing, dropped: l.Dropped}
	if l.HasTimestamp {
		e.ts = l.FirstRTPTimestamp
	}
	r.events = append(r.events, e)
}

// run pushes the steps into a new Assembler and returns it with the events.
func run(t testing.TB, cfg AssemblerConfig, steps []tp) (*Assembler, *recorder, []error) {
	t.Helper()
	rec := &recorder{t: t, sent: map[uint16][]byte{}}
	a, err := NewAssembler(cfg, rec)
	if err != nil {
		t.Fatal(err)
	}
	var errs []error
	for _, s := range steps {
		at := t0.Add(time.Duration(s.atMs) * time.Millisecond)
		switch {
		case s.expire:
			a.Expire(at)
		case s.flush:
			a.Flush(at)
		default:
			if !s.pad && s.raw == nil && !s.nilp && s.ver == 0 {
				if _, ok := rec.sent[s.seq]; !ok {
					rec.sent[s.seq] = s.vp8Data()
				}
			}
			if err := a.Push(s.packet(), at); err != nil {
				errs = append(errs, err)
			}
		}
	}
	return a, rec, errs
}

func cat(parts ...[]tp) []tp {
	var out []tp
	for _, p := range parts {
		out = append(out, p...)
	}
	return out
}

// without returns steps minus the packets with the given sequence numbers.
func without(steps []tp, seqs ...uint16) []tp {
	var out []tp
next:
	for _, s := range steps {
		for _, q := range seqs {
			if s.seq == q && !s.expire && !s.flush {
				continue next
			}
		}
		out = append(out, s)
	}
	return out
}

// swap exchanges steps i and j (arrival times stay with the position).
func swap(steps []tp, i, j int) []tp {
	out := append([]tp(nil), steps...)
	out[i], out[j] = out[j], out[i]
	out[i].atMs, out[j].atMs = steps[i].atMs, steps[j].atMs
	return out
}
