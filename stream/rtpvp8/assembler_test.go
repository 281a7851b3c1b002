package rtpvp8

import (
	"bytes"
	"errors"
	"slices"
	"testing"
	"time"

	"github.com/pion/rtp"
)

// Streams used by several cases: a 3-packet keyframe, then single- and
// multi-packet inter frames, 90 kHz timestamps 3000 apart (30 fps), one
// frame every 33 ms.
func baseStream() []tp {
	return cat(
		frame(100, 0, 3, true, 0),
		frame(103, 3000, 3, false, 33),
		frame(106, 6000, 2, false, 66),
	)
}

func TestAssembler(t *testing.T) {
	base := baseStream()
	kf := fr(0, 100, 102, 3, true, false)
	p1 := fr(3000, 103, 105, 3, false, false)
	p2 := fr(6000, 106, 107, 2, false, false)
	p2lost := fr(6000, 106, 107, 2, false, true)

	wrap := cat(frame(65533, 90000, 3, true, 0), frame(0, 93000, 2, false, 33), frame(2, 96000, 2, false, 66))

	bigKey := frame(100, 0, 100, true, 0)      // 100 packets: 100..199
	afterBig := frame(200, 3000, 2, false, 33) // 200..201
	garbage := []tp{
		{seq: 101, raw: []byte{0x80}},             // X=1 but no extension octet
		{seq: 101, raw: []byte{0x90, 0x80}},       // I=1 but no PictureID
		{seq: 102, raw: []byte{0x90, 0x80, 0x80}}, // 15-bit PictureID cut short
		{seq: 103, raw: []byte{0x10}},             // descriptor only, no VP8 data
		{seq: 104, ver: 1, start: true},           // RTP version 1
		{nilp: true},
		{seq: 105, raw: make([]byte, 1501)}, // above MaxPayloadBytes
	}
	interleave := func(a, b []tp) []tp {
		var out []tp
		for i := 0; i < len(a) || i < len(b); i++ {
			if i < len(a) {
				out = append(out, a[i])
			}
			if i < len(b) {
				out = append(out, b[i])
			}
		}
		return out
	}

	tests := []struct {
		name      string
		cfg       AssemblerConfig
		steps     []tp
		want      []ev
		needKey   bool
		wantStats func(t *testing.T, s Stats)
	}{
		{
			name:  "in order",
			steps: base,
			want:  []ev{kf, p1, p2},
		},
		{
			name:  "reordered within a frame",
			steps: swap(swap(base, 0, 2), 3, 4), // 102,101,100, 104,103,105, ...
			want:  []ev{kf, p1, p2},
		},
		{
			name: "reordered across a frame boundary, later frame still incomplete",
			// 100,101,103,102,104,105: the keyframe's marker packet comes after
			// the first packet of the next frame.
			steps: swap(base, 2, 3),
			want:  []ev{kf, p1, p2},
		},
		{
			name: "packet overtaken by a whole later frame is given up (policy: fresh frames first)",
			// 105 (the marker of 103..105) arrives after the complete frame 106..107.
			steps: cat(base[:5], base[6:], []tp{{seq: 105, ts: 3000, marker: true, atMs: 70}}),
			want:  []ev{kf, lo(LossNewerFrame, 103, 105, 1, 2, 3000), p2lost},
			wantStats: func(t *testing.T, s Stats) {
				if s.TooOld != 1 {
					t.Errorf("TooOld=%d, want 1", s.TooOld)
				}
			},
			needKey: true,
		},
		{
			name:  "duplicated packets, before and after delivery",
			steps: cat(base[:2], base[1:2], base[2:5], base[0:1], base[4:], base[7:]),
			want:  []ev{kf, p1, p2},
			wantStats: func(t *testing.T, s Stats) {
				// 101 and 104 arrive twice while buffered; 100 and 107 again
				// after their frames were delivered.
				if s.Duplicate != 2 || s.TooOld != 2 {
					t.Errorf("Duplicate=%d TooOld=%d, want 2 and 2", s.Duplicate, s.TooOld)
				}
			},
		},
		{
			name:  "sequence numbers wrap at 65535 without loss",
			steps: wrap,
			want:  []ev{fr(90000, 65533, 65535, 3, true, false), fr(93000, 0, 1, 2, false, false), fr(96000, 2, 3, 2, false, false)},
		},
		{
			name:  "reordered across the wrap",
			steps: swap(swap(wrap, 2, 3), 1, 2), // 65533, 0, 65535, 65534, 1, ...
			want:  []ev{fr(90000, 65533, 65535, 3, true, false), fr(93000, 0, 1, 2, false, false), fr(96000, 2, 3, 2, false, false)},
		},
		{
			name:    "single lost middle packet",
			steps:   without(base, 104),
			want:    []ev{kf, lo(LossNewerFrame, 103, 105, 1, 2, 3000), p2lost},
			needKey: true,
		},
		{
			name:    "lost marker packet",
			steps:   without(base, 105),
			want:    []ev{kf, lo(LossNewerFrame, 103, 105, 1, 2, 3000), p2lost},
			needKey: true,
		},
		{
			name:    "lost first packet",
			steps:   without(base, 103),
			want:    []ev{kf, lo(LossNewerFrame, 103, 105, 1, 2, 3000), p2lost},
			needKey: true,
		},
		{
			name:    "whole single-packet frame lost",
			steps:   cat(frame(100, 0, 3, true, 0), frame(104, 6000, 1, false, 66), frame(105, 9000, 1, false, 99)),
			want:    []ev{kf, lo(LossNewerFrame, 103, 103, 1, 0, 0), fr(6000, 104, 104, 1, false, true), fr(9000, 105, 105, 1, false, true)},
			needKey: true,
		},
		{
			name:  "keyframe after a loss clears NeedKeyframe",
			steps: cat(without(base, 104), frame(108, 9000, 2, true, 99), frame(110, 12000, 1, false, 133)),
			want: []ev{kf, lo(LossNewerFrame, 103, 105, 1, 2, 3000), p2lost,
				fr(9000, 108, 109, 2, true, false), fr(12000, 110, 110, 1, false, false)},
		},
		{
			name: "padding-only packets fill sequence numbers and force nothing out",
			steps: cat(
				[]tp{{seq: 90, pad: true}}, // before any media: ignored
				frame(100, 0, 3, true, 0),
				[]tp{{seq: 103, pad: true, atMs: 10}, {seq: 104, pad: true, atMs: 10}},
				[]tp{{seq: 900, pad: true, atMs: 11}}, // far ahead: ignored, must not overflow
				[]tp{{seq: 50, pad: true, atMs: 12}},  // behind: ignored
				frame(105, 3000, 2, false, 33),
				[]tp{{seq: 108, pad: true, atMs: 40}}, // inside the next frame's range
				[]tp{{seq: 107, ts: 6000, start: true, atMs: 66}, {seq: 109, ts: 6000, marker: true, atMs: 66}},
			),
			want: []ev{kf, fr(3000, 105, 106, 2, false, false), fr(6000, 107, 109, 2, false, false)},
			wantStats: func(t *testing.T, s Stats) {
				if s.Padding != 6 || s.Losses != 0 || s.TooOld != 0 {
					t.Errorf("Padding=%d Losses=%d TooOld=%d, want 6, 0, 0", s.Padding, s.Losses, s.TooOld)
				}
			},
		},
		{
			name:  "missing packets at a frame boundary of padding: only padding lost is no loss",
			steps: cat(frame(100, 0, 3, true, 0), []tp{{seq: 103, pad: true}}, frame(104, 3000, 1, false, 33)),
			want:  []ev{kf, fr(3000, 104, 104, 1, false, false)},
		},
		{
			name:    "gap longer than the window between frames",
			steps:   cat(frame(100, 0, 3, true, 0), frame(200, 90000, 2, false, 1000)),
			want:    []ev{kf, lo(LossWindow, 103, 199, 97, 0, 0), fr(90000, 200, 201, 2, false, true)},
			needKey: true,
		},
		{
			name: "hole in a frame longer than the window",
			// Packet 105 of a 100-packet keyframe is lost; at packet 169 it is
			// 64 behind, the frame is given up, the rest of it is dropped
			// silently as stragglers of a reported frame.
			steps: cat(without(bigKey, 105), afterBig),
			want: []ev{
				lo(LossWindow, 100, 169, 1, 69, 0),
				fr(3000, 200, 201, 2, false, true),
			},
			needKey: true,
			wantStats: func(t *testing.T, s Stats) {
				if s.DroppedPackets != 99 || s.MissingPackets != 1 {
					t.Errorf("DroppedPackets=%d MissingPackets=%d, want 99 and 1", s.DroppedPackets, s.MissingPackets)
				}
			},
		},
		{
			name:  "interleaved garbage is counted and changes nothing",
			steps: interleave(base, garbage),
			want:  []ev{kf, p1, p2},
			wantStats: func(t *testing.T, s Stats) {
				if s.Malformed != 6 || s.Oversize != 1 || s.Losses != 0 {
					t.Errorf("Malformed=%d Oversize=%d Losses=%d, want 6, 1, 0", s.Malformed, s.Oversize, s.Losses)
				}
			},
		},
		{
			name: "deadline: a missing packet is waited for ReorderDelay, then given up",
			cfg:  AssemblerConfig{ReorderDelay: 40 * time.Millisecond},
			steps: cat(frame(100, 0, 3, true, 0),
				[]tp{{seq: 103, ts: 3000, start: true, atMs: 33}, {seq: 105, ts: 3000, marker: true, atMs: 34}},
				[]tp{{expire: true, atMs: 73}}, // 39 ms after 105 arrived: keep waiting
				[]tp{{expire: true, atMs: 74}}, // 40 ms: give up
			),
			want:    []ev{kf, lo(LossDeadline, 103, 105, 1, 2, 3000)},
			needKey: true,
		},
		{
			name: "late packet within the deadline completes the frame",
			cfg:  AssemblerConfig{ReorderDelay: 40 * time.Millisecond},
			steps: cat(frame(100, 0, 3, true, 0),
				[]tp{{seq: 103, ts: 3000, start: true, atMs: 33}, {seq: 105, ts: 3000, marker: true, atMs: 34}},
				[]tp{{expire: true, atMs: 60}},
				[]tp{{seq: 104, ts: 3000, atMs: 70}},
				[]tp{{seq: 104, ts: 3000, atMs: 71}}, // duplicate of a delivered packet
			),
			want: []ev{kf, fr(3000, 103, 105, 3, false, false)},
		},
		{
			name: "packet after the deadline is too old",
			cfg:  AssemblerConfig{ReorderDelay: 40 * time.Millisecond},
			steps: cat(frame(100, 0, 3, true, 0),
				[]tp{{seq: 103, ts: 3000, start: true, atMs: 33}, {seq: 105, ts: 3000, marker: true, atMs: 34}},
				[]tp{{seq: 104, ts: 3000, atMs: 80}},
			),
			want:    []ev{kf, lo(LossDeadline, 103, 105, 1, 2, 3000)},
			needKey: true,
			wantStats: func(t *testing.T, s Stats) {
				if s.TooOld != 1 {
					t.Errorf("TooOld=%d, want 1", s.TooOld)
				}
			},
		},
		{
			// A NACK's answer arrives after the next frame is complete:
			// with RepairWait both frames are delivered, none lost.
			name:  "repair: retransmission after a complete later frame completes both",
			cfg:   AssemblerConfig{RepairWait: 60 * time.Millisecond},
			steps: cat(without(base, 104), []tp{{seq: 104, ts: 3000, atMs: 80}}),
			want:  []ev{kf, p1, p2},
		},
		{
			name: "repair: given up RepairWait after the first later arrival",
			cfg:  AssemblerConfig{RepairWait: 60 * time.Millisecond},
			steps: cat(without(base, 104),
				[]tp{{expire: true, atMs: 92}}, // 59 ms after 105 (33 ms): keep waiting
				[]tp{{expire: true, atMs: 93}}, // 60 ms: give up
				[]tp{{seq: 104, ts: 3000, atMs: 95}}),
			want:    []ev{kf, lo(LossDeadline, 103, 105, 1, 2, 3000), p2lost},
			needKey: true,
			wantStats: func(t *testing.T, s Stats) {
				if s.TooOld != 1 {
					t.Errorf("TooOld=%d, want 1", s.TooOld)
				}
			},
		},
		{
			name:  "repair: a complete later keyframe ends the wait at once",
			cfg:   AssemblerConfig{RepairWait: 500 * time.Millisecond},
			steps: cat(without(base, 104), frame(108, 9000, 2, true, 99)),
			want: []ev{kf, lo(LossNewerFrame, 103, 105, 1, 2, 3000), p2lost,
				fr(9000, 108, 109, 2, true, false)},
		},
		{
			name:  "repair: a lost marker packet is repaired after the next frame",
			cfg:   AssemblerConfig{RepairWait: 60 * time.Millisecond},
			steps: cat(without(base, 105), []tp{{seq: 105, ts: 3000, marker: true, atMs: 70}}),
			want:  []ev{kf, p1, p2},
		},
		{
			name: "repair: a hole in the awaited keyframe is waited for",
			cfg:  AssemblerConfig{RepairWait: 60 * time.Millisecond},
			steps: cat(without(frame(100, 0, 3, true, 0), 101), frame(103, 3000, 1, false, 33),
				[]tp{{seq: 101, ts: 0, atMs: 50}}),
			want: []ev{fr(0, 100, 102, 3, true, false), fr(3000, 103, 103, 1, false, false)},
		},
		{
			name: "repair: while a keyframe is needed, a hole in an inter frame is not waited for",
			cfg:  AssemblerConfig{RepairWait: 60 * time.Millisecond},
			steps: cat(without(base, 104), frame(108, 9000, 2, false, 99), without(frame(110, 12000, 3, false, 133), 111),
				frame(113, 15000, 1, false, 166)),
			want: []ev{kf, lo(LossDeadline, 103, 105, 1, 2, 3000), p2lost, fr(9000, 108, 109, 2, false, true),
				lo(LossNewerFrame, 110, 112, 1, 2, 12000), fr(15000, 113, 113, 1, false, true)},
			needKey: true,
		},
		{
			name:    "joined mid-frame: the partial frame is reported, no keyframe yet",
			steps:   cat(frame(100, 0, 3, true, 0)[1:], frame(103, 3000, 2, false, 33)),
			want:    []ev{lo(LossStartMissing, 101, 102, 0, 2, 0), fr(3000, 103, 104, 2, false, true)},
			needKey: true,
		},
		{
			name:  "first packets reordered at startup",
			steps: swap(base, 0, 1),
			want:  []ev{kf, p1, p2},
		},
		{
			name:  "frames without marker bits end at the next frame start",
			steps: []tp{{seq: 1, ts: 0, start: true, key: true}, {seq: 2, ts: 0}, {seq: 3, ts: 3000, start: true}, {seq: 4, ts: 6000, start: true, marker: true}},
			want: []ev{
				{ts: 0, first: 1, last: 2, packets: 2, key: true, noMarker: true},
				{ts: 3000, first: 3, last: 3, packets: 1, noMarker: true},
				fr(6000, 4, 4, 1, false, false),
			},
		},
		{
			name:    "frame larger than MaxFrameBytes",
			cfg:     AssemblerConfig{MaxFrameBytes: 300},
			steps:   cat(frame(100, 0, 1, true, 0), sized(frame(101, 3000, 3, false, 33), 120), frame(104, 6000, 1, false, 66)),
			want:    []ev{fr(0, 100, 100, 1, true, false), lo(LossOversize, 101, 103, 0, 3, 3000), fr(6000, 104, 104, 1, false, true)},
			needKey: true,
		},
		{
			name: "buffer overflow forces the oldest incomplete frame out",
			cfg:  AssemblerConfig{MaxPackets: 8, ReorderPackets: 7, ReorderDelay: time.Hour},
			// 102 is lost; 100..107 fill the 8 slots; 108 forces them out,
			// and 108..111 are dropped as stragglers of the reported frame.
			steps: cat(without(frame(100, 0, 12, true, 0), 102)),
			want:  []ev{lo(LossOverflow, 100, 107, 1, 7, 0)},
			wantStats: func(t *testing.T, s Stats) {
				if s.LossesBy(LossOverflow) != 1 {
					t.Errorf("LossesBy(LossOverflow)=%d, want 1", s.LossesBy(LossOverflow))
				}
			},
			needKey: true,
		},
		{
			name: "sequence numbers restart far behind: resync after ResyncPackets",
			cfg:  AssemblerConfig{ResyncPackets: 3},
			steps: cat(frame(1000, 0, 1, true, 0), []tp{{seq: 1001, ts: 3000, start: true, atMs: 33}},
				frame(40000, 500, 1, true, 40), frame(40001, 3500, 1, false, 73), frame(40002, 6500, 1, false, 106), frame(40003, 9500, 1, false, 139)),
			want: []ev{fr(0, 1000, 1000, 1, true, false), lo(LossReset, 1001, 1001, 0, 1, 3000),
				fr(6500, 40002, 40002, 1, false, true), fr(9500, 40003, 40003, 1, false, true)},
			needKey: true,
		},
		{
			name:    "keyframe with a bad start code is a bad frame",
			steps:   []tp{{seq: 1, ts: 0, start: true, marker: true, raw: []byte{0x10, 0x10, 0, 0, 0x9d, 0x01, 0x2b, 1, 0, 1, 0}}},
			want:    []ev{lo(LossBadFrame, 1, 1, 0, 1, 0)},
			needKey: true,
		},
		{
			name: "flush reports what is buffered",
			steps: cat(frame(100, 0, 3, true, 0), []tp{{seq: 103, ts: 3000, start: true, atMs: 33}},
				[]tp{{flush: true, atMs: 40}}, []tp{{seq: 104, ts: 3000, marker: true, atMs: 41}}),
			want:    []ev{kf, lo(LossFlushed, 103, 103, 0, 1, 3000)},
			needKey: true,
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			a, rec, _ := run(t, tc.cfg, tc.steps)
			if !slices.Equal(rec.events, tc.want) {
				t.Errorf("events:\n got %v\nwant %v", rec.events, tc.want)
			}
			if got := a.NeedKeyframe(); got != tc.needKey {
				t.Errorf("NeedKeyframe() = %v, want %v", got, tc.needKey)
			}
			s := a.Stats()
			if tc.wantStats != nil {
				tc.wantStats(t, s)
			}
			var losses uint64
			for r := LossInvalid; r < lossReasonCount; r++ {
				losses += s.LossesBy(r)
			}
			if losses != s.Losses {
				t.Errorf("sum of LossesBy = %d, Losses = %d", losses, s.Losses)
			}
		})
	}
}

// sized sets the data size of every packet.
func sized(steps []tp, n int) []tp {
	out := append([]tp(nil), steps...)
	for i := range out {
		out[i].size = n
	}
	return out
}

func TestAssemblerPushErrors(t *testing.T) {
	tests := []struct {
		name   string
		step   tp
		reason DropReason
		is     error
	}{
		{"nil packet", tp{nilp: true}, DropMalformed, ErrNilPacket},
		{"RTP version 0", tp{seq: 1, ver: 3, start: true}, DropMalformed, ErrRTPVersion},
		{"truncated descriptor", tp{seq: 1, raw: []byte{0x80}}, DropMalformed, ErrShortDescriptor},
		{"no VP8 data", tp{seq: 1, raw: []byte{0x90, 0x80, 0x05}}, DropMalformed, ErrNoVP8Data},
		{"oversize payload", tp{seq: 1, raw: make([]byte, 1501)}, DropOversize, ErrPayloadTooLarge},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, _, errs := run(t, AssemblerConfig{}, []tp{tc.step})
			if len(errs) != 1 {
				t.Fatalf("got %d errors, want 1", len(errs))
			}
			var pe *PacketError
			if !errors.As(errs[0], &pe) || pe.Reason != tc.reason || !errors.Is(errs[0], tc.is) {
				t.Errorf("error %v: want a *PacketError with reason %v wrapping %v", errs[0], tc.reason, tc.is)
			}
		})
	}
}

func TestAssemblerConfigErrors(t *testing.T) {
	for _, cfg := range []AssemblerConfig{
		{MaxPackets: 1},
		{MaxPackets: 1 << 16},
		{ReorderPackets: 1024},
		{ReorderPackets: -1},
		{ReorderDelay: -time.Millisecond},
		{MaxPayloadBytes: 70000},
		{MaxFrameBytes: -5},
		{ResyncPackets: -1},
	} {
		if _, err := NewAssembler(cfg, nil); !errors.Is(err, ErrInvalidConfig) {
			t.Errorf("NewAssembler(%+v) error = %v, want ErrInvalidConfig", cfg, err)
		}
	}
	a, err := NewAssembler(AssemblerConfig{MaxPackets: 100}, nil)
	if err != nil {
		t.Fatal(err)
	}
	if got := a.Config().MaxPackets; got != 128 {
		t.Errorf("MaxPackets rounded to %d, want 128", got)
	}
}

func TestAssemblerFrameFields(t *testing.T) {
	var got []Frame
	a, err := NewAssembler(AssemblerConfig{}, SinkFuncs{Frame: func(f Frame) {
		f.Data = append([]byte(nil), f.Data...)
		got = append(got, f)
	}})
	if err != nil {
		t.Fatal(err)
	}
	steps := frame(10, 1234, 3, true, 0)
	steps[1].atMs, steps[2].atMs = 5, 2
	for _, s := range steps {
		if err := a.Push(s.packet(), t0.Add(time.Duration(s.atMs)*time.Millisecond)); err != nil {
			t.Fatal(err)
		}
	}
	if len(got) != 1 {
		t.Fatalf("got %d frames, want 1", len(got))
	}
	f := got[0]
	if !f.Keyframe || f.Width != 96 || f.Height != 64 || !f.ShowFrame || !f.HasPictureID || f.PictureID != 1234/3000 {
		t.Errorf("frame fields %+v", f)
	}
	if !f.ArrivalFirst.Equal(t0) || !f.ArrivalLast.Equal(t0.Add(5*time.Millisecond)) {
		t.Errorf("arrivals %v..%v, want t0..t0+5ms", f.ArrivalFirst, f.ArrivalLast)
	}
}

// TestAssemblerFrameParts checks that a frame's parts are its packets as
// sent: sequence numbers, marker, descriptor and data, in order, with a
// padding-only packet in the middle left out, and that their data makes up
// the frame.
func TestAssemblerFrameParts(t *testing.T) {
	steps := []tp{
		{seq: 65534, ts: 9000, start: true, key: true, size: 7},
		{seq: 65535, ts: 9000, size: 5},
		{seq: 0, ts: 9000, pad: true},
		{seq: 1, ts: 9000, marker: true, size: 3},
	}
	var checked bool
	a, err := NewAssembler(AssemblerConfig{}, SinkFuncs{Frame: func(f Frame) {
		checked = true
		var joined []byte
		media := []tp{steps[0], steps[1], steps[3]}
		if len(f.Parts) != len(media) {
			t.Fatalf("%d parts, want %d", len(f.Parts), len(media))
		}
		for i, p := range f.Parts {
			want := media[i]
			if p.Seq != want.seq || p.Marker != want.marker || p.Desc.Start != want.start || p.Desc.PictureID != 3 {
				t.Errorf("part %d: seq %d marker %v start %v picture %d; want %d %v %v 3", i, p.Seq, p.Marker, p.Desc.Start, p.Desc.PictureID, want.seq, want.marker, want.start)
			}
			if !bytes.Equal(p.Data, want.vp8Data()) {
				t.Errorf("part %d data %x, want %x", i, p.Data, want.vp8Data())
			}
			joined = append(joined, p.Data...)
		}
		if !bytes.Equal(joined, f.Data) {
			t.Errorf("parts joined %x, frame data %x", joined, f.Data)
		}
	}})
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range steps {
		if err := a.Push(s.packet(), t0); err != nil {
			t.Fatal(err)
		}
	}
	if !checked {
		t.Fatal("no frame delivered")
	}
}

func TestLossPrevTimestamp(t *testing.T) {
	var losses []Loss
	a, err := NewAssembler(AssemblerConfig{}, SinkFuncs{Loss: func(l Loss) { losses = append(losses, l) }})
	if err != nil {
		t.Fatal(err)
	}
	// Joined mid-frame: no frame before the first loss. Then frame 6000 is
	// lost whole after frame 3000 was delivered.
	for _, s := range cat(frame(10, 0, 3, true, 0)[1:], frame(13, 3000, 1, true, 33), frame(15, 9000, 1, false, 99)) {
		if err := a.Push(s.packet(), t0.Add(time.Duration(s.atMs)*time.Millisecond)); err != nil {
			t.Fatal(err)
		}
	}
	if len(losses) != 2 || losses[0].HasPrev || !losses[1].HasPrev || losses[1].PrevRTPTimestamp != 3000 || losses[1].HasTimestamp {
		t.Errorf("losses %+v", losses)
	}
}

func TestReasonStrings(t *testing.T) {
	for r := LossInvalid; r <= lossReasonCount; r++ {
		if r.String() == "" {
			t.Errorf("LossReason(%d) has an empty name", r)
		}
	}
	if LossDeadline.String() != "deadline" || DropTooOld.String() != "too-old" || LossReason(200).String() != "LossReason(200)" {
		t.Error("unexpected reason names")
	}
}

// TestPushDoesNotAllocate checks that once every slot of the ring has held a
// packet, Push allocates nothing per frame.
func TestPushDoesNotAllocate(t *testing.T) {
	a, err := NewAssembler(AssemblerConfig{MaxPackets: 64}, nil)
	if err != nil {
		t.Fatal(err)
	}
	pkts := make([]*rtp.Packet, 0, 5)
	for _, s := range frame(0, 0, 5, true, 0) {
		pkts = append(pkts, s.packet())
	}
	var seq uint16
	var ts uint32
	push := func() {
		for _, p := range pkts {
			p.SequenceNumber = seq
			p.Timestamp = ts
			seq++
			if err := a.Push(p, t0); err != nil {
				t.Fatal(err)
			}
		}
		ts += 3000
	}
	for i := 0; i < 40; i++ { // 200 packets: every slot used
		push()
	}
	if n := testing.AllocsPerRun(100, push); n != 0 {
		t.Errorf("Push allocates %v times per 5-packet frame after warm-up", n)
	}
	if s := a.Stats(); s.Losses != 0 || s.Frames != 40+101 {
		t.Errorf("%d frames, %d losses", s.Frames, s.Losses)
	}
}

// TestKeyframeArriving: a keyframe whose first packet arrived after the
// request counts as arriving until it is delivered or given up (a hole
// repaired in vain); an inter frame, a keyframe that began before the
// request, and a delivered one do not. (A keyframe still open at the
// newest packet has no deadline of its own: the relay's silence rule
// covers a sender that stops.)
func TestKeyframeArriving(t *testing.T) {
	at := func(ms int) time.Time { return t0.Add(time.Duration(ms) * time.Millisecond) }
	key := frame(10, 3000, 4, true, 50)
	tests := []struct {
		name  string
		steps []tp
		since time.Time
		want  bool
	}{
		{"nothing yet", nil, at(0), false},
		{"keyframe half in", key[:2], at(0), true},
		{"keyframe half in, asked after its start", key[:2], at(60), false},
		{"keyframe delivered", key, at(0), false},
		{"inter frame half in", frame(10, 3000, 4, false, 50)[:2], at(0), false},
		{"keyframe with a hole, given up", cat(key[:2], key[3:], frame(14, 6000, 2, false, 60), []tp{{expire: true, atMs: 5000}}), at(0), false},
		{"keyframe with a hole, waited for", cat(key[:2], key[3:], frame(14, 6000, 2, false, 60)), at(0), true},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			cfg := AssemblerConfig{RepairWait: 100 * time.Millisecond}
			a, _, errs := run(t, cfg, cat(frame(1, 0, 3, true, 0), tc.steps))
			if len(errs) > 0 {
				t.Fatal(errs)
			}
			if got := a.KeyframeArriving(tc.since); got != tc.want {
				t.Errorf("KeyframeArriving = %v, want %v", got, tc.want)
			}
		})
	}
}
