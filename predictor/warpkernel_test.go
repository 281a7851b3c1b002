package predictor

import (
	"errors"
	"fmt"
	"image"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"testing"

	"gocv.io/x/gocv"
)

// cvWarp is the reference: cv::warpPerspective, bilinear, BORDER_CONSTANT
// with NeutralGrey, of src with the inverse map inv into a w x h image.
func cvWarp(t testing.TB, src gocv.Mat, inv Homography, w, h int) gocv.Mat {
	t.Helper()
	m := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer m.Close()
	if err := setMat3(&m, inv); err != nil {
		t.Fatal(err)
	}
	dst := gocv.NewMat()
	gocv.WarpPerspectiveWithParams(src, &dst, m, image.Pt(w, h), gocv.InterpolationLinear|gocv.WarpInverseMap, gocv.BorderConstant, neutralFill)
	return dst
}

// paths lists the implementations to test on this CPU.
func paths() []warpPath {
	if bestWarpPath() != warpPathScalar {
		return []warpPath{warpPathScalar, warpPathBest}
	}
	return []warpPath{warpPathScalar}
}

// TestWarpKernelGraf compares the kernel with OpenCV's bilinear
// cv::warpPerspective on the "graf" pair of the Oxford affine-region data set
// shipped by Debian's opencv-doc (examples/data/graf1.png warped by the
// ground-truth homography H1to3p.xml, graf1 pixels -> graf3 pixels). The
// issue's bound: mean absolute difference <= 0.5 and maximum <= 2 grey
// levels per channel over the whole output.
func TestWarpKernelGraf(t *testing.T) {
	hPath := filepath.Join(opencvData, "H1to3p.xml")
	if _, err := os.Stat(hPath); err != nil {
		t.Skipf("opencv-doc example data not installed (%v); install the Debian package opencv-doc", err)
	}
	h, err := openCVMatrixXML(hPath)
	if err != nil {
		t.Fatal(err)
	}
	g1 := gocv.IMRead(filepath.Join(opencvData, "graf1.png"), gocv.IMReadColor)
	defer g1.Close()
	if g1.Empty() {
		t.Fatal("could not read graf1.png")
	}
	w, ht := g1.Cols(), g1.Rows()
	// OpenCV gets the forward map, as a user would call it, and inverts it
	// itself; the kernel gets our inverse.
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	if err := setMat3(&hm, h); err != nil {
		t.Fatal(err)
	}
	ref := gocv.NewMat()
	defer ref.Close()
	gocv.WarpPerspectiveWithParams(g1, &ref, hm, image.Pt(w, ht), gocv.InterpolationLinear, gocv.BorderConstant, neutralFill)
	hi, err := h.Inverse()
	if err != nil {
		t.Fatal(err)
	}
	src, err := matView(&g1)
	if err != nil {
		t.Fatal(err)
	}
	want := bytesOf(t, ref)
	for _, p := range paths() {
		out := bgrView{Pix: make([]byte, w*ht*3), Stride: 3 * w, W: w, H: ht}
		used, err := warpBGR(out, src, hi, 0, 0, NeutralGrey, p)
		if err != nil {
			t.Fatal(err)
		}
		var sum, maxd, exact int
		for i := range want {
			d := int(out.Pix[i]) - int(want[i])
			if d < 0 {
				d = -d
			}
			sum += d
			maxd = max(maxd, d)
			if d == 0 {
				exact++
			}
		}
		mean := float64(sum) / float64(len(want))
		t.Logf("path %d (requested %d): mean abs diff %.4f, max %d, %.3f%% of bytes identical", used, p, mean, maxd, 100*float64(exact)/float64(len(want)))
		if mean > 0.5 || maxd > 2 {
			t.Errorf("path %d: mean abs diff %.4f (want <= 0.5), max %d (want <= 2) against cv::warpPerspective", used, mean, maxd)
		}
	}
}

// refBilinear is an independent Go recomputation of one output pixel from
// fixed-point source coordinates (1/32 px): the bilinear weights of
// cv::warpPerspective's INTER_LINEAR table, taps outside the source = fill.
func refBilinear(src bgrView, ix, iy int, fill byte) [3]byte {
	x0, y0 := int(math.Floor(float64(ix)/32)), int(math.Floor(float64(iy)/32))
	fx, fy := ix-32*x0, iy-32*y0
	var out [3]byte
	for c := 0; c < 3; c++ {
		s := 0
		for k, wt := range [4]int{(32 - fx) * (32 - fy), fx * (32 - fy), (32 - fx) * fy, fx * fy} {
			x, y := x0+k%2, y0+k/2
			v := int(fill)
			if x >= 0 && x < src.W && y >= 0 && y < src.H {
				v = int(src.Pix[y*src.Stride+3*x+c])
			}
			s += wt * v
		}
		out[c] = byte((s + 512) >> 10)
	}
	return out
}

// candidates returns the integers a rounding of c could give when c is
// known to within ±tol.
func candidates(c, tol float64) []int {
	lo, hi := math.RoundToEven(c-tol), math.RoundToEven(c+tol)
	if hi-lo > 3 {
		return nil // too uncertain to judge
	}
	var r []int
	for v := lo; v <= hi; v++ {
		r = append(r, int(v))
	}
	return r
}

// checkWarpAgainstOpenCV warps a random source of size sw x sh (row
// padding srcPad bytes) into the region (col0, row0, dw x dh) of a
// destination (row padding dstPad bytes) with inv, by every path, and
// compares each pixel with cv::warpPerspective of the same region. The
// property: where the source point, recomputed in double with a bound on the
// kernel's float error, rounds to one 1/32 px grid point, kernel and OpenCV
// agree exactly; where the rounding is ambiguous, both must equal the
// bilinear value at one of the candidate grid points. Pixels with W <= 0
// must be fill in the kernel (OpenCV samples a mirrored point there).
func checkWarpAgainstOpenCV(t *testing.T, seed uint64, sw, sh, dw, dh, col0, row0, srcPad, dstPad int, inv Homography) {
	t.Helper()
	rng := rand.New(rand.NewPCG(seed, 11))
	src := bgrView{Stride: 3*sw + srcPad, W: sw, H: sh}
	src.Pix = make([]byte, (sh-1)*src.Stride+3*sw)
	for i := range src.Pix {
		src.Pix[i] = byte(rng.IntN(256))
	}
	packed := make([]byte, 3*sw*sh)
	for y := 0; y < sh; y++ {
		copy(packed[3*sw*y:3*sw*(y+1)], src.Pix[y*src.Stride:])
	}
	sm, err := gocv.NewMatFromBytes(sh, sw, gocv.MatTypeCV8UC3, packed)
	if err != nil {
		t.Fatal(err)
	}
	defer sm.Close()
	ref := cvWarp(t, sm, inv.shiftRows(row0).shiftCols(col0), dw, dh)
	defer ref.Close()
	want := bytesOf(t, ref)
	for _, p := range paths() {
		dst := bgrView{Stride: 3*dw + dstPad, W: dw, H: dh}
		dst.Pix = make([]byte, (dh-1)*dst.Stride+3*dw+dstPad)
		for i := range dst.Pix {
			dst.Pix[i] = 7 // padding must survive
		}
		if _, err := warpBGR(dst, src, inv, col0, row0, NeutralGrey, p); err != nil {
			t.Fatal(err)
		}
		for r := 0; r < dh; r++ {
			for i := 3 * dw; i < dst.Stride && r*dst.Stride+i < len(dst.Pix); i++ {
				if dst.Pix[r*dst.Stride+i] != 7 {
					t.Fatalf("path %d: padding byte %d of row %d overwritten", p, i, r)
				}
			}
			for c := 0; c < dw; c++ {
				got := [3]byte(dst.Pix[r*dst.Stride+3*c:])
				wnt := [3]byte(want[3*(r*dw+c):])
				if err := judgePixel(src, inv, col0, float64(col0+c), float64(row0+r), got, wnt); err != nil {
					t.Fatalf("path %d, %dx%d source (pad %d) -> region (%d,%d) %dx%d (pad %d), pixel (%d, %d), H^-1=%v: %v",
						p, sw, sh, srcPad, col0, row0, dw, dh, dstPad, col0+c, row0+r, inv, err)
				}
			}
		}
	}
}

// judgePixel applies the property of checkWarpAgainstOpenCV to one pixel.
func judgePixel(src bgrView, m Homography, col0 int, u, v float64, got, want [3]byte) error {
	fill := [3]byte{NeutralGrey, NeutralGrey, NeutralGrey}
	X := m[0][0]*u + m[0][1]*v + m[0][2]
	Y := m[1][0]*u + m[1][1]*v + m[1][2]
	W := m[2][0]*u + m[2][1]*v + m[2][2]
	// Error bound of the kernel's double evaluation (row start, one rounded
	// addition per block of 8 columns carried along the row, a step of up to
	// 7 columns, the division) and of OpenCV's own grouping of the same sums,
	// in units of the value: relative 2^-53 per operation, with a safety
	// factor of 4 on top of the count of additions.
	const ulp = 1.0 / (1 << 53)
	mag := func(a, b, c float64) float64 {
		return math.Abs(a*u) + math.Abs(b*v) + math.Abs(c) + 8*math.Abs(a) + math.Abs(a*float64(col0))
	}
	ops := 4 * (4 + math.Abs(u-float64(col0))/8)
	eX, eY, eW := ops*ulp*mag(m[0][0], m[0][1], m[0][2]), ops*ulp*mag(m[1][0], m[1][1], m[1][2]), ops*ulp*mag(m[2][0], m[2][1], m[2][2])
	if math.Abs(W) <= 2*eW {
		return nil // sign of W not decidable at float precision
	}
	if W < 0 {
		if got != fill {
			return fmt.Errorf("behind the source camera (W=%g): got %v, want fill", W, got)
		}
		return nil
	}
	cx, cy := 32*X/W, 32*Y/W
	if math.Abs(cx) > 1e7 || math.Abs(cy) > 1e7 {
		// Far outside: both must be fill (OpenCV saturates the coordinate).
		if got != fill {
			return fmt.Errorf("source point (%g, %g) px far outside: got %v, want fill", cx/32, cy/32, got)
		}
		return nil
	}
	tx := 32*(eX+math.Abs(X/W)*eW)/(W-eW) + 1e-6
	ty := 32*(eY+math.Abs(Y/W)*eW)/(W-eW) + 1e-6
	xs, ys := candidates(cx, tx), candidates(cy, ty)
	if xs == nil || ys == nil {
		return nil
	}
	if len(xs) == 1 && len(ys) == 1 {
		if got != want {
			return fmt.Errorf("source point (%.5f, %.5f): got %v, OpenCV %v", cx/32, cy/32, got, want)
		}
		return nil
	}
	okGot, okWant := false, false
	for _, ix := range xs {
		for _, iy := range ys {
			r := refBilinear(src, ix, iy, NeutralGrey)
			okGot = okGot || r == got
			okWant = okWant || r == want
		}
	}
	if !okGot || !okWant {
		return fmt.Errorf("source point (%.5f, %.5f) on a rounding boundary: got %v (ok %v), OpenCV %v (ok %v)", cx/32, cy/32, got, okGot, want, okWant)
	}
	return nil
}

// randomInverse returns a random inverse map for a dw x dh destination and
// sw x sh source: near-identity scale and shear, a shift of up to half the
// source, and perspective terms strong enough that W changes sign in some
// draws.
func randomInverse(rng *rand.Rand, sw, sh, dw, dh int) Homography {
	u := func(a, b float64) float64 { return a + (b-a)*rng.Float64() }
	return Homography{
		{u(0.4, 1.8), u(-0.4, 0.4), u(-0.5, 0.5) * float64(sw)},
		{u(-0.4, 0.4), u(0.4, 1.8), u(-0.5, 0.5) * float64(sh)},
		{u(-1.5, 1.5) / float64(dw), u(-1.5, 1.5) / float64(dh), u(0.6, 1.4)},
	}
}

// TestWarpKernelMatchesOpenCV runs the property of checkWarpAgainstOpenCV
// over named cases and seeded random ones.
func TestWarpKernelMatchesOpenCV(t *testing.T) {
	for _, tc := range []struct {
		name                               string
		sw, sh, dw, dh, col0, row0, sp, dp int
		inv                                Homography
	}{
		{"identity", 64, 48, 64, 48, 0, 0, 0, 0, IdentityHomography()},
		{"half-pixel shift", 33, 17, 33, 17, 0, 0, 5, 3, Homography{{1, 0, 0.5}, {0, 1, -0.5}, {0, 0, 1}}},
		{"tiny source", 1, 1, 9, 5, 0, 0, 0, 1, Homography{{0.1, 0, -0.3}, {0, 0.1, -0.2}, {0, 0, 1}}},
		{"two-column source", 2, 7, 13, 9, 0, 0, 1, 0, Homography{{0.2, 0.01, -0.4}, {0, 0.9, -1}, {0, 0, 1}}},
		{"region of a larger image", 80, 60, 21, 11, 17, 23, 9, 2, Homography{{0.9, 0.1, 3}, {-0.05, 1.1, -4}, {1e-4, 2e-4, 1}}},
		{"horizon (W changes sign)", 64, 48, 64, 48, 0, 0, 0, 0, Homography{{1, 0, 0}, {0, 1, 0}, {0.001, 0.04, -1}}},
		{"zoom out", 120, 90, 31, 23, 0, 0, 0, 0, Homography{{3.9, 0, 0}, {0, 3.9, 0}, {0, 0, 1}}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			checkWarpAgainstOpenCV(t, 1, tc.sw, tc.sh, tc.dw, tc.dh, tc.col0, tc.row0, tc.sp, tc.dp, tc.inv)
		})
	}
	rng := rand.New(rand.NewPCG(5, 5))
	for i := 0; i < 40; i++ {
		sw, sh := 1+rng.IntN(90), 1+rng.IntN(70)
		dw, dh := 1+rng.IntN(90), 1+rng.IntN(70)
		col0, row0 := rng.IntN(20)-5, rng.IntN(20)-5
		inv := randomInverse(rng, sw, sh, max(1, dw+col0), max(1, dh+row0))
		t.Run(fmt.Sprint("random ", i), func(t *testing.T) {
			checkWarpAgainstOpenCV(t, uint64(i), sw, sh, dw, dh, col0, row0, rng.IntN(8), rng.IntN(8), inv)
		})
	}
}

// FuzzWarpKernel: random homographies, sizes, regions and strides against
// OpenCV with the property of checkWarpAgainstOpenCV.
// Run: go test ./predictor -run '^$' -fuzz FuzzWarpKernel -fuzztime 60s
func FuzzWarpKernel(f *testing.F) {
	f.Add(uint64(1), uint8(64), uint8(48), uint8(64), uint8(48), int8(0), int8(0), uint8(0), uint8(0))
	f.Add(uint64(2), uint8(3), uint8(2), uint8(40), uint8(9), int8(-3), int8(5), uint8(7), uint8(1))
	f.Add(uint64(3), uint8(200), uint8(120), uint8(17), uint8(100), int8(50), int8(-20), uint8(2), uint8(5))
	f.Fuzz(func(t *testing.T, seed uint64, sw8, sh8, dw8, dh8 uint8, c8, r8 int8, sp8, dp8 uint8) {
		sw, sh := int(sw8)+1, int(sh8%160)+1
		dw, dh := int(dw8)+1, int(dh8%160)+1
		col0, row0 := int(c8), int(r8)
		rng := rand.New(rand.NewPCG(seed, 3))
		inv := randomInverse(rng, sw, sh, max(1, dw+col0), max(1, dh+row0))
		checkWarpAgainstOpenCV(t, seed, sw, sh, dw, dh, col0, row0, int(sp8%16), int(dp8%16), inv)
	})
}

// TestWarpKernelSpans: a warp restricted to row spans writes exactly the
// span pixels, with the bytes of the whole-row warp, and leaves the rest.
func TestWarpKernelSpans(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 9))
	const sw, sh, dw, dh = 97, 61, 83, 47
	src := bgrView{Pix: make([]byte, 3*sw*sh), Stride: 3 * sw, W: sw, H: sh}
	for i := range src.Pix {
		src.Pix[i] = byte(rng.IntN(256))
	}
	for _, p := range paths() {
		for trial := 0; trial < 5; trial++ {
			inv := randomInverse(rng, sw, sh, dw, dh)
			full := bgrView{Pix: make([]byte, 3*dw*dh), Stride: 3 * dw, W: dw, H: dh}
			if _, err := warpBGR(full, src, inv, 3, 2, NeutralGrey, p); err != nil {
				t.Fatal(err)
			}
			part := bgrView{Pix: make([]byte, 3*dw*dh), Stride: 3 * dw, W: dw, H: dh}
			for i := range part.Pix {
				part.Pix[i] = 1
			}
			// Up to three intervals per row, possibly empty, reversed,
			// overlapping or outside the row.
			rowptr := []int32{0}
			var spans []int32
			for r := 0; r < dh; r++ {
				for n := rng.IntN(4); n > 0; n-- {
					spans = append(spans, int32(rng.IntN(dw+20)-10), int32(rng.IntN(dw+20)-10))
				}
				rowptr = append(rowptr, int32(len(spans)/2))
			}
			if _, err := warpBGRSpans(part, src, inv, 3, 2, rowptr, spans, NeutralGrey, p); err != nil {
				t.Fatal(err)
			}
			for r := 0; r < dh; r++ {
				for c := 0; c < dw; c++ {
					in := false
					for i := rowptr[r]; i < rowptr[r+1]; i++ {
						in = in || c >= int(spans[2*i]) && c < int(spans[2*i+1])
					}
					got := [3]byte(part.Pix[r*part.Stride+3*c:])
					want := [3]byte{1, 1, 1}
					if in {
						want = [3]byte(full.Pix[r*full.Stride+3*c:])
					}
					if got != want {
						t.Fatalf("path %d trial %d: pixel (%d, %d), spans %v: got %v, want %v", p, trial, c, r, spans[2*rowptr[r]:2*rowptr[r+1]], got, want)
					}
				}
			}
		}
	}
	for _, rp := range [][]int32{{0, 1, 2}, {0, 2, 1, 2}, {-1, 1, 1, 2}, {0, 1, 2, 3}} {
		if _, err := warpBGRSpans(bgrView{Pix: make([]byte, 9), Stride: 3, W: 1, H: 3}, src, IdentityHomography(), 0, 0, rp, make([]int32, 4), 0, warpPathBest); !errors.Is(err, ErrInvalidConfig) {
			t.Errorf("span index %v: got %v, want ErrInvalidConfig", rp, err)
		}
	}
}
