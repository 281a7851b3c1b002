package predictor

import (
	"math"
	"testing"
)

// FuzzValidCount checks the exact row-interval count of pixels with a
// source against a per-pixel evaluation, for arbitrary homographies and
// small image sizes. Run: go test ./predictor -run XXX -fuzz FuzzValidCount -fuzztime 30s
func FuzzValidCount(f *testing.F) {
	f.Add(1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.0, 1.0, uint8(20), uint8(10))
	f.Add(0.76, -0.3, 225.7, 0.33, 1.01, -77.0, 3.5e-4, -1.4e-5, 1.0, uint8(80), uint8(64))
	f.Add(1.0, 0.2, -5.0, -0.1, 0.9, 3.0, 0.01, -0.02, 0.5, uint8(33), uint8(17))
	f.Add(1.0, 0.0, 0.0, 0.0, 1.0, 0.0, 0.0, 0.05, -1.0, uint8(40), uint8(40))
	f.Fuzz(func(t *testing.T, a, b, c, d, e, g, h, i, j float64, w8, h8 uint8) {
		m := Homography{{a, b, c}, {d, e, g}, {h, i, j}}
		if !m.IsFinite() {
			return
		}
		for _, row := range m {
			for _, x := range row {
				if math.Abs(x) > 1e6 {
					return
				}
			}
		}
		w, ht := int(w8%64)+1, int(h8%48)+1
		const eps = FillTolerancePx
		for v := 0; v < ht; v++ {
			want := 0
			for u := 0; u < w; u++ {
				fu, fv := float64(u), float64(v)
				X := m[0][0]*fu + (m[0][1]*fv + m[0][2])
				Y := m[1][0]*fu + (m[1][1]*fv + m[1][2])
				W := m[2][0]*fu + (m[2][1]*fv + m[2][2])
				// Same homogeneous conditions as validCount, evaluated per pixel.
				if W > 0 && X+eps*W >= 0 && X <= (float64(w-1)+eps)*W && Y+eps*W >= 0 && Y <= (float64(ht-1)+eps)*W {
					want++
				}
			}
			if got := validCount(m, v, 0, w-1, w, ht); got != want {
				// Rounding can differ between the two groupings of the same
				// sums only when a pixel sits on a boundary within ~1e-9 px.
				if near := boundaryPixel(m, v, w, ht); !near {
					t.Fatalf("row %d of %dx%d, H=%v: interval count %d, per-pixel %d", v, w, ht, m, got, want)
				}
			}
		}
	})
}

// boundaryPixel reports whether any pixel of row v is within 1e-6 (relative)
// of one of the conditions' boundaries, where float rounding may decide.
func boundaryPixel(m Homography, v, w, ht int) bool {
	const eps = FillTolerancePx
	for u := 0; u < w; u++ {
		fu, fv := float64(u), float64(v)
		X := m[0][0]*fu + m[0][1]*fv + m[0][2]
		Y := m[1][0]*fu + m[1][1]*fv + m[1][2]
		W := m[2][0]*fu + m[2][1]*fv + m[2][2]
		s := math.Abs(X) + math.Abs(Y) + math.Abs(W)*float64(w+ht) + 1e-300
		for _, q := range []float64{W, X + eps*W, (float64(w-1)+eps)*W - X, Y + eps*W, (float64(ht-1)+eps)*W - Y} {
			if math.Abs(q) <= 1e-9*s {
				return true
			}
		}
	}
	return false
}
