package predictor

import (
	"cmp"
	"fmt"
	"math"
	"math/bits"
	"slices"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// spanHidden marks a painted span as disoccluded: hidden behind an upright
// segment in the source. Other span kinds are segment draw indices (0..).
const spanHidden = -1

// spanNone is below every span kind: no span covers the piece.
const spanNone = -2

// uprightScratch holds the per-frame buffers of SynthesizeScene, owned by
// the Synthesizer and grown once for the camera and the segment count.
type uprightScratch struct {
	quad   []int32   // 2 per row: one quad's row spans
	xs     []float64 // 2 per row: quadSpans's scratch
	rows   [][]cspan // per row: painted spans in paint order
	inv    []Homography
	order  []UprightSegment
	events []int64 // span edges of a row: pos<<32 | span<<1 | start
	active []int32
	byCol  []int32 // draw indices in order of UprightSegment.Col0
	tops   topsTable
	count  rowCount
	// Visible pieces in compressed sparse rows: index 0 the background,
	// 1+k segment k in draw order.
	ptr   [][]int32
	piece [][]int32
}

// cspan is one painted column interval [lo, hi) of a row and what painted
// it: spanHidden or a segment's draw index.
type cspan struct {
	lo, hi int32
	kind   int32
}

// SynthesizeScene is SynthesizeFar with the held frame's upright structure
// (see UprightModel). Every output pixel is decided once, then warped once:
//
//   - on an upright segment's image (its source quad mapped by its plane's
//     homography, PlaneHomography): that segment, nearer segments winning
//     (painter's order by UprightSegment.DepthM);
//   - else, where the road or far map would fetch a pixel of an upright
//     segment of src: the scene there was hidden behind the segment in
//     src, so the pixel is NeutralGrey (marked, not invented);
//   - else the road and far warp of Warp, blended across the horizon band.
//
// Unfilled pixels (no source, or disoccluded) are counted exactly on each
// visible piece, up to pixels whose centre lies within rounding error of a
// segment quad's edge. model nil or empty gives SynthesizeFar. dst is owned by the
// caller (see Warp); the per-frame path does not allocate once the
// Synthesizer has seen as many segments.
func (s *Synthesizer) SynthesizeScene(src gocv.Mat, m filter.Motion, farDepthM float64, model *UprightModel, dst *gocv.Mat) (Synthesis, error) {
	if model == nil || len(model.Segments) == 0 {
		return s.SynthesizeFar(src, m, farDepthM, dst)
	}
	g, err := GroundHomography(s.cam, m) // also validates m
	if err != nil {
		return Synthesis{}, err
	}
	f := FarHomographyPlanar(s.cam, m.DxM, m.DyM, m.DyawRad, farDepthM)
	if !f.IsFinite() {
		return Synthesis{}, fmt.Errorf("far-scene homography at depth %g m is not finite: %w", farDepthM, ErrSingular)
	}
	out := Synthesis{Ground: g, Far: f}
	gi, fi, src, err := s.prepare(src, g, f, dst)
	if err != nil {
		return out, err
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
	if len(sc.quad) != 2*h {
		sc.quad = make([]int32, 2*h)
		sc.xs = make([]float64, 2*h)
		sc.rows = make([][]cspan, h)
	}
	for v := range sc.rows {
		sc.rows[v] = sc.rows[v][:0]
	}
	sc.order = append(sc.order[:0], model.Segments...)
	sortFarToNear(sc.order)
	// Quads are painted segment by segment in column order, so that each
	// row's span edges come nearly sorted (sortEvents); which span shows is
	// decided by kind, not by paint order (see step 3).
	n := len(sc.order)
	sc.byCol = sc.byCol[:0]
	for i := range n {
		sc.byCol = append(sc.byCol, int32(i))
	}
	slices.SortStableFunc(sc.byCol, func(a, b int32) int { return cmp.Compare(sc.order[a].Col0, sc.order[b].Col0) })
	if cap(sc.inv) < n {
		sc.inv = make([]Homography, n)
	}
	sc.inv = sc.inv[:n]
	paint := func(hm Homography, quad [4][2]float64, kind int32) {
		r0, r1, ok := quadSpans(hm, quad, w, h, sc.quad, sc.xs)
		if !ok {
			return
		}
		for v := r0; v < r1; v++ {
			if lo, hi := sc.quad[2*v], sc.quad[2*v+1]; lo < hi {
				sc.rows[v] = append(sc.rows[v], cspan{lo, hi, kind})
			}
		}
	}
	hz := s.horizon
	const e = FillTolerancePx
	for _, i := range sc.byCol {
		seg := &sc.order[i]
		// 1. Where the background would fetch the segment's pixels: the
		// road map's image of the part below the horizon, the far map's
		// above it.
		x0, x1 := float64(seg.Col0)-0.5, float64(seg.Col1)-0.5
		r0, _ := hz.RowAt(x0)
		r1, _ := hz.RowAt(x1)
		split := max(max(r0, r1)+1, seg.TopRow)
		if split > seg.TopRow {
			fs := seg.clip(split)
			paint(f, [4][2]float64{{x0, seg.TopRow}, {x1, seg.TopRow}, {x1, fs}, {x0, fs}}, spanHidden)
		}
		b0, b1 := seg.clip(seg.BaseRow0), seg.clip(seg.BaseRow1)
		if b0 > split || b1 > split {
			paint(g, [4][2]float64{{x0, split}, {x1, split}, {x1, b1}, {x0, b0}}, spanHidden)
		}
		// 2. The segment itself. Its quad is clipped to the source
		// rectangle of Warp's "has a source" test, so every pixel centre
		// of its image has a source (up to rounding at the quad's edges)
		// and the count needs no per-piece test.
		hf := PlaneHomography(c, m.DxM, m.DyM, m.DyawRad, seg.Plane)
		inv, err := hf.Inverse()
		sc.inv[i] = inv
		if err != nil || !hf.IsFinite() {
			continue
		}
		x0, x1 = max(float64(seg.Col0)-0.5, -e), min(float64(seg.Col1)-0.5, float64(w-1)+e)
		top := max(seg.TopRow, -e)
		b0, b1 = seg.clip(min(seg.BaseRow0, float64(h-1)+e)), seg.clip(min(seg.BaseRow1, float64(h-1)+e))
		paint(hf, [4][2]float64{{x0, top}, {x1, top}, {x1, b1}, {x0, b0}}, i)
	}
	// 3. Visible pieces per row (sweep over the span edges: of the spans
	// covering a piece, the nearest segment's shows, else a disocclusion
	// span's), the exact count, and the grey of hidden pieces.
	nk := 1 + len(sc.order)
	for len(sc.ptr) < nk {
		sc.ptr = append(sc.ptr, nil)
		sc.piece = append(sc.piece, nil)
	}
	for k := 0; k < nk; k++ {
		sc.ptr[k] = append(sc.ptr[k][:0], 0)
		sc.piece[k] = sc.piece[k][:0]
	}
	if len(model.Tops) >= w {
		sc.tops.build(model.Tops)
	}
	sc.count.ok = false
	unfilled := 0
	for v := 0; v < h; v++ {
		spans := sc.rows[v]
		// Edges as int64 keys pos<<32 | span<<1 | start, sorted by position.
		ev := sc.events[:0]
		for k, sp := range spans {
			ev = append(ev, int64(sp.lo)<<32|int64(k)<<1|1, int64(sp.hi)<<32|int64(k)<<1)
		}
		sortEvents(ev)
		sc.events = ev
		act := sc.active[:0]
		u := 0
		for i := 0; i <= len(ev); i++ {
			next := w
			if i < len(ev) {
				next = min(w, int(ev[i]>>32))
			}
			if next > u {
				// The nearest segment shows (the highest draw index);
				// under no segment, a disocclusion span hides the
				// background.
				top := int32(spanNone)
				for _, k := range act {
					top = max(top, spans[k].kind)
				}
				switch top {
				case spanNone:
					unfilled += s.countSplitRange(gi, fi, v, u, next-1)
					sc.piece[0] = append(sc.piece[0], int32(u), int32(next))
				case spanHidden:
					var n int
					sc.piece[0], n = s.hiddenRange(dv, gi, fi, model.Tops, v, u, next, sc.piece[0])
					unfilled += n
				default:
					sc.piece[1+top] = append(sc.piece[1+top], int32(u), int32(next))
				}
				u = next
			}
			if i < len(ev) {
				k := int32(ev[i]&0xffffffff) >> 1
				if ev[i]&1 == 1 {
					act = append(act, k)
				} else if j := slices.Index(act, k); j >= 0 {
					act = slices.Delete(act, j, j+1)
				}
			}
		}
		sc.active = act
		for k := 0; k < nk; k++ {
			sc.ptr[k] = append(sc.ptr[k], int32(len(sc.piece[k])/2))
		}
	}
	// 4. Warp each piece once.
	for i := range sc.order {
		if len(sc.piece[1+i]) > 0 {
			if _, err := warpBGRSpans(dv, sv, sc.inv[i], 0, 0, sc.ptr[1+i], sc.piece[1+i], NeutralGrey, warpPathBest); err != nil {
				return out, err
			}
		}
	}
	if err := s.warpBackground(dv, sv, gi, fi, sc.ptr[0], sc.piece[0]); err != nil {
		return out, err
	}
	out.UnfilledPixels = unfilled
	out.UnfilledFraction = float64(unfilled) / float64(w*h)
	out.UprightSegments = len(sc.order)
	return out, nil
}

// sortEventsBudget is the number of element moves sortEvents spends on
// insertion before it hands the row to slices.Sort.
const sortEventsBudget = 256

// sortEvents sorts a row's span edges in increasing order. The keys are
// distinct (each holds its span's index), so the order is the same whatever
// the algorithm: insertion, which is fastest on the short and nearly
// ordered rows that painting segments in column order gives, and
// slices.Sort once a row turns out to need more than sortEventsBudget moves.
func sortEvents(ev []int64) {
	moves := 0
	for i := 1; i < len(ev); i++ {
		x := ev[i]
		j := i
		for j > 0 && ev[j-1] > x {
			ev[j] = ev[j-1]
			j--
		}
		ev[j] = x
		if moves += i - j; moves > sortEventsBudget {
			slices.Sort(ev)
			return
		}
	}
}

// hiddenRange decides the columns [x0, x1) of row v, where the road or far
// map (gi on and below the horizon, fi above it, as countSplitRange)
// fetches from an upright segment's source quad: the pixels whose source
// lies at or below its column's top (tops, UprightModel.Tops) were hidden
// behind the surface and are painted NeutralGrey; the others fetch sky or
// far scene above the surface's top in its column and are appended to bg
// as background pieces. It returns bg and the unfilled count of the range
// (the grey pixels and the background's pixels without a source). With
// tops shorter than the frame's width the whole range is grey.
func (s *Synthesizer) hiddenRange(dv bgrView, gi, fi Homography, tops []float32, v, x0, x1 int, bg []int32) ([]int32, int) {
	if len(tops) < s.cam.Width {
		greyRange(dv, v, x0, x1)
		return bg, x1 - x0
	}
	if gi == fi {
		return s.hiddenPiece(dv, gi, fi, fi, tops, v, x0, x1, bg)
	}
	hz := s.horizon
	glo, ghi := halfLine(hz.A, hz.B*float64(v)+hz.C, x0, x1-1)
	if glo > ghi {
		return s.hiddenPiece(dv, gi, fi, fi, tops, v, x0, x1, bg)
	}
	n := 0
	var k int
	if glo > x0 {
		bg, k = s.hiddenPiece(dv, gi, fi, fi, tops, v, x0, glo, bg)
		n += k
	}
	bg, k = s.hiddenPiece(dv, gi, fi, gi, tops, v, glo, ghi+1, bg)
	n += k
	if ghi+1 < x1 {
		bg, k = s.hiddenPiece(dv, gi, fi, fi, tops, v, ghi+1, x1, bg)
		n += k
	}
	return bg, n
}

// greyRow is one BGR row of NeutralGrey as wide as the widest frame, the
// source greyRange copies from.
var greyRow = func() []byte {
	b := make([]byte, 3*MaxImageSide)
	for i := range b {
		b[i] = NeutralGrey
	}
	return b
}()

// greyRange paints columns [x0, x1) of row v NeutralGrey.
func greyRange(dv bgrView, v, x0, x1 int) {
	copy(dv.Pix[v*dv.Stride+3*x0:v*dv.Stride+3*x1], greyRow)
}

// hiddenPiece is hiddenRange over columns [x0, x1) of row v that one map m
// (gi or fi) serves (see rowMap.decide).
func (s *Synthesizer) hiddenPiece(dv bgrView, gi, fi, m Homography, tops []float32, v, x0, x1 int, bg []int32) ([]int32, int) {
	fv := float64(v)
	rm := rowMap{m[0][0], m[0][1]*fv + m[0][2], m[1][0], m[1][1]*fv + m[1][2], m[2][0], m[2][1]*fv + m[2][2]}
	return s.decideHidden(dv, gi, fi, &rm, tops, v, x0, x1, bg)
}

// topsTable answers the least and the greatest of UprightModel.Tops over a
// column range in constant time: a sparse table (level j holds the minima
// and maxima over the 2^j columns from each column), rebuilt only when the
// tops change, so once per gap. The answers are those of a scan: min and
// max are exact and order-free, NaN included.
type topsTable struct {
	key    []float32   // the tops the levels were built from
	lo, hi [][]float32 // level j, column c: over columns [c, c+2^j)
}

// build makes the table answer for tops (a copy is kept to see changes).
func (t *topsTable) build(tops []float32) {
	if len(t.key) == len(tops) && slices.EqualFunc(t.key, tops, func(a, b float32) bool {
		return math.Float32bits(a) == math.Float32bits(b)
	}) && len(t.lo) > 0 {
		return
	}
	t.key = append(t.key[:0], tops...)
	n := len(tops)
	levels := bits.Len(uint(n))
	for len(t.lo) < levels {
		t.lo, t.hi = append(t.lo, nil), append(t.hi, nil)
	}
	t.lo, t.hi = t.lo[:levels], t.hi[:levels]
	t.lo[0] = append(t.lo[0][:0], tops...)
	t.hi[0] = append(t.hi[0][:0], tops...)
	for j := 1; j < levels; j++ {
		half, m := 1<<(j-1), n-1<<j+1
		lo, hi := t.lo[j][:0], t.hi[j][:0]
		for c := range m {
			lo = append(lo, min(t.lo[j-1][c], t.lo[j-1][c+half]))
			hi = append(hi, max(t.hi[j-1][c], t.hi[j-1][c+half]))
		}
		t.lo[j], t.hi[j] = lo, hi
	}
}

// span returns the least and the greatest top of columns [c0, c1]
// (0 <= c0 <= c1 < len(tops)).
func (t *topsTable) span(c0, c1 int) (lo, hi float32) {
	j := bits.Len(uint(c1-c0+1)) - 1
	c2 := c1 - 1<<j + 1
	return min(t.lo[j][c0], t.lo[j][c2]), max(t.hi[j][c0], t.hi[j][c2])
}

// rowMap is a map restricted to one row: source x = (ax u + bx) / (aw u +
// bw), y = (ay u + by) / (aw u + bw).
type rowMap struct{ ax, bx, ay, by, aw, bw float64 }

// src returns the source of column u (ok false behind the camera).
func (r *rowMap) src(u int) (x, y float64, ok bool) {
	fu := float64(u)
	d := r.aw*fu + r.bw
	if !(d > 0) {
		return 0, 0, false
	}
	return (r.ax*fu + r.bx) / d, (r.ay*fu + r.by) / d, true
}

// hiddenAt reports whether column u fetches at or below its source
// column's top (a source outside the frame counts as hidden).
func (r *rowMap) hiddenAt(tops []float32, u int) bool {
	x, y, ok := r.src(u)
	if !ok {
		return true
	}
	c := int(math.Round(x))
	return c < 0 || c >= len(tops) || !(y < float64(tops[c]))
}

// hiddenPieceMinPx is the length below which decideHidden decides pixel by
// pixel instead of halving a piece.
const hiddenPieceMinPx = 8

// decideHidden decides columns [x0, x1) of row v under map r. The sources
// of a row's pixels lie on one straight segment of the source frame, so a
// piece whose sources are all at or below (all above) every top of the
// columns they span is decided whole; other pieces are halved, and short
// ones decided pixel by pixel.
func (s *Synthesizer) decideHidden(dv bgrView, gi, fi Homography, r *rowMap, tops []float32, v, x0, x1 int, bg []int32) ([]int32, int) {
	if x0 >= x1 {
		return bg, 0
	}
	xa, ya, oka := r.src(x0)
	xb, yb, okb := r.src(x1 - 1)
	if oka && okb {
		c0 := int(math.Round(min(xa, xb)))
		c1 := int(math.Round(max(xa, xb)))
		if c0 >= 0 && c1 < len(tops) {
			lo, hi := s.up.tops.span(c0, c1)
			switch {
			case min(ya, yb) >= float64(hi):
				greyRange(dv, v, x0, x1)
				return bg, x1 - x0
			case max(ya, yb) < float64(lo):
				return append(bg, int32(x0), int32(x1)), s.countSplitRange(gi, fi, v, x0, x1-1)
			}
		}
	}
	if x1-x0 > hiddenPieceMinPx {
		mid := (x0 + x1) / 2
		bg, n0 := s.decideHidden(dv, gi, fi, r, tops, v, x0, mid, bg)
		bg, n1 := s.decideHidden(dv, gi, fi, r, tops, v, mid, x1, bg)
		return bg, n0 + n1
	}
	n := 0
	for u := x0; u < x1; {
		hd := r.hiddenAt(tops, u)
		e := u + 1
		for e < x1 && r.hiddenAt(tops, e) == hd {
			e++
		}
		if hd {
			greyRange(dv, v, u, e)
			n += e - u
		} else {
			n += s.countSplitRange(gi, fi, v, u, e-1)
			bg = append(bg, int32(u), int32(e))
		}
		u = e
	}
	return bg, n
}

// warpBackground warps the background pieces (rowptr, spans over all rows):
// far map above the band, ground map below it, both blended in the band.
func (s *Synthesizer) warpBackground(dv, sv bgrView, gi, fi Homography, rowptr, spans []int32) error {
	h, w := s.cam.Height, s.cam.Width
	a, b := s.rowA, s.rowB
	if a > 0 {
		if _, err := warpBGRSpans(dv.rows(0, a), sv, fi, 0, 0, rowptr[0:a+1], spans, NeutralGrey, warpPathBest); err != nil {
			return err
		}
	}
	if b < h {
		if _, err := warpBGRSpans(dv.rows(b, h), sv, gi, 0, b, rowptr[b:h+1], spans, NeutralGrey, warpPathBest); err != nil {
			return err
		}
	}
	if b <= a {
		return nil
	}
	bg, err := matView(&s.bandG)
	if err != nil {
		return fmt.Errorf("band buffer: %w", err)
	}
	bf, err := matView(&s.bandF)
	if err != nil {
		return fmt.Errorf("band buffer: %w", err)
	}
	if _, err := warpBGRSpans(bg, sv, gi, 0, a, rowptr[a:b+1], spans, NeutralGrey, warpPathBest); err != nil {
		return err
	}
	if _, err := warpBGRSpans(bf, sv, fi, 0, a, rowptr[a:b+1], spans, NeutralGrey, warpPathBest); err != nil {
		return err
	}
	for v := a; v < b; v++ {
		r := v - a
		gr, fr := bg.Pix[r*bg.Stride:], bf.Pix[r*bf.Stride:]
		out := dv.Pix[v*dv.Stride:]
		wts := s.weights[r*w : (r+1)*w]
		for i := rowptr[v]; i < rowptr[v+1]; i++ {
			for u := int(spans[2*i]); u < int(spans[2*i+1]); u++ {
				blendPixel(out, gr, fr, 3*u, wts[u])
			}
		}
	}
	return nil
}

// countSplitRange counts the unfilled pixels of columns [x0, x1] of row v
// of the background warp (ground map gi on and below the horizon, far map
// fi above it), as countSplit does for whole rows. The row's sets (horizon
// split, validRow of each map) are worked out on its first call and kept
// in s.up.count for the next pieces of the same row; SynthesizeScene resets
// them for each frame, as gi and fi change.
func (s *Synthesizer) countSplitRange(gi, fi Homography, v, x0, x1 int) int {
	if x0 > x1 {
		return 0
	}
	rc := &s.up.count
	if !rc.ok || rc.v != v {
		hz := s.horizon
		*rc = rowCount{v: v, ok: true}
		rc.glo, rc.ghi = halfLine(hz.A, hz.B*float64(v)+hz.C, 0, s.cam.Width-1)
	}
	if gi == fi {
		return (x1 - x0 + 1) - rc.far(fi, s.cam).count(x0, x1)
	}
	glo, ghi := max(x0, rc.glo), min(x1, rc.ghi)
	if glo > ghi {
		return (x1 - x0 + 1) - rc.far(fi, s.cam).count(x0, x1)
	}
	n := (ghi - glo + 1) - rc.ground(gi, s.cam).count(glo, ghi)
	if glo > x0 {
		n += (glo - x0) - rc.far(fi, s.cam).count(x0, glo-1)
	}
	if ghi < x1 {
		n += (x1 - ghi) - rc.far(fi, s.cam).count(ghi+1, x1)
	}
	return n
}

// rowCount is countSplitRange's record of one row: the ground columns
// [glo, ghi] of the horizon split and the validRow of each map.
type rowCount struct {
	v        int
	ok       bool // false: nothing recorded for this frame
	glo, ghi int
	g, f     validRow
	gok, fok bool // g, f worked out (on first use)
}

// ground returns the row's validRow under the ground map gi.
func (rc *rowCount) ground(gi Homography, c Camera) validRow {
	if !rc.gok {
		rc.g, rc.gok = newValidRow(gi, rc.v, c.Width, c.Height), true
	}
	return rc.g
}

// far returns the row's validRow under the far map fi.
func (rc *rowCount) far(fi Homography, c Camera) validRow {
	if !rc.fok {
		rc.f, rc.fok = newValidRow(fi, rc.v, c.Width, c.Height), true
	}
	return rc.f
}

// projectQuad maps the corners of q with hm; ok is false if one maps to
// infinity, behind the camera or beyond 1e7 px (the image would not be a
// bounded convex quadrilateral). ymin and ymax bound the mapped corners' rows.
func projectQuad(hm Homography, q [4][2]float64) (p [4][2]float64, ymin, ymax float64, ok bool) {
	ymin, ymax = math.Inf(1), math.Inf(-1)
	for i, c := range q {
		x, y, ok := hm.Apply(c[0], c[1])
		if !ok || math.Abs(x) > 1e7 || math.Abs(y) > 1e7 {
			return p, 0, 0, false
		}
		p[i] = [2]float64{x, y}
		ymin, ymax = min(ymin, y), max(ymax, y)
	}
	return p, ymin, ymax, true
}

// quadSpans maps the convex source quadrilateral q (pixel coordinates, in
// order around it) with the forward homography hm and writes, for each
// destination row v in the returned range [r0, r1), the columns [lo, hi) of
// pixel centres inside the image quadrilateral, clipped to [0, w) (lo == hi
// when none) into spans[2v], spans[2v+1]. ok is false, writing nothing, if
// a corner maps to infinity or behind the camera (the image would not be a
// bounded convex quadrilateral). xs is scratch of at least 2h values.
//
// A row's bounds are the least and the greatest of the crossings of the
// edges that straddle it (one end's y above the row's, the other's on it or
// below) and of the corners lying exactly on it. Each edge visits only the
// rows it can straddle, each tested exactly, so a tall, thin quad costs two
// crossings per row; the crossing is the same expression on the same
// values as in a plain per-row pass over all four edges.
func quadSpans(hm Homography, q [4][2]float64, w, h int, spans []int32, xs []float64) (r0, r1 int, ok bool) {
	p, ymin, ymax, ok := projectQuad(hm, q)
	if !ok {
		return 0, 0, false
	}
	r0 = int(max(0, math.Ceil(ymin)))
	r1 = int(min(float64(h), math.Floor(ymax)+1))
	if r1 <= r0 {
		return r0, r0, true
	}
	lo, hi := xs[:h], xs[h:2*h]
	for v := r0; v < r1; v++ {
		lo[v], hi[v] = math.Inf(1), math.Inf(-1)
	}
	for i := 0; i < 4; i++ {
		a, b := p[i], p[(i+1)%4]
		// Rows that may straddle the edge: between its ends' y, one
		// row of slack each way; the exact test decides.
		va := max(r0, int(math.Floor(min(a[1], b[1])))-1)
		vb := min(r1, int(math.Ceil(max(a[1], b[1])))+2)
		for v := va; v < vb; v++ {
			fv := float64(v)
			if (a[1] > fv) == (b[1] > fv) {
				continue
			}
			x := a[0] + (fv-a[1])*(b[0]-a[0])/(b[1]-a[1])
			lo[v], hi[v] = min(lo[v], x), max(hi[v], x)
		}
		// Corner a on a row, where edge i does not straddle that row.
		if v := int(a[1]); float64(v) == a[1] && v >= r0 && v < r1 && (b[1] > a[1]) == false {
			lo[v], hi[v] = min(lo[v], a[0]), max(hi[v], a[0])
		}
	}
	for v := r0; v < r1; v++ {
		l, r := int32(0), int32(0)
		if lo[v] <= hi[v] {
			l = int32(max(0, math.Ceil(lo[v])))
			r = int32(min(float64(w), math.Floor(hi[v])+1))
			if l > r {
				l = r
			}
		}
		spans[2*v], spans[2*v+1] = l, r
	}
	return r0, r1, true
}
