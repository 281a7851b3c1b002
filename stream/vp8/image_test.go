package vp8

import (
	"errors"
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
