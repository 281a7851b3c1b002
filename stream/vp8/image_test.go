package vp8

import (
	"bytes"
	"errors"
	"fmt"
	"math/rand/v2"
	"testing"
)

// TestBGRToI420Values checks single-colour pictures against the BT.601
// limited-range equations (ITU-R BT.601-7 clause 2.5.3, from memory),
// worked by hand: red (R=255): Y = 16 + 65.481 = 81.48 -> 81,
// Cb = 128 - 37.797 = 90.2 -> 90, Cr = 128 + 112 = 240. These are also the
// usual 100 % colour-bar values (from memory).
func TestBGRToI420Values(t *testing.T) {
	cases := []struct {
		name    string
		b, g, r byte
		y, u, v byte
	}{
		{"black", 0, 0, 0, 16, 128, 128},
		{"white", 255, 255, 255, 235, 128, 128},
		{"red", 0, 0, 255, 81, 90, 240},        // 16+65.481; 128-37.797; 128+112
		{"green", 0, 255, 0, 145, 54, 34},      // 16+128.553; 128-74.203; 128-93.786
		{"blue", 255, 0, 0, 41, 240, 110},      // 16+24.966; 128+112; 128-18.214
		{"grey", 128, 128, 128, 126, 128, 128}, // 16 + 219*128/255 = 125.9
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			const w, h = 5, 3 // odd sizes exercise the edge blocks
			bgr := make([]byte, w*h*3)
			for i := 0; i < w*h; i++ {
				bgr[3*i], bgr[3*i+1], bgr[3*i+2] = c.b, c.g, c.r
			}
			var m Image
			if err := BGRToI420(&m, bgr, w, h); err != nil {
				t.Fatal(err)
			}
			for i, y := range m.Y {
				if y != c.y {
					t.Fatalf("Y[%d] = %d, want %d", i, y, c.y)
				}
			}
			for i := range m.U {
				if m.U[i] != c.u || m.V[i] != c.v {
					t.Fatalf("U,V[%d] = %d,%d, want %d,%d", i, m.U[i], m.V[i], c.u, c.v)
				}
			}
			out := make([]byte, w*h*3)
			if err := I420ToBGR(out, &m); err != nil {
				t.Fatal(err)
			}
			for i := 0; i < w*h*3; i += 3 {
				if absDiff(out[i], c.b) > 1 || absDiff(out[i+1], c.g) > 1 || absDiff(out[i+2], c.r) > 1 {
					t.Fatalf("round trip pixel %d = %v, want %d %d %d", i/3, out[i:i+3], c.b, c.g, c.r)
				}
			}
		})
	}
}

func absDiff(a, b byte) int {
	if a > b {
		return int(a - b)
	}
	return int(b - a)
}

// TestI420ToBGRRoundTrip: on smooth content the only loss is 8-bit rounding
// and 2x2 chroma averaging, so the BGR PSNR must stay high.
func TestI420ToBGRRoundTrip(t *testing.T) {
	const w, h = 64, 48
	bgr := make([]byte, w*h*3)
	synthBGR(bgr, w, h, 0, 0, 1)
	var m Image
	if err := BGRToI420(&m, bgr, w, h); err != nil {
		t.Fatal(err)
	}
	out := make([]byte, w*h*3)
	if err := I420ToBGR(out, &m); err != nil {
		t.Fatal(err)
	}
	p := psnrPlane(bgr, w*3, out, w*3, w*3, h)
	// The checkerboard edges put sharp colour changes inside some 2x2
	// blocks, which 4:2:0 cannot keep. Measured 43.2 dB; floor 38 dB.
	if p < 38 {
		t.Errorf("BGR round trip PSNR %.1f dB, want >= 38", p)
	}
	t.Logf("BGR->I420->BGR PSNR %.1f dB", p)
}

func TestImageErrors(t *testing.T) {
	var m Image
	if err := BGRToI420(&m, make([]byte, 10), 4, 4); !errors.Is(err, ErrImageSize) {
		t.Errorf("short BGR: %v", err)
	}
	if err := BGRToI420(nil, make([]byte, 48), 4, 4); !errors.Is(err, ErrNilImage) {
		t.Errorf("nil dst: %v", err)
	}
	if err := BGRToI420(&m, nil, 0, 4); !errors.Is(err, ErrImageSize) {
		t.Errorf("zero width: %v", err)
	}
	if err := I420ToBGR(make([]byte, 10), &Image{Width: 4, Height: 4, YStride: 4, UVStride: 2, Y: make([]byte, 16), U: make([]byte, 4), V: make([]byte, 4)}); !errors.Is(err, ErrImageSize) {
		t.Errorf("short BGR out: %v", err)
	}
	if err := I420ToBGR(make([]byte, 48), &Image{Width: 4, Height: 4, YStride: 4, UVStride: 2, Y: make([]byte, 15), U: make([]byte, 4), V: make([]byte, 4)}); !errors.Is(err, ErrImageSize) {
		t.Errorf("short Y plane: %v", err)
	}
	if err := I420ToBGR(make([]byte, 48), nil); !errors.Is(err, ErrNilImage) {
		t.Errorf("nil src: %v", err)
	}
	if _, err := NewImage(0, 1); !errors.Is(err, ErrImageSize) {
		t.Errorf("NewImage(0,1): %v", err)
	}
}

func TestImageResizeReuses(t *testing.T) {
	m, err := NewImage(33, 17)
	if err != nil {
		t.Fatal(err)
	}
	if m.ChromaWidth() != 17 || m.ChromaHeight() != 9 || len(m.U) != 17*9 {
		t.Fatalf("chroma %dx%d len %d", m.ChromaWidth(), m.ChromaHeight(), len(m.U))
	}
	y := &m.Y[0]
	if allocs := testing.AllocsPerRun(10, func() { _ = m.Resize(33, 17) }); allocs != 0 {
		t.Errorf("Resize to same size allocates %v times", allocs)
	}
	if &m.Y[0] != y {
		t.Error("Resize to same size replaced the Y plane")
	}
}

// refBGRToI420 and refI420ToBGR are the plain per-pixel forms of the
// conversion formulas, to check the optimised loops against.
func refBGRToI420(m *Image, bgr []byte) {
	w, h := m.Width, m.Height
	for cy := 0; cy < m.ChromaHeight(); cy++ {
		for cx := 0; cx < m.ChromaWidth(); cx++ {
			var sb, sg, sr, n int32
			for dy := 0; dy < 2; dy++ {
				for dx := 0; dx < 2; dx++ {
					x, y := 2*cx+dx, 2*cy+dy
					if x >= w || y >= h {
						continue
					}
					i := (y*w + x) * 3
					b, g, r := int32(bgr[i]), int32(bgr[i+1]), int32(bgr[i+2])
					m.Y[y*m.YStride+x] = uint8((yR*r + yG*g + yB*b + 16<<fixShift + fixHalf) >> fixShift)
					sb, sg, sr, n = sb+b, sg+g, sr+r, n+1
				}
			}
			m.U[cy*m.UVStride+cx] = uint8(divRound(uR*sr+uG*sg+uB*sb, n<<fixShift) + 128)
			m.V[cy*m.UVStride+cx] = uint8(divRound(vR*sr+vG*sg+vB*sb, n<<fixShift) + 128)
		}
	}
}

// divRound returns num/den rounded to nearest, halves away from zero (den > 0).
func divRound(num, den int32) int32 {
	if num >= 0 {
		return (num + den/2) / den
	}
	return -((-num + den/2) / den)
}

// clamp8 clamps v to 0..255.
func clamp8(v int32) uint8 { return uint8(min(max(v, 0), 255)) }

func refI420ToBGR(out []byte, m *Image) {
	for y := 0; y < m.Height; y++ {
		for x := 0; x < m.Width; x++ {
			c := (int32(m.Y[y*m.YStride+x]) - 16) * cY
			d := int32(m.U[y/2*m.UVStride+x/2]) - 128
			e := int32(m.V[y/2*m.UVStride+x/2]) - 128
			i := (y*m.Width + x) * 3
			out[i] = clamp8((c + cbU*d + fixHalf) >> fixShift)
			out[i+1] = clamp8((c - cgU*d - cgV*e + fixHalf) >> fixShift)
			out[i+2] = clamp8((c + crV*e + fixHalf) >> fixShift)
		}
	}
}

// TestConversionsMatchReference checks every build of the C conversions
// (baseline, and AVX2 where the CPU has it) against the per-pixel
// reference, bit for bit.
func TestConversionsMatchReference(t *testing.T) {
	builds, selectBuild := convertBuilds()
	defer selectBuild("")
	for _, build := range builds {
		t.Run(build, func(t *testing.T) {
			selectBuild(build)
			testConversionsMatchReference(t)
		})
	}
}

func testConversionsMatchReference(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	for _, sz := range [][2]int{{1, 1}, {2, 2}, {3, 1}, {1, 3}, {5, 3}, {16, 9}, {17, 11}, {1280, 720}, {641, 361}} {
		w, h := sz[0], sz[1]
		t.Run(fmt.Sprintf("%dx%d", w, h), func(t *testing.T) {
			bgr := make([]byte, w*h*3)
			for i := range bgr {
				bgr[i] = byte(rng.Uint32())
			}
			var got Image
			if err := BGRToI420(&got, bgr, w, h); err != nil {
				t.Fatal(err)
			}
			want, _ := NewImage(w, h)
			refBGRToI420(want, bgr)
			if !bytes.Equal(got.Y, want.Y) || !bytes.Equal(got.U, want.U) || !bytes.Equal(got.V, want.V) {
				t.Fatal("BGRToI420 differs from the reference")
			}
			// Random planes (including values outside studio range) for
			// the inverse, so clamping is exercised.
			for i := range got.Y {
				got.Y[i] = byte(rng.Uint32())
			}
			for i := range got.U {
				got.U[i], got.V[i] = byte(rng.Uint32()), byte(rng.Uint32())
			}
			a, b := make([]byte, w*h*3), make([]byte, w*h*3)
			if err := I420ToBGR(a, &got); err != nil {
				t.Fatal(err)
			}
			refI420ToBGR(b, &got)
			if !bytes.Equal(a, b) {
				t.Fatal("I420ToBGR differs from the reference")
			}
			// Planes with padding between rows (a decoder's or the
			// encoder's buffers): the same pixels both ways.
			pad := padded(&got, 7, 5)
			if err := I420ToBGR(a, pad); err != nil {
				t.Fatal(err)
			}
			if !bytes.Equal(a, b) {
				t.Fatal("I420ToBGR of padded planes differs from the reference")
			}
			bgrToI420(pad, bgr)
			refBGRToI420(want, bgr)
			if !samePixels(pad, want) {
				t.Fatal("BGR to padded planes differs from the reference")
			}
		})
	}
}

// padded returns a copy of m whose rows are ypad (Y) and uvpad (U, V) bytes
// longer than the picture, the padding filled with 0xAA.
func padded(m *Image, ypad, uvpad int) *Image {
	cw, ch := m.ChromaWidth(), m.ChromaHeight()
	p := &Image{Width: m.Width, Height: m.Height, YStride: m.Width + ypad, UVStride: cw + uvpad}
	p.Y = bytes.Repeat([]byte{0xAA}, p.YStride*m.Height)
	p.U = bytes.Repeat([]byte{0xAA}, p.UVStride*ch)
	p.V = bytes.Repeat([]byte{0xAA}, p.UVStride*ch)
	for y := range m.Height {
		copy(p.Y[y*p.YStride:], m.Y[y*m.YStride:y*m.YStride+m.Width])
	}
	for y := range ch {
		copy(p.U[y*p.UVStride:], m.U[y*m.UVStride:y*m.UVStride+cw])
		copy(p.V[y*p.UVStride:], m.V[y*m.UVStride:y*m.UVStride+cw])
	}
	return p
}

// samePixels reports whether a and b hold the same picture, whatever their
// strides, and a's row padding is untouched (0xAA).
func samePixels(a, b *Image) bool {
	cw, ch := a.ChromaWidth(), a.ChromaHeight()
	for y := range a.Height {
		r := a.Y[y*a.YStride : (y+1)*a.YStride]
		if !bytes.Equal(r[:a.Width], b.Y[y*b.YStride:y*b.YStride+b.Width]) || bytes.Count(r[a.Width:], []byte{0xAA}) != a.YStride-a.Width {
			return false
		}
	}
	for y := range ch {
		for _, pl := range [][2][]byte{{a.U, b.U}, {a.V, b.V}} {
			r := pl[0][y*a.UVStride : (y+1)*a.UVStride]
			if !bytes.Equal(r[:cw], pl[1][y*b.UVStride:y*b.UVStride+cw]) || bytes.Count(r[cw:], []byte{0xAA}) != a.UVStride-cw {
				return false
			}
		}
	}
	return true
}
