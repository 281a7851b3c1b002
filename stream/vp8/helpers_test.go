package vp8

import (
	"math"
	"math/rand/v2"
	"testing"
)

// synthBGR fills a packed BGR picture with a pattern that moves with frame
// number i: a diagonal colour gradient shifted 3 px per frame, a
// checkerboard of 16 px squares moving 2 px per frame, and deterministic
// noise of +-noise levels. It is our own test content.
func synthBGR(dst []byte, w, h, i, noise int, seed uint64) {
	rng := rand.New(rand.NewPCG(seed, uint64(i)))
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			gx := (x + 3*i) % (2 * w)
			g := gx * 255 / (2 * w)
			v := (y * 255) / h
			cb := ((x+2*i)/16+(y/16))%2 == 0
			b, gg, r := g, v, (g+v)/2
			if cb {
				r = 255 - r
			}
			if noise > 0 {
				n := int(rng.IntN(2*noise+1)) - noise
				b, gg, r = b+n, gg+n, r+n
			}
			o := (y*w + x) * 3
			dst[o], dst[o+1], dst[o+2] = clampInt(b), clampInt(gg), clampInt(r)
		}
	}
}

func clampInt(v int) byte {
	if v < 0 {
		return 0
	}
	if v > 255 {
		return 255
	}
	return byte(v)
}

// psnrPlane returns the PSNR in dB of plane b against plane a (w x h
// samples), 10 log10(255^2 / MSE); +Inf when they are identical.
func psnrPlane(a []byte, aStride int, b []byte, bStride int, w, h int) float64 {
	var sum float64
	for y := 0; y < h; y++ {
		for x := 0; x < w; x++ {
			d := float64(a[y*aStride+x]) - float64(b[y*bStride+x])
			sum += d * d
		}
	}
	if sum == 0 {
		return math.Inf(1)
	}
	mse := sum / float64(w*h)
	return 10 * math.Log10(255*255/mse)
}

// psnrY is the luma PSNR of b against a.
func psnrY(a, b *Image) float64 {
	return psnrPlane(a.Y, a.YStride, b.Y, b.YStride, a.Width, a.Height)
}

// testStream holds a short encoded sequence and the I420 source pictures.
type testStream struct {
	w, h   int
	src    []*Image
	frames [][]byte
	keys   []bool
}

// encodeStream encodes n synthetic frames at w x h; forceKeyAt lists frame
// indices where ForceKeyframe is called first.
func encodeStream(tb testing.TB, cfg EncoderConfig, n, noise int, forceKeyAt ...int) *testStream {
	tb.Helper()
	enc, err := NewEncoder(cfg)
	if err != nil {
		tb.Fatalf("NewEncoder: %v", err)
	}
	defer enc.Close()
	w, h := cfg.Width, cfg.Height
	s := &testStream{w: w, h: h}
	bgr := make([]byte, w*h*3)
	force := map[int]bool{}
	for _, k := range forceKeyAt {
		force[k] = true
	}
	for i := 0; i < n; i++ {
		synthBGR(bgr, w, h, i, noise, 1)
		img := &Image{}
		if err := BGRToI420(img, bgr, w, h); err != nil {
			tb.Fatal(err)
		}
		if force[i] {
			enc.ForceKeyframe()
		}
		f, key, err := enc.Encode(nil, img, int64(i)*33_333)
		if err != nil {
			tb.Fatalf("Encode frame %d: %v", i, err)
		}
		if len(f) == 0 {
			tb.Fatalf("Encode frame %d: no output", i)
		}
		s.src = append(s.src, img)
		s.frames = append(s.frames, f)
		s.keys = append(s.keys, key)
	}
	return s
}

func newTestDecoder(tb testing.TB, cfg DecoderConfig) *Decoder {
	tb.Helper()
	d, err := NewDecoderConfig(cfg)
	if err != nil {
		tb.Fatalf("NewDecoderConfig: %v", err)
	}
	tb.Cleanup(func() { d.Close() })
	return d
}
