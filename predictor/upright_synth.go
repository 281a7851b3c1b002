package predictor

import (
	"fmt"
	"math"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// Span kinds of the composited output, for the exact unfilled count.
const (
	spanHidden = -1 // disoccluded: hidden behind an upright segment in the source
	// 0.. index of an upright segment in draw order
)

// uprightScratch holds the per-frame buffers of SynthesizeScene, owned by
// the Synthesizer and sized once for the camera.
type uprightScratch struct {
	spans []int32    // 2 per row
	rows  [][]cspan  // per row: painted spans in order
	inv   []Homography
	order []UprightSegment
}

// cspan is one painted column interval [lo, hi) of a row and what painted it.
type cspan struct {
	lo, hi int32
	kind   int32
}

// SynthesizeScene is SynthesizeFar with the held frame's upright structure:
// after the road and far warp, every pixel whose source point (under those
// maps) lies on an upright segment of src is marked NeutralGrey (the scene
// behind it was hidden and is not invented), then each segment is warped
// with its own plane's homography over its image, farther segments first
// (nearer ones win). Unfilled pixels (no source, or disoccluded and not
// covered) are counted exactly per painted interval.
//
// model may be nil or empty (then this is SynthesizeFar). dst is owned by
// the caller (see Warp). The per-frame path does not allocate once the
// Synthesizer has seen as many segments.
func (s *Synthesizer) SynthesizeScene(src gocv.Mat, m filter.Motion, farDepthM float64, model *UprightModel, dst *gocv.Mat) (Synthesis, error) {
	out, err := s.SynthesizeFar(src, m, farDepthM, dst)
	if err != nil || model == nil || len(model.Segments) == 0 {
		return out, err
	}
	if s.undistort {
		src = s.undist
	}
	sv, err := matView(&src)
	if err != nil {
		return out, fmt.Errorf("source frame: %w", err)
	}
	dv, err := matView(dst)
	if err != nil {
		return out, fmt.Errorf("destination: %w", err)
	}
	c := s.cam
	w, h := c.Width, c.Height
	sc := &s.up
	if len(sc.spans) != 2*h {
		sc.spans = make([]int32, 2*h)
		sc.rows = make([][]cspan, h)
	}
	for v := range sc.rows {
		sc.rows[v] = sc.rows[v][:0]
	}
	sc.order = append(sc.order[:0], model.Segments...)
	sortFarToNear(sc.order)
	sc.inv = sc.inv[:0]

	g := out.Ground
	f := out.Far
	hz := s.horizon
	// 1. Disocclusion: the background's image of each segment's source quad
	// (split at the horizon: road map below, far map above) turns grey.
	for _, seg := range sc.order {
		x0, x1 := float64(seg.Col0)-0.5, float64(seg.Col1)-0.5
		r0, _ := hz.RowAt(x0)
		r1, _ := hz.RowAt(x1)
		split := math.Max(math.Max(r0, r1)+1, seg.TopRow)
		above := [4][2]float64{{x0, seg.TopRow}, {x1, seg.TopRow}, {x1, split}, {x0, split}}
		below := [4][2]float64{{x0, split}, {x1, split}, {x1, seg.BaseRow1}, {x0, seg.BaseRow0}}
		for _, q := range []struct {
			quad [4][2]float64
			hm   Homography
		}{{above, f}, {below, g}} {
			if q.quad[3][1] <= q.quad[0][1] && q.quad[2][1] <= q.quad[1][1] {
				continue
			}
			if !quadSpans(q.hm, q.quad, w, h, sc.spans) {
				continue
			}
			for v := 0; v < h; v++ {
				lo, hi := sc.spans[2*v], sc.spans[2*v+1]
				if lo >= hi {
					continue
				}
				row := dv.Pix[v*dv.Stride:]
				for j := 3 * int(lo); j < 3*int(hi); j++ {
					row[j] = NeutralGrey
				}
				sc.rows[v] = append(sc.rows[v], cspan{lo, hi, spanHidden})
			}
		}
	}
	// 2. Segments, far to near, each with its plane's homography.
	for i, seg := range sc.order {
		hf := c.PlaneHomography(m.DxM, m.DyM, m.DyawRad, seg.Plane)
		inv, err := hf.Inverse()
		sc.inv = append(sc.inv, inv)
		if err != nil || !hf.IsFinite() {
			continue
		}
		x0, x1 := float64(seg.Col0)-0.5, float64(seg.Col1)-0.5
		quad := [4][2]float64{{x0, seg.TopRow}, {x1, seg.TopRow}, {x1, seg.BaseRow1}, {x0, seg.BaseRow0}}
		if !quadSpans(hf, quad, w, h, sc.spans) {
			continue
		}
		if _, err := warpBGRSpans(dv, sv, inv, 0, 0, sc.spans, NeutralGrey, warpPathBest); err != nil {
			return out, err
		}
		for v := 0; v < h; v++ {
			if lo, hi := sc.spans[2*v], sc.spans[2*v+1]; lo < hi {
				sc.rows[v] = append(sc.rows[v], cspan{lo, hi, int32(i)})
			}
		}
	}
	// 3. Exact count: per row, the background count outside the painted
	// spans, plus each visible piece of a painted span.
	gi, err := g.Inverse()
	if err != nil {
		return out, err
	}
	fi, err := f.Inverse()
	if err != nil {
		return out, err
	}
	unfilled := 0
	for v := 0; v < h; v++ {
		spans := sc.rows[v]
		if len(spans) == 0 {
			unfilled += s.countSplitRange(gi, fi, v, 0, w-1)
			continue
		}
		// Walk the row's columns in pieces between span edges; the last
		// span covering a piece painted it.
		u := 0
		for u < w {
			next := w
			top := -2 // background
			for k, sp := range spans {
				lo, hi := int(sp.lo), int(sp.hi)
				if lo <= u && u < hi {
					top = k
					next = min(next, hi)
				} else if lo > u {
					next = min(next, lo)
				}
			}
			// A later span may start inside [u, next): next is already
			// clipped to every span start after u.
			switch {
			case top == -2:
				unfilled += s.countSplitRange(gi, fi, v, u, next-1)
			case spans[top].kind == spanHidden:
				unfilled += next - u
			default:
				unfilled += (next - u) - validCount(sc.inv[spans[top].kind], v, u, next-1, w, h)
			}
			u = next
		}
	}
	out.UnfilledPixels = unfilled
	out.UnfilledFraction = float64(unfilled) / float64(w*h)
	out.UprightSegments = len(sc.order)
	return out, nil
}

// countSplitRange counts the unfilled pixels of columns [x0, x1] of row v
// of the background warp (ground map gi on and below the horizon, far map
// fi above it), as countSplit does for whole rows.
func (s *Synthesizer) countSplitRange(gi, fi Homography, v, x0, x1 int) int {
	if x0 > x1 {
		return 0
	}
	w, h := s.cam.Width, s.cam.Height
	if gi == fi {
		return (x1 - x0 + 1) - validCount(fi, v, x0, x1, w, h)
	}
	hz := s.horizon
	glo, ghi := halfLine(hz.A, hz.B*float64(v)+hz.C, x0, x1)
	if glo > ghi {
		return (x1 - x0 + 1) - validCount(fi, v, x0, x1, w, h)
	}
	n := (ghi - glo + 1) - validCount(gi, v, glo, ghi, w, h)
	if glo > x0 {
		n += (glo - x0) - validCount(fi, v, x0, glo-1, w, h)
	}
	if ghi < x1 {
		n += (x1 - ghi) - validCount(fi, v, ghi+1, x1, w, h)
	}
	return n
}

// quadSpans maps the convex source quadrilateral q (pixel coordinates, in
// order around it) with the forward homography hm and writes, for each of
// the h destination rows, the columns [lo, hi) of pixel centres inside the
// image quadrilateral, clipped to [0, w) (lo == hi when none). It returns
// false, writing nothing, if a corner maps to infinity or behind the camera
// (the image would not be a bounded convex quadrilateral).
func quadSpans(hm Homography, q [4][2]float64, w, h int, spans []int32) bool {
	var p [4][2]float64
	for i, c := range q {
		x, y, ok := hm.Apply(c[0], c[1])
		if !ok || math.Abs(x) > 1e7 || math.Abs(y) > 1e7 {
			return false
		}
		p[i] = [2]float64{x, y}
	}
	for v := 0; v < h; v++ {
		fv := float64(v)
		lo, hi := math.Inf(1), math.Inf(-1)
		for i := 0; i < 4; i++ {
			a, b := p[i], p[(i+1)%4]
			if (a[1] > fv) == (b[1] > fv) {
				if a[1] == fv {
					lo, hi = math.Min(lo, a[0]), math.Max(hi, a[0])
				}
				continue
			}
			x := a[0] + (fv-a[1])*(b[0]-a[0])/(b[1]-a[1])
			lo, hi = math.Min(lo, x), math.Max(hi, x)
		}
		l, r := int32(0), int32(0)
		if lo <= hi {
			l = int32(math.Max(0, math.Ceil(lo)))
			r = int32(math.Min(float64(w), math.Floor(hi)+1))
			if l > r {
				l = r
			}
		}
		spans[2*v], spans[2*v+1] = l, r
	}
	return true
}
