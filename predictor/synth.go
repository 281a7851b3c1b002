package predictor

import (
	"fmt"
	"image"
	"image/color"
	"math"

	"gocv.io/x/gocv"
)

// DefaultBandPx is the default width, in pixels, of the band across the
// horizon in which the ground and far warps are blended linearly. A design
// choice: wide enough to hide the seam between the two warps at 720p, narrow
// enough that little ground is mixed with sky.
const DefaultBandPx = 24

// NeutralGrey is the value (all three channels) written to output pixels
// that have no source pixel.
const NeutralGrey = 128

// FillTolerancePx is the slack e of the "has a source pixel" test: half of
// the 1/32 px sub-pixel step to which cv::warpPerspective rounds source
// coordinates (INTER_BITS = 5 in OpenCV's imgproc, from memory). It keeps
// identity-like maps, whose edge pixels land within rounding error of the
// source border, from counting as unfilled.
const FillTolerancePx = 1.0 / 64

var neutralFill = color.RGBA{R: NeutralGrey, G: NeutralGrey, B: NeutralGrey}

// SynthOptions configures a Synthesizer. The zero value uses the defaults.
type SynthOptions struct {
	// BandPx is the blend band width across the horizon, pixels. 0 means
	// DefaultBandPx; otherwise it must be in 2..1024.
	BandPx int
}

// Synthesis describes one synthesized frame.
type Synthesis struct {
	// Ground and Far are the forward homographies used (source pixels at T0
	// to destination pixels at T1). Equal for a rotation-only warp.
	Ground, Far Homography
	// UnfilledPixels counts output pixels with no source pixel, filled with
	// NeutralGrey. A pixel on or below the horizon line is judged by the
	// ground map, one above it by the far map; it is unfilled when the inverse
	// map sends its centre outside [-e, W-1+e] x [-e, H-1+e] of the source
	// (e = FillTolerancePx) or behind the source camera. Counted exactly, row
	// by row.
	UnfilledPixels int
	// UnfilledFraction is UnfilledPixels / (Width·Height).
	UnfilledFraction float64
	// UprightSegments is the number of upright segments composited
	// (SynthesizeScene; 0 otherwise).
	UprightSegments int
}

// Synthesizer warps a frame from one camera pose to another: the road
// (below the horizon) with a ground-plane homography and the far scene
// (above it) with a rotation homography, blended linearly across a band of
// BandPx centred on the horizon of the destination image.
//
// Each output row is warped once, straight into the caller's destination,
// by the package's own bilinear fixed-point kernel (warpBGR: same arithmetic
// as cv::warpPerspective with INTER_LINEAR and BORDER_CONSTANT); only the band
// rows are warped twice (into owned buffers) and blended into the
// destination. Without distortion the cost is about (H + band rows) / H of
// one full warp by that kernel.
//
// If the camera has distortion, each source frame is first undistorted with
// precomputed maps (cv::remap, bilinear), and the output is in undistorted
// (pinhole) geometry with the same K. Predicted frames are then not pixel-
// compatible with the raw distorted frames.
//
// A Synthesizer owns its buffers (Close frees them) and is not safe for
// concurrent use; use one per goroutine.
type Synthesizer struct {
	cam     Camera
	bandPx  int
	horizon Line
	rowA    int // rows [0, rowA) are far scene only
	rowB    int // rows [rowA, rowB) are blended; [rowB, H) are ground only

	weights []uint16 // ground weight 0..256 per band pixel, row-major, (rowB-rowA)*W
	bandG   gocv.Mat // ground warp of the band rows
	bandF   gocv.Mat // far warp of the band rows

	up uprightScratch // SynthesizeScene's buffers

	undistort  bool
	map1, map2 gocv.Mat // undistortion maps (CV_16SC2 + CV_16UC1)
	undist     gocv.Mat // undistorted source

	closed bool
}

// NewSynthesizer validates cam and opts and allocates the buffers.
func NewSynthesizer(cam Camera, opts SynthOptions) (*Synthesizer, error) {
	if err := cam.Validate(); err != nil {
		return nil, err
	}
	band := opts.BandPx
	if band == 0 {
		band = DefaultBandPx
	}
	if band < 2 || band > 1024 {
		return nil, fmt.Errorf("BandPx = %d, want 2..1024 (0 for the default %d): %w", opts.BandPx, DefaultBandPx, ErrInvalidConfig)
	}
	s := &Synthesizer{cam: cam, bandPx: band, horizon: cam.Horizon()}
	s.layoutBand()
	if n := s.rowB - s.rowA; n > 0 {
		s.bandG = gocv.NewMatWithSize(n, cam.Width, gocv.MatTypeCV8UC3)
		s.bandF = gocv.NewMatWithSize(n, cam.Width, gocv.MatTypeCV8UC3)
	} else {
		s.bandG, s.bandF = gocv.NewMat(), gocv.NewMat()
	}
	s.map1, s.map2, s.undist = gocv.NewMat(), gocv.NewMat(), gocv.NewMat()
	if cam.HasDistortion() {
		s.undistort = true
		k := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
		defer k.Close()
		if err := setMat3(&k, Homography(cam.K())); err != nil {
			s.Close()
			return nil, err
		}
		d := gocv.NewMatWithSize(1, 5, gocv.MatTypeCV64F)
		defer d.Close()
		for i, v := range cam.Distortion() {
			d.SetDoubleAt(0, i, v)
		}
		r := gocv.NewMat()
		defer r.Close()
		gocv.InitUndistortRectifyMap(k, d, r, k, image.Pt(cam.Width, cam.Height), int(gocv.MatTypeCV16SC2), s.map1, s.map2)
		s.undist = gocv.NewMatWithSize(cam.Height, cam.Width, gocv.MatTypeCV8UC3)
	}
	return s, nil
}

// layoutBand finds the band rows and precomputes the per-pixel ground
// weights w = clamp((s + b) / 2b, 0, 1), s the signed distance to the
// horizon (positive below), b = BandPx/2.
func (s *Synthesizer) layoutBand() {
	w, h := s.cam.Width, s.cam.Height
	b := float64(s.bandPx) / 2
	hz := s.horizon
	minMax := func(v int) (lo, hi float64) {
		a := hz.SignedDistance(0, float64(v))
		c := hz.SignedDistance(float64(w-1), float64(v))
		return math.Min(a, c), math.Max(a, c)
	}
	s.rowA = h
	for v := 0; v < h; v++ {
		if _, hi := minMax(v); hi > -b {
			s.rowA = v
			break
		}
	}
	s.rowB = h
	for v := s.rowA; v < h; v++ {
		if lo, _ := minMax(v); lo >= b {
			s.rowB = v
			break
		}
	}
	n := s.rowB - s.rowA
	s.weights = make([]uint16, n*w)
	for r := 0; r < n; r++ {
		for u := 0; u < w; u++ {
			d := hz.SignedDistance(float64(u), float64(s.rowA+r))
			f := (d + b) / (2 * b)
			s.weights[r*w+u] = uint16(math.Round(256 * math.Min(1, math.Max(0, f))))
		}
	}
}

// Close frees the buffers. It is safe to call more than once.
func (s *Synthesizer) Close() error {
	if s.closed {
		return nil
	}
	s.closed = true
	for _, m := range []*gocv.Mat{&s.bandG, &s.bandF, &s.map1, &s.map2, &s.undist} {
		if matUsable(m) {
			m.Close()
		}
	}
	return nil
}

// Camera returns the camera the Synthesizer was built for.
func (s *Synthesizer) Camera() Camera { return s.cam }

// BandRows returns the blended rows [first, end) of the output; rows above
// are warped with the far map only and rows from end on with the ground map
// only. first == end when the horizon band is outside the image.
func (s *Synthesizer) BandRows() (first, end int) { return s.rowA, s.rowB }

// Warp writes into dst the source frame src warped with the forward
// homographies ground (for road pixels, on and below the horizon) and far
// (above it), blended across the band. Both map source pixels to destination
// pixels in undistorted geometry. If ground == far the frame is warped once.
//
// src must be a CV_8UC3 image of the camera size. dst is owned by the caller;
// it is (re)allocated only if its size or type differ, so pass the same dst
// every time for an allocation-free path. dst must not share memory with src,
// and both must be whole (continuous) Mats, not region views.
func (s *Synthesizer) Warp(src gocv.Mat, ground, far Homography, dst *gocv.Mat) (Synthesis, error) {
	out := Synthesis{Ground: ground, Far: far}
	gi, fi, src, err := s.prepare(src, ground, far, dst)
	if err != nil {
		return out, err
	}
	w, h := s.cam.Width, s.cam.Height
	sv, err := matView(&src)
	if err != nil {
		return out, fmt.Errorf("source frame: %w", err)
	}
	dv, err := matView(dst)
	if err != nil {
		return out, fmt.Errorf("destination: %w", err)
	}
	if ground == far {
		if err := warpRows(dv, sv, fi, 0); err != nil {
			return out, err
		}
		for v := 0; v < h; v++ {
			out.UnfilledPixels += w - validCount(fi, v, 0, w-1, w, h)
		}
	} else {
		if s.rowA > 0 {
			if err := warpRows(dv.rows(0, s.rowA), sv, fi, 0); err != nil {
				return out, err
			}
		}
		if s.rowB > s.rowA {
			if err := s.warpBand(dv.rows(s.rowA, s.rowB), sv, gi, fi); err != nil {
				return out, err
			}
		}
		if s.rowB < h {
			if err := warpRows(dv.rows(s.rowB, h), sv, gi, s.rowB); err != nil {
				return out, err
			}
		}
		out.UnfilledPixels = s.countSplit(gi, fi)
	}
	out.UnfilledFraction = float64(out.UnfilledPixels) / float64(w*h)
	return out, nil
}

// warpRows warps the destination image rows [row0, row0+target.H) into
// target, a view of exactly those rows, with the package's kernel (warpBGR):
// inv maps full-image destination pixels to source pixels; pixels with no
// source, including those whose ray points behind the source camera, are
// NeutralGrey.
func warpRows(target, src bgrView, inv Homography, row0 int) error {
	_, err := warpBGR(target, src, inv, 0, row0, NeutralGrey, warpPathBest)
	return err
}

// halfLine returns the integers u in [lo, hi] with a*u + c >= 0, which form
// an interval because the condition is monotone in u. The float bound is
// refined by evaluating the condition itself at the boundary, so the result
// agrees exactly with a per-pixel test of a*u + c >= 0.
func halfLine(a, c float64, lo, hi int) (int, int) {
	ok := func(u int) bool { return a*float64(u)+c >= 0 }
	switch {
	case a == 0:
		if c >= 0 {
			return lo, hi
		}
		return lo, lo - 1
	case a > 0: // u >= -c/a
		b := -c / a
		if !(b > float64(lo)) { // also NaN-safe
			b = float64(lo)
		}
		if b > float64(hi)+1 {
			return lo, lo - 1
		}
		u := int(math.Ceil(b))
		for u > lo && ok(u-1) {
			u--
		}
		for u <= hi && !ok(u) {
			u++
		}
		return u, hi
	default: // u <= -c/a
		b := -c / a
		if !(b < float64(hi)) {
			b = float64(hi)
		}
		if b < float64(lo)-1 {
			return lo, lo - 1
		}
		u := int(math.Floor(b))
		for u < hi && ok(u+1) {
			u++
		}
		for u >= lo && !ok(u) {
			u--
		}
		return lo, u
	}
}

// rowConstraints returns, for row v, the four conditions of validCount other
// than w > 0 as pairs (a, c) meaning a u + c >= 0, and w = wa u + wc.
func rowConstraints(inv Homography, v, sw, sh int) (cons [4][2]float64, wa, wc float64) {
	fv := float64(v)
	wa, wc = inv[2][0], inv[2][1]*fv+inv[2][2]
	xa, xc := inv[0][0], inv[0][1]*fv+inv[0][2]
	ya, yc := inv[1][0], inv[1][1]*fv+inv[1][2]
	const e = FillTolerancePx
	mw, mh := float64(sw-1)+e, float64(sh-1)+e
	cons = [4][2]float64{
		{xa + e*wa, xc + e*wc},
		{mw*wa - xa, mw*wc - xc},
		{ya + e*wa, yc + e*wc},
		{mh*wa - ya, mh*wc - yc},
	}
	return cons, wa, wc
}

// validCount counts the integer columns u in [x0, x1] of row v whose centre
// inv maps into the source rectangle [-e, sw-1+e] x [-e, sh-1+e] with w > 0
// (e = FillTolerancePx). In homogeneous form every condition is linear in u:
//
//	w > 0, X + e w >= 0, X <= (sw-1+e) w, Y + e w >= 0, Y <= (sh-1+e) w
//
// with (X, Y, w) = inv (u, v, 1), so the valid columns form one interval.
func validCount(inv Homography, v, x0, x1, sw, sh int) int {
	if x0 > x1 {
		return 0
	}
	cons, wa, wc := rowConstraints(inv, v, sw, sh)
	lo, hi := x0, x1
	for _, k := range cons {
		lo, hi = halfLine(k[0], k[1], lo, hi)
		if lo > hi {
			return 0
		}
	}
	// w > 0 strictly: remove the columns with w <= 0.
	blo, bhi := halfLine(-wa, -wc, lo, hi)
	n := hi - lo + 1
	if blo <= bhi {
		n -= bhi - blo + 1
	}
	return n
}

// validRow is the set validCount counts, for a whole row at once: the
// columns [lo, hi] (lo > hi when none) less those of [blo, bhi], where the
// ray points behind the source camera. Each bound is halfLine's, exact per
// pixel, so a sub-range's count equals validCount of that sub-range.
type validRow struct{ lo, hi, blo, bhi int }

// newValidRow is validCount's set for row v over columns [0, sw-1].
func newValidRow(inv Homography, v, sw, sh int) validRow {
	cons, wa, wc := rowConstraints(inv, v, sw, sh)
	r := validRow{lo: 0, hi: sw - 1, blo: 0, bhi: -1}
	for _, k := range cons {
		r.lo, r.hi = halfLine(k[0], k[1], r.lo, r.hi)
		if r.lo > r.hi {
			return validRow{lo: 0, hi: -1, blo: 0, bhi: -1}
		}
	}
	r.blo, r.bhi = halfLine(-wa, -wc, r.lo, r.hi)
	return r
}

// count is validCount over columns [x0, x1] of the row.
func (r validRow) count(x0, x1 int) int {
	lo, hi := max(x0, r.lo), min(x1, r.hi)
	if lo > hi {
		return 0
	}
	n := hi - lo + 1
	if b0, b1 := max(lo, r.blo), min(hi, r.bhi); b0 <= b1 {
		n -= b1 - b0 + 1
	}
	return n
}

// countSplit counts unfilled pixels when the frame is split at the horizon:
// columns with signed distance >= 0 use the ground map gi, the others the
// far map fi (both inverse maps).
func (s *Synthesizer) countSplit(gi, fi Homography) int {
	w, h := s.cam.Width, s.cam.Height
	hz := s.horizon
	unfilled := 0
	for v := 0; v < h; v++ {
		// Ground columns: A u + B v + C >= 0.
		glo, ghi := halfLine(hz.A, hz.B*float64(v)+hz.C, 0, w-1)
		if glo > ghi {
			unfilled += w - validCount(fi, v, 0, w-1, w, h)
			continue
		}
		unfilled += (ghi - glo + 1) - validCount(gi, v, glo, ghi, w, h)
		// Far columns are the rest of the row: [0, glo) and (ghi, w-1].
		if glo > 0 {
			unfilled += glo - validCount(fi, v, 0, glo-1, w, h)
		}
		if ghi < w-1 {
			unfilled += (w - 1 - ghi) - validCount(fi, v, ghi+1, w-1, w, h)
		}
	}
	return unfilled
}

// warpBand warps the band rows with both maps into the owned buffers and
// blends them into target (the band rows of the destination) with the
// precomputed weights: out = (g·w + f·(256-w) + 128) >> 8.
func (s *Synthesizer) warpBand(target, src bgrView, gi, fi Homography) error {
	g, err := matView(&s.bandG)
	if err != nil {
		return fmt.Errorf("band buffer: %w", err)
	}
	f, err := matView(&s.bandF)
	if err != nil {
		return fmt.Errorf("band buffer: %w", err)
	}
	if err := warpRows(g, src, gi, s.rowA); err != nil {
		return err
	}
	if err := warpRows(f, src, fi, s.rowA); err != nil {
		return err
	}
	wts := s.weights
	w := s.cam.Width
	for r := 0; r < target.H; r++ {
		gr, fr := g.Pix[r*g.Stride:r*g.Stride+3*w], f.Pix[r*f.Stride:r*f.Stride+3*w]
		out := target.Pix[r*target.Stride : r*target.Stride+3*w]
		for u, wt := range wts[r*w : (r+1)*w] {
			blendPixel(out, gr, fr, 3*u, wt)
		}
	}
	return nil
}

// blendPixel writes at byte j of out the ground pixel g blended with the
// far pixel f with weight wt/256: (g·wt + f·(256-wt) + 128) >> 8.
func blendPixel(out, g, f []byte, j int, wt uint16) {
	switch wt {
	case 256:
		out[j], out[j+1], out[j+2] = g[j], g[j+1], g[j+2]
	case 0:
		out[j], out[j+1], out[j+2] = f[j], f[j+1], f[j+2]
	default:
		a, b := uint32(wt), uint32(256-wt)
		out[j] = byte((uint32(g[j])*a + uint32(f[j])*b + 128) >> 8)
		out[j+1] = byte((uint32(g[j+1])*a + uint32(f[j+1])*b + 128) >> 8)
		out[j+2] = byte((uint32(g[j+2])*a + uint32(f[j+2])*b + 128) >> 8)
	}
}

// prepare is the common start of every warp: it checks the synthesizer and
// the source frame, inverts the ground and far homographies (output to
// source), sizes dst like src, and undistorts src into the synthesizer's own
// buffer when the camera has distortion. It returns the inverses and the
// source to sample (src itself, or that buffer, owned by s).
func (s *Synthesizer) prepare(src gocv.Mat, ground, far Homography, dst *gocv.Mat) (gi, fi Homography, _ gocv.Mat, err error) {
	if s.closed {
		return gi, fi, src, ErrClosed
	}
	if err := checkFrame("source frame", &src, s.cam.Width, s.cam.Height); err != nil {
		return gi, fi, src, err
	}
	if gi, err = ground.Inverse(); err != nil {
		return gi, fi, src, fmt.Errorf("ground homography: %w", err)
	}
	if fi, err = far.Inverse(); err != nil {
		return gi, fi, src, fmt.Errorf("far homography: %w", err)
	}
	if err := ensureLike(dst, src); err != nil {
		return gi, fi, src, err
	}
	if s.undistort {
		gocv.Remap(src, &s.undist, &s.map1, &s.map2, gocv.InterpolationLinear, gocv.BorderConstant, neutralFill)
		src = s.undist
	}
	return gi, fi, src, nil
}
