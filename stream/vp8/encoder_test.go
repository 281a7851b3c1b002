package vp8

import (
	"errors"
	"testing"
)

func TestEncoderConfigErrors(t *testing.T) {
	cases := []struct {
		name string
		cfg  EncoderConfig
	}{
		{"no size", EncoderConfig{}},
		{"too wide", EncoderConfig{Width: 16384, Height: 16}},
		{"bitrate", EncoderConfig{Width: 16, Height: 16, BitrateBps: 10}},
		{"frame rate", EncoderConfig{Width: 16, Height: 16, FrameRateHz: -1}},
		{"keyframe interval", EncoderConfig{Width: 16, Height: 16, KeyframeInterval: -1}},
		{"cpu used", EncoderConfig{Width: 16, Height: 16, CPUUsed: 17}},
		{"threads", EncoderConfig{Width: 16, Height: 16, Threads: -2}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			e, err := NewEncoder(c.cfg)
			if !errors.Is(err, ErrConfig) {
				if e != nil {
					e.Close()
				}
				t.Fatalf("err = %v, want ErrConfig", err)
			}
		})
	}
}

func TestEncoderInputErrors(t *testing.T) {
	e, err := NewEncoder(EncoderConfig{Width: 32, Height: 24})
	if err != nil {
		t.Fatal(err)
	}
	defer e.Close()
	good, _ := NewImage(32, 24)
	other, _ := NewImage(24, 32)
	if _, _, err := e.Encode(nil, other, 0); !errors.Is(err, ErrImageSize) {
		t.Errorf("wrong size: %v", err)
	}
	if _, _, err := e.Encode(nil, nil, 0); !errors.Is(err, ErrNilImage) {
		t.Errorf("nil image: %v", err)
	}
	if _, _, err := e.EncodeBGR(nil, make([]byte, 10), 0); !errors.Is(err, ErrImageSize) {
		t.Errorf("short BGR: %v", err)
	}
	if _, _, err := e.Encode(nil, good, 1000); err != nil {
		t.Fatal(err)
	}
	if _, _, err := e.Encode(nil, good, 1000); !errors.Is(err, ErrTimestamp) {
		t.Errorf("repeated pts: %v", err)
	}
	if _, key, err := e.Encode(nil, good, 1500); err != nil || key {
		t.Errorf("pts 0.5 ms later: key=%v err=%v", key, err)
	}
	if err := e.SetBitrate(5); !errors.Is(err, ErrConfig) {
		t.Errorf("SetBitrate(5): %v", err)
	}
	if err := e.SetBitrate(300_000); err != nil {
		t.Errorf("SetBitrate: %v", err)
	}
	e.Close()
	if _, _, err := e.Encode(nil, good, 9000); err != ErrClosed {
		t.Errorf("after Close: %v", err)
	}
	if err := e.SetBitrate(300_000); err != ErrClosed {
		t.Errorf("SetBitrate after Close: %v", err)
	}
}

// TestEncodeBGRMatchesEncode: the BGR path converts into the encoder's own
// buffer; it must give the same bytes as converting first.
func TestEncodeBGRMatchesEncode(t *testing.T) {
	const w, h = 48, 32
	a, err := NewEncoder(EncoderConfig{Width: w, Height: h})
	if err != nil {
		t.Fatal(err)
	}
	defer a.Close()
	b, err := NewEncoder(EncoderConfig{Width: w, Height: h})
	if err != nil {
		t.Fatal(err)
	}
	defer b.Close()
	bgr := make([]byte, w*h*3)
	var img Image
	var fa, fb []byte
	for i := 0; i < 5; i++ {
		synthBGR(bgr, w, h, i, 3, 2)
		if err := BGRToI420(&img, bgr, w, h); err != nil {
			t.Fatal(err)
		}
		pts := int64(i) * 33_333
		if fa, _, err = a.EncodeBGR(fa, bgr, pts); err != nil {
			t.Fatal(err)
		}
		if fb, _, err = b.Encode(fb, &img, pts); err != nil {
			t.Fatal(err)
		}
		if string(fa) != string(fb) {
			t.Fatalf("frame %d: EncodeBGR and Encode differ", i)
		}
	}
}

// TestEncodeOneInOneOut: every picture gives exactly one frame, at once.
func TestEncodeOneInOneOut(t *testing.T) {
	s := encodeStream(t, EncoderConfig{Width: 64, Height: 48, BitrateBps: 50_000}, 30, 8)
	if len(s.frames) != 30 {
		t.Fatalf("%d frames out for 30 in", len(s.frames))
	}
}

// TestNoCLeak creates, uses and closes codecs many times and checks that the
// C heap (glibc mallinfo2) does not grow: Close must free what libvpx and
// the wrapper allocated.
func TestNoCLeak(t *testing.T) {
	s := smallStream(t)
	cycle := func() {
		d, err := NewDecoder()
		if err != nil {
			t.Fatal(err)
		}
		out := &Image{}
		for _, f := range s.frames[:3] {
			_ = d.Decode(f, out)
		}
		_ = d.Decode(s.frames[0][:20], out) // error path: context reset pending
		_ = d.Decode(s.frames[0], out)      // reset + decode
		d.Close()
		e, err := NewEncoder(EncoderConfig{Width: 64, Height: 48})
		if err != nil {
			t.Fatal(err)
		}
		_, _, _ = e.Encode(nil, s.src[0], 0)
		e.Close()
	}
	for i := 0; i < 5; i++ { // warm up allocator caches
		cycle()
	}
	before := cMallocInUse()
	const n = 60
	for i := 0; i < n; i++ {
		cycle()
	}
	grew := cMallocInUse() - before
	t.Logf("C heap in use changed by %d bytes over %d cycles", grew, n)
	// One leaked decoder or encoder at 64x48 is well over 100 kB (frame
	// buffers with borders), so 60 cycles leaking anything would show as
	// megabytes; allow 256 kB of allocator noise.
	if grew > 256<<10 {
		t.Errorf("C heap grew by %d bytes over %d codec lifetimes: leak", grew, n)
	}
}

// TestConcurrentControl calls ForceKeyframe, SetBitrate, Lost and
// NeedKeyframe from other goroutines while frames flow, as the relay's RTCP
// reader does; run with -race.
func TestConcurrentControl(t *testing.T) {
	s := smallStream(t)
	e, err := NewEncoder(EncoderConfig{Width: 64, Height: 48})
	if err != nil {
		t.Fatal(err)
	}
	defer e.Close()
	d := newTestDecoder(t, DecoderConfig{})
	done := make(chan struct{})
	go func() {
		defer close(done)
		for i := 0; i < 20; i++ {
			e.ForceKeyframe()
			_ = e.SetBitrate(100_000 + i*1000)
			d.Lost()
			_ = d.NeedKeyframe()
			_ = e.Config()
		}
	}()
	out := &Image{}
	var buf []byte
	for i := 0; i < 20; i++ {
		var err error
		if buf, _, err = e.Encode(buf, s.src[i%len(s.src)], int64(i)*33_333); err != nil {
			t.Fatal(err)
		}
		if err := d.Decode(buf, out); err != nil && err != ErrNeedKeyframe {
			t.Fatal(err)
		}
	}
	<-done
}

// TestSetBitrateTakesEffect: after lowering the target tenfold, frames must
// get clearly smaller (CBR follows the target within a second or so).
func TestSetBitrateTakesEffect(t *testing.T) {
	const w, h = 160, 120
	e, err := NewEncoder(EncoderConfig{Width: w, Height: h, BitrateBps: 1_000_000, KeyframeInterval: 1000})
	if err != nil {
		t.Fatal(err)
	}
	defer e.Close()
	bgr := make([]byte, w*h*3)
	sizes := func(from, n int) int {
		total := 0
		for i := from; i < from+n; i++ {
			synthBGR(bgr, w, h, i, 8, 5)
			f, _, err := e.EncodeBGR(nil, bgr, int64(i)*33_333)
			if err != nil {
				t.Fatal(err)
			}
			if i >= from+n/2 { // second half: rate control has settled
				total += len(f)
			}
		}
		return total
	}
	high := sizes(0, 60)
	if err := e.SetBitrate(100_000); err != nil {
		t.Fatal(err)
	}
	low := sizes(60, 60)
	t.Logf("bytes over 30 frames: %d at 1 Mbit/s, %d at 100 kbit/s", high, low)
	if low*3 > high {
		t.Errorf("SetBitrate(100k) left frames at %d bytes vs %d before: no clear drop", low, high)
	}
}
