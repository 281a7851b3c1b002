package predictor

import (
	"fmt"
	"image"
	"image/color"
	"math"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// Defaults of FarDepthOptions. They are design choices of this project.
const (
	// DefaultFarDepthWidthPx is the width of the downscaled frames the
	// sweep compares: coarse enough to be cheap (well under a millisecond
	// per candidate), fine enough for facades and trees.
	DefaultFarDepthWidthPx = 160
	// DefaultFarDepthMinBaselineM is the least translation between the two
	// frames for which depth is observable; below it the far scene is
	// taken to be at infinity (rotation only).
	DefaultFarDepthMinBaselineM = 0.3
)

// DefaultFarDepthCandidatesM returns the depths a sweep tries by default,
// metres, roughly evenly spaced in inverse depth; +Inf (rotation only) is
// always tried as well.
func DefaultFarDepthCandidatesM() []float64 {
	return []float64{8, 10, 12.5, 16, 20, 25, 32, 40, 50, 65, 85, 120, 200}
}

// FarDepthOptions configures the far-scene depth estimate of a Filler.
// The zero value uses the defaults.
type FarDepthOptions struct {
	// Off disables the estimate: the far scene is then always at infinity
	// (rotation-only homography above the horizon).
	Off bool
	// CandidatesM are the depths tried, metres (> 0); nil means
	// DefaultFarDepthCandidatesM. +Inf is always tried too.
	CandidatesM []float64
	// WidthPx is the width of the downscaled frames compared; 0 means
	// DefaultFarDepthWidthPx.
	WidthPx int
	// MinBaselineM is the least translation between the two frames for an
	// estimate; 0 means DefaultFarDepthMinBaselineM.
	MinBaselineM float64
}

// Validate reports a non-positive or NaN candidate, a width below 32 or a
// negative baseline, wrapping ErrInvalidConfig.
func (o FarDepthOptions) Validate() error {
	for i, d := range o.CandidatesM {
		if !(d > 0) {
			return fmt.Errorf("far depth candidate %d = %g m, want > 0: %w", i, d, ErrInvalidConfig)
		}
	}
	if o.WidthPx != 0 && o.WidthPx < 32 {
		return fmt.Errorf("far depth WidthPx = %d, want 0 (default) or >= 32: %w", o.WidthPx, ErrInvalidConfig)
	}
	if !(o.MinBaselineM >= 0) {
		return fmt.Errorf("far depth MinBaselineM = %g, want >= 0: %w", o.MinBaselineM, ErrInvalidConfig)
	}
	return nil
}

// FarDepthEstimator estimates how far away the scene above the horizon is,
// from the two newest real frames and the vehicle motion between them, so
// that predicted frames move it with the vehicle's translation instead of
// rotating it only.
//
// Method (a plane sweep with one plane): the far scene is modelled as a plane
// facing the camera at depth D. For each candidate D, the older frame is
// warped to the newer one with the plane-induced homography
// FarHomographyPlanar(motion, D), both downscaled to WidthPx and in grey, and
// the mean absolute difference is taken over the rows above the horizon band
// where the warp has a source. The candidate with the least difference wins;
// +Inf (rotation only) is one of the candidates, so a scene that is far away
// indeed keeps the rotation-only map. Like the ground plane, this is a model
// of the STATIC scene: it says nothing about anything that moves.
//
// An estimator owns scratch images (Close frees them) and is not safe for
// concurrent use.
type FarDepthEstimator struct {
	opts                         FarDepthOptions
	a, b, warped, mask, ones, hm gocv.Mat
	diff, diffMasked, tmpA, tmpB gocv.Mat
	allocated                    bool
}

// scratch lists the estimator's scratch images.
func (e *FarDepthEstimator) scratch() []*gocv.Mat {
	return []*gocv.Mat{&e.a, &e.b, &e.warped, &e.mask, &e.ones, &e.hm, &e.diff, &e.diffMasked, &e.tmpA, &e.tmpB}
}

// NewFarDepthEstimator validates opts and returns an estimator.
func NewFarDepthEstimator(opts FarDepthOptions) (*FarDepthEstimator, error) {
	if err := opts.Validate(); err != nil {
		return nil, err
	}
	return &FarDepthEstimator{opts: opts}, nil
}

// Close frees the scratch images. Safe to call more than once.
func (e *FarDepthEstimator) Close() error {
	if e.allocated {
		for _, m := range e.scratch() {
			m.Close()
		}
		e.allocated = false
	}
	return nil
}

// Estimate returns the far-scene depth in metres (+Inf for rotation only)
// that best maps prev (captured at m.T0Us) onto last (captured at m.T1Us),
// where m is the vehicle motion between them. Both frames are cam-sized BGR.
// It returns +Inf with no error when the translation is below MinBaselineM
// or too little of the far scene is visible to compare.
func (e *FarDepthEstimator) Estimate(prev, last gocv.Mat, cam Camera, m filter.Motion) (float64, error) {
	if err := CheckMotion(m); err != nil {
		return math.Inf(1), err
	}
	for _, f := range []*gocv.Mat{&prev, &last} {
		if err := checkFrame("far depth frame", f, cam.Width, cam.Height); err != nil {
			return math.Inf(1), err
		}
	}
	minBase := e.opts.MinBaselineM
	if minBase == 0 {
		minBase = DefaultFarDepthMinBaselineM
	}
	if math.Hypot(m.DxM, m.DyM) < minBase {
		return math.Inf(1), nil
	}
	w := e.opts.WidthPx
	if w == 0 {
		w = DefaultFarDepthWidthPx
	}
	if w > cam.Width {
		w = cam.Width
	}
	s := float64(w) / float64(cam.Width)
	// Only the rows above the horizon band of the newer frame are compared,
	// so only they are scaled down: the frame's top part, rowsFull rows.
	hz := cam.Horizon()
	top := math.Inf(1)
	for _, u := range []float64{0, float64(cam.Width - 1)} {
		if v, ok := hz.RowAt(u); ok {
			top = math.Min(top, v)
		}
	}
	rowsFull := int(math.Min(math.Floor(top-float64(DefaultBandPx)), float64(cam.Height)))
	h := int(math.Round(float64(rowsFull) * s))
	if h < 8 {
		return math.Inf(1), nil
	}
	sy := float64(h) / float64(rowsFull)
	if !e.allocated {
		for _, p := range e.scratch() {
			*p = gocv.NewMat()
		}
		e.hm.Close()
		e.hm = gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
		e.allocated = true
	}
	size := image.Pt(w, h)
	crop := image.Rect(0, 0, cam.Width, rowsFull)
	prevTop, lastTop := prev.Region(crop), last.Region(crop)
	gocv.Resize(prevTop, &e.tmpA, size, 0, 0, gocv.InterpolationArea)
	gocv.Resize(lastTop, &e.tmpB, size, 0, 0, gocv.InterpolationArea)
	prevTop.Close()
	lastTop.Close()
	gocv.CvtColor(e.tmpA, &e.a, gocv.ColorBGRToGray)
	gocv.CvtColor(e.tmpB, &e.b, gocv.ColorBGRToGray)
	if e.ones.Rows() != h || e.ones.Cols() != w {
		e.ones.Close()
		e.ones = gocv.NewMatWithSizeFromScalar(gocv.NewScalar(255, 0, 0, 0), h, w, gocv.MatTypeCV8U)
	}
	candidates := e.opts.CandidatesM
	if candidates == nil {
		candidates = DefaultFarDepthCandidatesM()
	}
	best, bestCost := math.Inf(1), math.Inf(1)
	minValid := float64(w*h) / 4
	for i := -1; i < len(candidates); i++ {
		d := math.Inf(1)
		if i >= 0 {
			d = candidates[i]
		}
		hs := scaleHomography(FarHomographyPlanar(cam, m.DxM, m.DyM, m.DyawRad, d), s, sy)
		if !hs.IsFinite() {
			continue
		}
		if err := setMat3(&e.hm, hs); err != nil {
			return math.Inf(1), err
		}
		gocv.WarpPerspectiveWithParams(e.a, &e.warped, e.hm, size, gocv.InterpolationLinear, gocv.BorderConstant, color.RGBA{})
		gocv.WarpPerspectiveWithParams(e.ones, &e.mask, e.hm, size, gocv.InterpolationNearestNeighbor, gocv.BorderConstant, color.RGBA{})
		valid := float64(gocv.CountNonZero(e.mask))
		if valid >= minValid {
			gocv.AbsDiff(e.warped, e.b, &e.diff)
			e.diffMasked.SetTo(gocv.NewScalar(0, 0, 0, 0))
			e.diff.CopyToWithMask(&e.diffMasked, e.mask)
			cost := e.diffMasked.Sum().Val1 / valid
			// Prefer the farther candidate on (near) ties: it is the
			// model with less motion.
			if cost < bestCost-1e-9 {
				best, bestCost = d, cost
			}
		}
	}
	return best, nil
}

// scaleHomography returns S H S^-1 with S = diag(sx, sy, 1): the same map on
// images scaled by sx across and sy down.
func scaleHomography(h Homography, sx, sy float64) Homography {
	h[0][1] *= sx / sy
	h[1][0] *= sy / sx
	h[0][2] *= sx
	h[1][2] *= sy
	h[2][0] /= sx
	h[2][1] /= sy
	return h
}
