package vp8

import (
	"bytes"
	"errors"
	"math/rand/v2"
	"testing"
)

// smallStream is a 64x48 stream: keyframe at 0 and at 6 (forced), inter
// frames elsewhere.
func smallStream(tb testing.TB) *testStream {
	return encodeStream(tb, EncoderConfig{Width: 64, Height: 48, BitrateBps: 200_000}, 10, 2, 6)
}

func TestKeyframeDetection(t *testing.T) {
	s := encodeStream(t, EncoderConfig{Width: 64, Height: 48, KeyframeInterval: 4}, 14, 2, 6)
	last := -1
	for i, f := range s.frames {
		h, err := ParseHeader(f)
		if err != nil {
			t.Fatalf("frame %d: %v", i, err)
		}
		if (h.Type == FrameTypeKey) != s.keys[i] || IsKeyframe(f) != s.keys[i] {
			t.Errorf("frame %d: header says %v, encoder says key=%v", i, h.Type, s.keys[i])
		}
		if s.keys[i] {
			if h.Width != 64 || h.Height != 48 {
				t.Errorf("frame %d: keyframe size %dx%d", i, h.Width, h.Height)
			}
			if last >= 0 && i-last > 4 {
				t.Errorf("keyframes %d and %d are more than KeyframeInterval 4 apart", last, i)
			}
			last = i
		}
	}
	if !s.keys[0] {
		t.Error("first frame is not a keyframe")
	}
	if !s.keys[6] {
		t.Error("ForceKeyframe before frame 6 did not give a keyframe")
	}
	if s.keys[1] {
		t.Error("frame 1 is a keyframe: nothing forced it")
	}
}

func TestDecoderLossWaitsForKeyframe(t *testing.T) {
	s := smallStream(t)
	d := newTestDecoder(t, DecoderConfig{})
	out := &Image{}
	if !d.NeedKeyframe() {
		t.Fatal("new decoder does not wait for a keyframe")
	}
	if err := d.Decode(s.frames[1], out); err != ErrNeedKeyframe {
		t.Fatalf("inter frame first: %v, want ErrNeedKeyframe", err)
	}
	for i := 0; i < 2; i++ {
		if err := d.Decode(s.frames[i], out); err != nil {
			t.Fatalf("frame %d: %v", i, err)
		}
	}
	if d.NeedKeyframe() {
		t.Fatal("still waiting after a keyframe")
	}
	// Frame 2 is lost on the link.
	d.Lost()
	if !d.NeedKeyframe() {
		t.Fatal("Lost did not make the decoder wait")
	}
	for i := 3; i < 6; i++ {
		if err := d.Decode(s.frames[i], out); err != ErrNeedKeyframe {
			t.Fatalf("frame %d after loss: %v, want ErrNeedKeyframe", i, err)
		}
		if got := d.LastFrameType(); got != FrameTypeInter {
			t.Errorf("LastFrameType = %v, want inter", got)
		}
	}
	for i := 6; i < 10; i++ {
		if err := d.Decode(s.frames[i], out); err != nil {
			t.Fatalf("frame %d: %v", i, err)
		}
		if p := psnrY(s.src[i], out); p < 30 {
			t.Errorf("frame %d after recovery: PSNR %.1f dB", i, p)
		}
	}
	if d.NeedKeyframe() {
		t.Error("still waiting after the keyframe at 6")
	}
	if err := d.Decode([]byte{1}, out); err == nil || d.LastFrameType() != FrameTypeInvalid {
		t.Errorf("1-byte frame: err %v, LastFrameType %v", err, d.LastFrameType())
	}
	if w, h := d.Size(); w != 64 || h != 48 {
		t.Errorf("Size = %dx%d", w, h)
	}
}

// referenceDecode decodes frames[0..n] with a fresh decoder and returns a
// copy of the last picture.
func referenceDecode(t *testing.T, frames [][]byte) *Image {
	t.Helper()
	d := newTestDecoder(t, DecoderConfig{})
	out := &Image{}
	for i, f := range frames {
		if err := d.Decode(f, out); err != nil {
			t.Fatalf("reference frame %d: %v", i, err)
		}
	}
	return out
}

// mustRecover checks the decoder waits for a keyframe, then decodes key
// bit-exactly like a fresh decoder.
func mustRecover(t *testing.T, d *Decoder, key []byte, want *Image, what string) {
	t.Helper()
	if !d.NeedKeyframe() {
		t.Fatalf("%s: decoder not waiting for a keyframe after an error", what)
	}
	got := &Image{}
	if err := d.Decode(key, got); err != nil {
		t.Fatalf("%s: keyframe after error: %v", what, err)
	}
	if !bytes.Equal(got.Y, want.Y) || !bytes.Equal(got.U, want.U) || !bytes.Equal(got.V, want.V) {
		t.Fatalf("%s: keyframe after error decodes differently from a fresh decoder", what)
	}
}

func TestDecoderBadInput(t *testing.T) {
	s := smallStream(t)
	key, inter := s.frames[0], s.frames[1]
	wantKey := referenceDecode(t, s.frames[:1])
	flip := func(b []byte, i int) []byte {
		c := append([]byte(nil), b...)
		c[i] ^= 0x5a
		return c
	}
	rng := rand.New(rand.NewPCG(7, 7))
	random := make([]byte, 500)
	for i := range random {
		random[i] = byte(rng.Uint32())
	}
	cases := []struct {
		name    string
		primed  bool // decode the keyframe first
		in      []byte
		wantErr error // nil: any error accepted (libvpx decides)
		mayPass bool  // libvpx may accept the garbage silently
	}{
		{"zero length", true, nil, ErrEmptyFrame, false},
		{"one byte", true, []byte{0x10}, ErrShortFrame, false},
		{"keyframe header only", false, key[:10], ErrTruncated, false},
		{"keyframe cut in half", false, key[:len(key)/2], nil, false},
		{"keyframe missing last byte", false, key[:len(key)-1], nil, false},
		{"inter cut to 3 bytes", true, inter[:3], ErrTruncated, false},
		{"inter cut in half", true, inter[:len(inter)/2], nil, false},
		{"random bytes primed", true, random, nil, false},
		// Valid inter-frame tag (show, version 0, first partition 100
		// bytes) over random bytes, so libvpx itself sees the garbage.
		// libvpx has been seen to accept this silently (no error, no corrupt
		// flag): undetectable damage, which is why callers must report
		// losses with Lost.
		{"random inter payload", true, append([]byte{0x91, 0x0c, 0x00}, random...), nil, true},
		{"keyframe bad start code", false, flip(key, 4), ErrBadHeader, false},
		{"keyframe size too large", false, func() []byte { c := append([]byte(nil), key...); c[6], c[7] = 0xff, 0x3f; return c }(), ErrSizeTooLarge, false},
		{"keyframe other size", true, func() []byte { c := append([]byte(nil), key...); c[6] = 32; return c }(), ErrSizeChanged, false},
		{"oversized input", true, make([]byte, 2<<20), ErrFrameTooLarge, false},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			d := newTestDecoder(t, DecoderConfig{MaxFrameBytes: 1 << 20})
			out := &Image{}
			if c.primed {
				if err := d.Decode(key, out); err != nil {
					t.Fatal(err)
				}
			}
			before := append([]byte(nil), out.Y...)
			err := d.Decode(c.in, out)
			if err != nil && !bytes.Equal(before, out.Y) {
				t.Error("failed Decode changed dst")
			}
			if err == nil {
				if !c.mayPass {
					t.Fatalf("no error")
				}
				t.Log("accepted by libvpx")
				d.Lost()
				mustRecover(t, d, key, wantKey, c.name)
				return
			}
			if c.wantErr != nil && !errors.Is(err, c.wantErr) {
				t.Fatalf("err = %v, want %v", err, c.wantErr)
			}
			t.Logf("%v", err)
			mustRecover(t, d, key, wantKey, c.name)
		})
	}
	t.Run("nil image", func(t *testing.T) {
		d := newTestDecoder(t, DecoderConfig{})
		if err := d.Decode(key, nil); !errors.Is(err, ErrNilImage) {
			t.Fatalf("err = %v", err)
		}
		mustRecover(t, d, key, wantKey, "nil image")
	})
	t.Run("closed", func(t *testing.T) {
		d := newTestDecoder(t, DecoderConfig{})
		d.Close()
		if err := d.Decode(key, &Image{}); err != ErrClosed {
			t.Fatalf("err = %v", err)
		}
		d.Close() // idempotent
	})
}

// TestDecoderDamagedFrames truncates every frame at every length and flips
// bits all over it. libvpx may accept some damaged frames (and say so by
// returning a picture); the test requires only that nothing crashes, that
// every error leaves the decoder waiting, and that the next keyframe then
// decodes bit-exactly. It counts how damage was reported.
func TestDecoderDamagedFrames(t *testing.T) {
	s := smallStream(t)
	key := s.frames[0]
	wantKey := referenceDecode(t, s.frames[:1])
	counts := map[string]int{}
	d := newTestDecoder(t, DecoderConfig{})
	out := &Image{}
	try := func(prime bool, frame []byte) {
		if prime {
			if d.NeedKeyframe() {
				if err := d.Decode(key, out); err != nil {
					t.Fatalf("priming keyframe: %v", err)
				}
			}
		}
		err := d.Decode(frame, out)
		var ce *CodecError
		switch {
		case err == nil:
			counts["accepted"]++
			return
		case errors.Is(err, ErrCorrupt):
			counts["corrupt flag"]++
		case errors.As(err, &ce):
			counts["libvpx error"]++
		case errors.Is(err, ErrNeedKeyframe):
			counts["need keyframe"]++
		default:
			counts["header check"]++
		}
		if !d.NeedKeyframe() {
			t.Fatalf("error %v did not make the decoder wait", err)
		}
	}
	stride := 1
	if testing.Short() {
		stride = 7
	}
	for fi, f := range s.frames[:3] {
		prime := fi > 0
		for n := 0; n < len(f); n += stride {
			try(prime, f[:n])
		}
		for i := 0; i < len(f); i += stride {
			for _, bit := range []byte{0x01, 0x80} {
				c := append([]byte(nil), f...)
				c[i] ^= bit
				try(prime, c)
			}
		}
	}
	t.Logf("damaged frames: %v", counts)
	if counts["corrupt flag"]+counts["libvpx error"] == 0 {
		t.Error("libvpx never reported damage: the corrupt-flag path is untested")
	}
	d.Lost()
	mustRecover(t, d, key, wantKey, "after damage")
}

func TestDecoderSizeChange(t *testing.T) {
	a := encodeStream(t, EncoderConfig{Width: 64, Height: 48}, 1, 0)
	b := encodeStream(t, EncoderConfig{Width: 48, Height: 32}, 2, 0)
	d := newTestDecoder(t, DecoderConfig{})
	out := &Image{}
	if err := d.Decode(a.frames[0], out); err != nil {
		t.Fatal(err)
	}
	err := d.Decode(b.frames[0], out)
	var se *SizeError
	if !errors.As(err, &se) || !errors.Is(err, ErrSizeChanged) || se.Width != 48 || se.WantWidth != 64 {
		t.Fatalf("size change: %v", err)
	}
	d2 := newTestDecoder(t, DecoderConfig{AllowSizeChange: true})
	for i, f := range [][]byte{a.frames[0], b.frames[0], b.frames[1]} {
		if err := d2.Decode(f, out); err != nil {
			t.Fatalf("frame %d with AllowSizeChange: %v", i, err)
		}
	}
	if out.Width != 48 || out.Height != 32 {
		t.Errorf("output %dx%d, want 48x32", out.Width, out.Height)
	}
}

// TestDecoderNotShown clears show_frame in an inter frame: libvpx decodes
// it into the references without output, which is not a failure.
func TestDecoderNotShown(t *testing.T) {
	s := smallStream(t)
	d := newTestDecoder(t, DecoderConfig{})
	out := &Image{}
	if err := d.Decode(s.frames[0], out); err != nil {
		t.Fatal(err)
	}
	before := append([]byte(nil), out.Y...)
	hidden := append([]byte(nil), s.frames[1]...)
	hidden[0] &^= 0x10
	if err := d.Decode(hidden, out); err != ErrNotShown {
		t.Fatalf("hidden frame: %v, want ErrNotShown", err)
	}
	if d.NeedKeyframe() {
		t.Error("hidden frame made the decoder wait")
	}
	if !bytes.Equal(before, out.Y) {
		t.Error("hidden frame changed dst")
	}
}

func TestDecoderConfigErrors(t *testing.T) {
	for _, c := range []DecoderConfig{
		{MaxWidth: -1}, {MaxHeight: 20000}, {MaxFrameBytes: -5}, {Threads: 65},
	} {
		if _, err := NewDecoderConfig(c); !errors.Is(err, ErrConfig) {
			t.Errorf("%+v: err = %v, want ErrConfig", c, err)
		}
	}
}

func TestDecodeAllocs(t *testing.T) {
	s := smallStream(t)
	d := newTestDecoder(t, DecoderConfig{})
	out := &Image{}
	if err := d.Decode(s.frames[0], out); err != nil {
		t.Fatal(err)
	}
	i := 1
	allocs := testing.AllocsPerRun(4, func() {
		if err := d.Decode(s.frames[i], out); err != nil {
			t.Fatal(err)
		}
		i++
	})
	if allocs != 0 {
		t.Errorf("Decode allocates %v times per frame", allocs)
	}
}
