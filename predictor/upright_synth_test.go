package predictor

import (
	"math"
	"math/rand/v2"
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
