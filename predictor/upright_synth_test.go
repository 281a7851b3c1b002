package predictor

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"
)

// TestTopsTableMatchesScan checks topsTable.span against a plain scan of
// every column range, on tops with repeats, signed zeros and NaN, and that
// a change of the tops rebuilds the table.
func TestTopsTableMatchesScan(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, n := range []int{1, 2, 3, 7, 64, 100} {
		tops := make([]float32, n)
		var tb topsTable
		for round := 0; round < 3; round++ {
			for i := range tops {
				switch rng.IntN(10) {
				case 0:
					tops[i] = float32(math.NaN())
				case 1:
					tops[i] = float32(math.Copysign(0, -1))
				case 2:
					tops[i] = 0
				default:
					tops[i] = float32(rng.IntN(50)) - 10
				}
			}
			tb.build(tops)
			for c0 := 0; c0 < n; c0++ {
				lo, hi := tops[c0], tops[c0]
				for c1 := c0; c1 < n; c1++ {
					lo, hi = min(lo, tops[c1]), max(hi, tops[c1])
					glo, ghi := tb.span(c0, c1)
					if !sameTop(glo, lo) || !sameTop(ghi, hi) {
						t.Fatalf("n %d round %d [%d, %d]: span %v %v, scan %v %v", n, round, c0, c1, glo, ghi, lo, hi)
					}
				}
			}
		}
	}
}

// sameTop reports whether a and b are the same value, all NaNs alike (any
// comparison with a NaN top is false, whatever its payload) and -0 apart
// from +0.
func sameTop(a, b float32) bool {
	if a != a || b != b {
		return a != a && b != b
	}
	return math.Float32bits(a) == math.Float32bits(b)
}

// TestValidRowMatchesValidCount checks that counting on a row's validRow
// gives validCount's answer for every sub-range, on random homographies
// (some sending part of the row behind the camera) and the identity.
func TestValidRowMatchesValidCount(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	const w, h = 37, 23
	maps := []Homography{{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}}
	for len(maps) < 200 {
		var m Homography
		for i := range 3 {
			for j := range 3 {
				m[i][j] = rng.NormFloat64()
			}
		}
		m[0][2], m[1][2] = 20*rng.NormFloat64(), 20*rng.NormFloat64()
		m[2][0], m[2][1] = 0.05*m[2][0], 0.05*m[2][1]
		maps = append(maps, m)
	}
	for _, m := range maps {
		for v := 0; v < h; v++ {
			r := newValidRow(m, v, w, h)
			for x0 := 0; x0 < w; x0++ {
				for x1 := x0 - 1; x1 < w; x1++ {
					if got, want := r.count(x0, x1), validCount(m, v, x0, x1, w, h); got != want {
						t.Fatalf("H=%v row %d [%d, %d]: validRow %d, validCount %d", m, v, x0, x1, got, want)
					}
				}
			}
		}
	}
}

// quadSpansPerRow is quadSpans as a plain pass over all four edges on
// every row, the reference of TestQuadSpansMatchesPerRow. It maps the convex source quadrilateral q (pixel coordinates, in
// order around it) with the forward homography hm and writes, for each
// destination row v in the returned range [r0, r1), the columns [lo, hi) of
// pixel centres inside the image quadrilateral, clipped to [0, w) (lo == hi
// when none) into spans[2v], spans[2v+1]. ok is false, writing nothing, if
// a corner maps to infinity or behind the camera (the image would not be a
// bounded convex quadrilateral).
func quadSpansPerRow(hm Homography, q [4][2]float64, w, h int, spans []int32) (r0, r1 int, ok bool) {
	p, ymin, ymax, ok := projectQuad(hm, q)
	if !ok {
		return 0, 0, false
	}
	r0 = int(max(0, math.Ceil(ymin)))
	r1 = int(min(float64(h), math.Floor(ymax)+1))
	for v := r0; v < r1; v++ {
		fv := float64(v)
		lo, hi := math.Inf(1), math.Inf(-1)
		for i := 0; i < 4; i++ {
			a, b := p[i], p[(i+1)%4]
			if (a[1] > fv) == (b[1] > fv) {
				if a[1] == fv {
					lo, hi = min(lo, a[0]), max(hi, a[0])
				}
				continue
			}
			x := a[0] + (fv-a[1])*(b[0]-a[0])/(b[1]-a[1])
			lo, hi = min(lo, x), max(hi, x)
		}
		l, r := int32(0), int32(0)
		if lo <= hi {
			l = int32(max(0, math.Ceil(lo)))
			r = int32(min(float64(w), math.Floor(hi)+1))
			if l > r {
				l = r
			}
		}
		spans[2*v], spans[2*v+1] = l, r
	}
	return r0, max(r0, r1), true
}

// TestQuadSpansMatchesPerRow checks quadSpans, which visits each edge's rows
// only, against the plain pass over all four edges on every row: random
// homographies and quads (some partly or wholly outside the frame, some
// with corners mapped onto whole rows), the same spans to the bit.
func TestQuadSpansMatchesPerRow(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	const w, h = 96, 64
	got, want := make([]int32, 2*h), make([]int32, 2*h)
	xs := make([]float64, 2*h)
	drawn := 0
	for n := 0; n < 3000; n++ {
		hm := Homography{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}}
		if n%3 != 0 {
			for i := range 3 {
				for j := range 3 {
					hm[i][j] += 0.2 * rng.NormFloat64()
				}
			}
			hm[0][2], hm[1][2] = 10*rng.NormFloat64(), 10*rng.NormFloat64()
			hm[2][0], hm[2][1] = 0.002*rng.NormFloat64(), 0.002*rng.NormFloat64()
		}
		// A convex quad: a rectangle, its corners on whole rows every
		// other time, or a trapezoid like a segment's.
		x0, y0 := rng.Float64()*140-20, rng.Float64()*100-20
		x1, y1 := x0+1+rng.Float64()*40, y0+1+rng.Float64()*60
		if n%2 == 0 {
			y0, y1 = math.Round(y0), math.Round(y1)
		}
		q := [4][2]float64{{x0, y0}, {x1, y0}, {x1, y1}, {x0, y1 - rng.Float64()*(y1-y0)/2}}
		for i := range got {
			got[i], want[i] = -7, -7
		}
		gr0, gr1, gok := quadSpans(hm, q, w, h, got, xs)
		wr0, wr1, wok := quadSpansPerRow(hm, q, w, h, want)
		if gr0 != wr0 || gr1 != wr1 || gok != wok || !slices.Equal(got, want) {
			t.Fatalf("H=%v quad %v: rows [%d, %d) ok %v spans %v, per row [%d, %d) ok %v spans %v", hm, q, gr0, gr1, gok, got, wr0, wr1, wok, want)
		}
		for v := gr0; v < gr1; v++ {
			if got[2*v] < got[2*v+1] {
				drawn++
				break
			}
		}
	}
	if drawn < 1000 {
		t.Fatalf("only %d of 3000 quads drew a pixel in the frame", drawn)
	}
}
