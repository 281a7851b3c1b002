package predictor

import (
	"fmt"
	"image"
	"math"
	"unsafe"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// Defaults of MoverOptions. They are design choices of this project.
const (
	// DefaultMoverWidthPx is the width of the downscaled frames compared.
	DefaultMoverWidthPx = 320
	// DefaultMoverThreshold is the grey-level difference, after the
	// vehicle's own motion is compensated, above which a pixel changed.
	DefaultMoverThreshold = 20
	// DefaultMoverMinAreaPx is the least bounding-box area of a changed
	// region at full resolution, pixels (about 25x25 px): smaller ones are
	// noise or texture misfit. (A box, not the changed pixels: a uniformly
	// coloured thing changes only along its edges.) Threshold and area were chosen on vtest.avi (see
	// TestMoversOnVtest).
	DefaultMoverMinAreaPx = 600
	// DefaultMoverBaselineMs is how far back the motion evidence reaches:
	// the held frame is compared with the oldest kept real frame at most
	// this much older. Two frames 33 ms apart show too little of a car
	// coming head-on or of a pedestrian walking along the street; 200 ms
	// shows it, while the compensation of the vehicle's own motion still
	// holds (chosen on our simulated street with traffic and vtest.avi, see
	// README).
	DefaultMoverBaselineMs = 200.0
	// MoverHistory is the number of real frames older than the frame
	// before the held one that a Filler keeps for the motion evidence (their
	// buffers rotate, nothing is copied): with the held frame and the one
	// before it they span 7 frame periods, 233 ms at 30 fps.
	MoverHistory = 6
	// DefaultMoverMinSpeedPxPerS sets the least growth of a mark's zone
	// (a quarter of it per second on every side, see Mover.Zone),
	// full-resolution pixels per second, also when no displacement was
	// measured.
	DefaultMoverMinSpeedPxPerS = 100.0
)

// MoverOptions configures the detection of regions that moved on their own.
// The zero value uses the defaults.
type MoverOptions struct {
	// Off disables the detection and the marks.
	Off bool
	// WidthPx of the downscaled comparison; 0 means DefaultMoverWidthPx,
	// otherwise >= 64.
	WidthPx int
	// Threshold in grey levels; 0 means DefaultMoverThreshold.
	Threshold int
	// MinAreaPx at full resolution; 0 means DefaultMoverMinAreaPx.
	MinAreaPx int
	// BaselineMs: the held frame is compared with the oldest kept real
	// frame (see MoverHistory) at most BaselineMs older; 0 means
	// DefaultMoverBaselineMs. Without an older frame within it, the frame
	// before the held one is used.
	BaselineMs float64
}

// baselineUs returns the baseline in microseconds.
func (o MoverOptions) baselineUs() int64 {
	b := o.BaselineMs
	if b == 0 {
		b = DefaultMoverBaselineMs
	}
	return int64(math.Round(b * 1000))
}

// Validate reports options out of range, wrapping ErrInvalidConfig.
func (o MoverOptions) Validate() error {
	if o.WidthPx != 0 && o.WidthPx < 64 {
		return fmt.Errorf("mover WidthPx = %d, want 0 (default %d) or >= 64: %w", o.WidthPx, DefaultMoverWidthPx, ErrInvalidConfig)
	}
	if o.Threshold < 0 || o.Threshold > 254 {
		return fmt.Errorf("mover Threshold = %d, want 0 (default %d) or 1..254: %w", o.Threshold, DefaultMoverThreshold, ErrInvalidConfig)
	}
	if o.MinAreaPx < 0 {
		return fmt.Errorf("mover MinAreaPx = %d, want >= 0: %w", o.MinAreaPx, ErrInvalidConfig)
	}
	if !(o.BaselineMs >= 0) || math.IsInf(o.BaselineMs, 1) {
		return fmt.Errorf("mover BaselineMs = %g, want 0 (default %g) or a finite positive time: %w", o.BaselineMs, DefaultMoverBaselineMs, ErrInvalidConfig)
	}
	return nil
}

// Mover is a region of the held frame where something moved on its own
// between the last two real frames.
type Mover struct {
	// Box is its last known place in the held frame, full-resolution
	// pixels: the changed region (it covers where the thing was in both
	// frames), up to the height of a road user at its foot.
	Box image.Rectangle
	// VxPxPerS, VyPxPerS is its apparent velocity in the image,
	// full-resolution pixels per second, from the two frames.
	VxPxPerS, VyPxPerS float64
	// Shown is where the predicted picture shows the last known place
	// (set by the Filler when it places the marks on a predicted frame;
	// empty in the held frame's model): the synthesis moves the thing's
	// pixels as static scene, and the road map smears a thing standing on
	// the road away from where it would stand had it stopped. Zone
	// includes it.
	Shown image.Rectangle
}

// Zone returns where the mover could be ageMs after the held frame, or is
// shown: the bounding box of Box and Box moved by velocity · age, grown on
// every side by a quarter of that displacement, or of
// DefaultMoverMinSpeedPxPerS · age if that is more (the uncertainty of the
// speed and of its direction, growing with the apparent speed; design
// choices), joined with Shown.
func (m Mover) Zone(ageMs float64) image.Rectangle {
	a := ageMs / 1000
	dx, dy := m.VxPxPerS*a, m.VyPxPerS*a
	moved := m.Box.Add(image.Pt(int(math.Round(dx)), int(math.Round(dy))))
	g := int(math.Ceil(0.25 * math.Max(math.Hypot(dx, dy), DefaultMoverMinSpeedPxPerS*a)))
	return m.Box.Union(moved).Inset(-g).Union(m.Shown)
}

// moverMaxSpeedWidthsPerS bounds the apparent speed the shift search
// finds over the baseline, picture widths per second (16 low-resolution
// pixels over 200 ms at 320 px; at least the two-frame search's 8 px).
// Larger searches found chance matches on vtest.avi's walkers (precision
// 0.29 -> 0.24 at 0.75); design choice.
const moverMaxSpeedWidthsPerS = 0.25

// The shift search looks within moverNearPx low-resolution pixels first and
// takes a farther shift only if its cost is below moverFarGain times the
// near best's (better by a fifth: a far match in plain or repeating texture
// is easily found by chance). When the near search's best lies at its
// bound, the cost still falls toward larger shifts and the near result is
// not a minimum: a farther shift is then taken below moverBoundGain times
// it (better by a twentieth).
// On simdrive --traffic seeds 1 to 4 the regions this concerns are near
// cars passing beside the vehicle and clusters near the picture's side
// (their best near shift was 9 px, the near search's reach). Design
// choices.
const (
	moverNearPx    = 8
	moverFarGain   = 0.8
	moverBoundGain = 0.95
)

// moverCutMaxPx bounds the part of a region cut off as the part the thing
// left (its trailing part), low-resolution pixels: the near search's reach
// and its refinement. A farther shift sets the apparent speed (and so the
// zone), not the cut: the region's trailing part is what the compensation
// of the older frame left (the road map smears a near thing's body), not the
// shift at the base's scale, and cutting by a farther shift took the rear
// of a long van passing close beside the vehicle (simdrive --traffic, seed
// 3, held frame 331). Design choice.
const moverCutMaxPx = moverNearPx + 1

// moverClosePx is the closing that joins a thing's changed edges into one
// region, low-resolution pixels. 9 joined too much clutter with the 200 ms
// baseline (regions spanning half the picture on our street with traffic);
// 5 keeps vtest.avi's walkers whole (design choice).
const moverClosePx = 5

// A region is the parallax of a static thing standing where it stands (a
// post, a sign, a corner the road, far and upright planes do not model),
// not motion, when a static upright at the region's base explains its
// change clearly better than the compensation did (its residual at most
// moverStaticGain of the compensated one) and the region's own shift
// improves on that by little (its residual above moverOwnGain of the
// static one). Chosen on our simulated streets with traffic (seeds 1 to 4,
// at 10 and 30 % frame loss), where it removes about a twelfth of the
// marked area of regions and almost none of the road users; design choice.
const (
	moverStaticGain = 0.7
	moverOwnGain    = 0.8
)

// staticAtBase reports whether region id (in box) is the parallax of a
// static upright at its base: c0 its residual as that upright would have
// moved, cb with its best own shift, both against the uncompensated older
// frame; the compensated older frame c (the road, far and upright maps)
// gives the region's compensated residual, the least within ±1 px (the
// low resolution's rounding).
func staticAtBase(c, b []byte, lab []int32, id int32, w, h int, box image.Rectangle, c0, cb float64) bool {
	cc := math.Inf(1)
	for dy := -1; dy <= 1; dy++ {
		for dx := -1; dx <= 1; dx++ {
			cc = min(cc, regionCost(c, b, lab, id, w, h, box, affine{k: 1}, dx, dy))
		}
	}
	return c0 < moverStaticGain*cc && cb > moverOwnGain*c0
}

// A region is also the parallax of a static upright when one standing on
// the road at some row of the region, not only at its bottom, explains it:
// the road map smears a post or bollard over the road below it, so its
// region reaches far below the post's foot. It is dropped when the best
// such upright's residual (the least within ±1 px) is below moverSweepGain
// of the compensated one and the region's own shift improves on it by
// less than a twentieth (moverSweepOwnGain). The feet tried are
// moverSweepRows rows spread from the region's bottom to its top (a plane
// sweep over the foot row). Chosen on our simulated streets with traffic
// (seeds 1 to 4 at 30 % frame loss: it removed about an eighth of the
// wrongly marked area left after staticAtBase and under 1 % of the road
// users' area); design choice. The own gain was a tenth until a uniformly
// coloured van passing close beside the vehicle (simdrive --traffic, seed
// 2, held frame 540) was dropped with its own shift 9 % better than the
// sweep's upright (residuals 28.4 and 31.1 grey levels, compensated 55.4)
// once the filter carried the slip between telemetry samples: the yaw
// between the compared frames came within 0.3 mrad of the truth instead of
// 1.2, and the region's shape and margin changed with it. Dropping a road user is the
// worse error, so the sweep now needs the own shift to add almost nothing
// (0.93 and 1.0 give the same figures on seeds 1 and 2 at default loss).
const (
	moverSweepGain    = 0.7
	moverSweepOwnGain = 0.95
	moverSweepRows    = 16
)

// A road user stands on the road or the pavement and is at most
// moverRoadUserHeightM tall above what it stands on (people and cars up to
// about 2 m; vans and buses are taller and keep only their lower part
// marked), the pavement at most moverKerbM above the road (kerbs are
// about 0.1 to 0.15 m). Values from common practice, not measured here. A
// region's box is cut above the top of such a thing standing at the
// region's foot (roadUserTopRow), unless its foot is within moverFootCutPx
// low-resolution pixels of the picture's bottom (a near car whose foot
// the picture cuts off stands nearer than its region's bottom says). The
// foot is taken moverFootSlackPx low-resolution pixels below the region's
// bottom (nearer, so more is kept): the change can miss a thing's lowest
// rows (a thin pedestrian's region ended 3 rows above its feet on
// simdrive --traffic, seed 2 at 30 % frame loss, and the cut at the
// region's bottom took 3 of its 13 rows), and at 320 px a foot's row
// weighs a lot in a far thing's distance. Design choice.
const (
	moverRoadUserHeightM = 2.0
	moverKerbM           = 0.15
	moverFootCutPx       = 3
	moverFootSlackPx     = 4
)

// roadUserTopRow returns the row (full resolution, undistorted) of the top
// of the tallest road user whose foot is seen at pixel (u, v): the pixel's
// ray meets the pavement (moverKerbM above the road plane; the ray meets
// it nearer than the road, so the top is seen higher: the more lenient
// guess for a foot on the road) and the point moverRoadUserHeightM above
// that along the road's normal is projected back. ok is false when the ray does
// not meet the pavement ahead (at or above the horizon) or that top is
// behind the camera.
func roadUserTopRow(c Camera, u, v float64) (float64, bool) {
	r := mul3v(c.KInv(), vec3{u, v, 1})
	n := c.GroundNormalCamera() // up; the road is {X : n·X + HeightM = 0}
	den := dot3(n, r)
	if !(den < 0) || !(c.HeightM > moverKerbM) {
		return 0, false
	}
	t := -(c.HeightM - moverKerbM) / den
	top := vec3{t*r[0] + moverRoadUserHeightM*n[0], t*r[1] + moverRoadUserHeightM*n[1], t*r[2] + moverRoadUserHeightM*n[2]}
	if !(top[2] > 0) {
		return 0, false
	}
	return c.Fy*top[1]/top[2] + c.Cy, true
}

// uprightAt maps low-resolution pixels of the newer frame to the older one
// as a static upright surface standing on the road would have moved: back
// is the road map newer -> older at full resolution, s and sy the
// low-resolution scales (low-resolution / full-resolution pixels), hz the
// horizon.
type uprightAt struct {
	back  Homography
	s, sy float64
	hz    Line
}

// at returns the map of an upright facing the camera whose foot is
// low-resolution row row across columns x0 to x1 (its bottom corners
// follow the road, the rest scales with their distance), and false when
// that foot is not below the horizon or the scale is implausible (outside
// 0.25..4).
func (u uprightAt) at(x0, x1, row int) (affine, bool) {
	x0f, x1f, ybf := float64(x0)/u.s, float64(x1)/u.s, float64(row)/u.sy
	if x1f <= x0f || u.hz.SignedDistance(x0f, ybf) <= 0 || u.hz.SignedDistance(x1f, ybf) <= 0 {
		return affine{}, false
	}
	u0, v0, ok0 := u.back.Apply(x0f, ybf)
	u1, v1, ok1 := u.back.Apply(x1f, ybf)
	k := math.Hypot(u1-u0, v1-v0) / (x1f - x0f)
	if !ok0 || !ok1 || !(k > 0.25 && k < 4) {
		return affine{}, false
	}
	return affine{k: k, ox: u.s * (u0 - k*x0f), oy: u.sy * ((v0+v1)/2 - k*ybf)}, true
}

// leastNear returns the least regionCost within ±1 px of no shift (the low
// resolution's rounding).
func leastNear(c, b []byte, lab []int32, id int32, w, h int, box image.Rectangle, af affine) float64 {
	least := math.Inf(1)
	for dy := -1; dy <= 1; dy++ {
		for dx := -1; dx <= 1; dx++ {
			least = min(least, regionCost(c, b, lab, id, w, h, box, af, dx, dy))
		}
	}
	return least
}

// staticSweep returns the least residual of region id (in box) against the
// uncompensated older frame a as a static upright standing on the road
// would have moved, its foot at one of about moverSweepRows rows from the
// region's bottom up to its top, each the least within ±1 px; +Inf if no
// such foot is on the road.
func staticSweep(a, b []byte, lab []int32, id int32, w, h int, box image.Rectangle, up uprightAt) float64 {
	least := math.Inf(1)
	step := max(1, box.Dy()/moverSweepRows)
	for r := box.Max.Y; r > box.Min.Y; r -= step {
		if af, ok := up.at(box.Min.X, box.Max.X, r); ok {
			least = min(least, leastNear(a, b, lab, id, w, h, box, af))
		}
	}
	return least
}

// staticInside reports whether a region is the parallax of a static
// upright standing inside it: sw its least residual over the sweep
// (staticSweep), cc its compensated residual (leastNear of the compensated
// frame), cb its residual with its own shift (bestShift).
func staticInside(sw, cc, cb float64) bool {
	return sw < moverSweepGain*cc && cb > moverSweepOwnGain*sw
}

// MoverModel holds the movers of the held frame. The zero value is empty.
type MoverModel struct {
	Movers []Mover
}

// MoverDetector finds regions that moved on their own between two real
// frames: the older frame is brought into the newer one's geometry with the
// road map below the horizon, the far map above it and each upright
// segment's plane map over its segment (the vehicle's own motion), both
// are compared in grey at reduced resolution, differences above Threshold
// are cleaned (opening, closing) and grouped into connected regions; a
// region whose bottom is above the horizon is dropped (a road user stands
// on the road). Each region's apparent displacement is the shift (up to
// moverMaxSpeedWidthsPerS over the frames' interval) that best matches its
// pixels against the older frame as a static upright surface standing at
// the region's base would have moved; a region that such a static upright
// explains and its own shift barely improves on is dropped (staticAtBase:
// a post or corner the compensation put at the wrong depth), and so is one
// that a static upright standing at some row inside it explains
// (staticSweep, staticInside: a post smeared over the road below it); its
// last known place is the region without the part it left, and without
// what reaches above the tallest road user standing at the region's foot
// (roadUserTopRow: clutter behind or above the thing).
// It owns scratch images (Close frees them); not safe for concurrent use.
type MoverDetector struct {
	opts                         MoverOptions
	a, b, tmp, comp, w, diff, hm gocv.Mat
	labels, stats, cents, kern   gocv.Mat
	close                        gocv.Mat // closing element joining a thing's edges
	allocated                    bool
}

// NewMoverDetector validates opts and returns a detector.
func NewMoverDetector(opts MoverOptions) (*MoverDetector, error) {
	if err := opts.Validate(); err != nil {
		return nil, err
	}
	return &MoverDetector{opts: opts}, nil
}

func (d *MoverDetector) scratch() []*gocv.Mat {
	return []*gocv.Mat{&d.a, &d.b, &d.tmp, &d.comp, &d.w, &d.diff, &d.hm, &d.labels, &d.stats, &d.cents, &d.kern, &d.close}
}

// Close frees the scratch images. Safe to call more than once.
func (d *MoverDetector) Close() error {
	if d.allocated {
		for _, m := range d.scratch() {
			m.Close()
		}
		d.allocated = false
	}
	return nil
}

// Detect writes into model (reusing its storage) the movers of last
// (captured at m.T1Us) against prev (at m.T0Us), m the vehicle motion
// between them, farDepthM the far-scene depth and up the upright structure
// of last (nil for none). static, if not nil, is the UprightEstimator that
// estimated up from the same frames at the detector's downscaled size: a
// changed region then counts only if no static surface hypothesis that
// could stand there explains two thirds of it (UprightEstimator.Explains:
// parallax of posts and other structure the model does not keep is not
// motion).
func (d *MoverDetector) Detect(prev, last gocv.Mat, cam Camera, m filter.Motion, farDepthM float64, up *UprightModel, static *UprightEstimator, model *MoverModel) error {
	model.Movers = model.Movers[:0]
	if err := CheckMotion(m); err != nil {
		return err
	}
	for _, f := range []*gocv.Mat{&prev, &last} {
		if err := checkFrame("mover frame", f, cam.Width, cam.Height); err != nil {
			return err
		}
	}
	o := d.opts
	w := min(cmp0(o.WidthPx, DefaultMoverWidthPx), cam.Width)
	s := float64(w) / float64(cam.Width)
	h := max(8, int(math.Round(float64(cam.Height)*s)))
	sy := float64(h) / float64(cam.Height)
	if !d.allocated {
		for _, p := range d.scratch() {
			*p = gocv.NewMat()
		}
		d.hm.Close()
		d.hm = gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
		d.kern.Close()
		d.kern = gocv.GetStructuringElement(gocv.MorphEllipse, image.Pt(3, 3))
		d.close.Close()
		d.close = gocv.GetStructuringElement(gocv.MorphRect, image.Pt(moverClosePx, moverClosePx))
		d.allocated = true
	}
	size := image.Pt(w, h)
	gocv.Resize(prev, &d.tmp, size, 0, 0, gocv.InterpolationArea)
	gocv.CvtColor(d.tmp, &d.a, gocv.ColorBGRToGray)
	gocv.Resize(last, &d.tmp, size, 0, 0, gocv.InterpolationArea)
	gocv.CvtColor(d.tmp, &d.b, gocv.ColorBGRToGray)

	// Compensated older frame in the newer one's geometry (inverse maps
	// newer -> older, as UprightEstimator).
	dx, dy, dyaw := invertPlanar(m.DxM, m.DyM, m.DyawRad)
	warp := func(hf Homography, dst *gocv.Mat) error {
		hs := scaleHomography(hf, s, sy)
		if !hs.IsFinite() {
			return fmt.Errorf("mover compensation: %w", ErrSingular)
		}
		if err := setMat3(&d.hm, hs); err != nil {
			return err
		}
		gocv.WarpPerspectiveWithParams(d.a, dst, d.hm, size, gocv.InterpolationLinear|gocv.WarpInverseMap, gocv.BorderReplicate, neutralFill)
		return nil
	}
	if err := warp(GroundHomographyPlanar(cam, dx, dy, dyaw), &d.comp); err != nil {
		return err
	}
	if err := warp(FarHomographyPlanar(cam, dx, dy, dyaw, farDepthM), &d.w); err != nil {
		return err
	}
	cp, err := d.comp.DataPtrUint8()
	if err != nil {
		return fmt.Errorf("mover scratch: %w", err)
	}
	fp, err := d.w.DataPtrUint8()
	if err != nil {
		return fmt.Errorf("mover scratch: %w", err)
	}
	// Above the horizon (signed distance < 0 at the low-resolution pixel's
	// centre in full-resolution coordinates) the far map's pixels.
	hz := cam.Horizon()
	for y := 0; y < h; y++ {
		// The signed distance is affine in x: a x + c >= 0 is road.
		a := hz.A / s
		c := hz.A*(0.5/s-0.5) + hz.B*((float64(y)+0.5)/sy-0.5) + hz.C
		lo, hi := halfLine(a, c, 0, w-1)
		for x := 0; x < w; x++ {
			if x < lo || x > hi {
				cp[y*w+x] = fp[y*w+x]
			}
		}
	}
	if up != nil {
		for _, seg := range up.Segments {
			x0, x1 := int(math.Floor(float64(seg.Col0)*s)), min(w, int(math.Ceil(float64(seg.Col1)*s)))
			if x0 >= x1 {
				continue
			}
			// Only the segment's columns are warped (into the same place
			// of the full-size scratch image).
			hs := scaleHomography(PlaneHomography(cam, dx, dy, dyaw, seg.Plane), s, sy)
			if !hs.IsFinite() {
				return fmt.Errorf("mover compensation: %w", ErrSingular)
			}
			if err := setMat3(&d.hm, hs.shiftCols(x0)); err != nil {
				return err
			}
			rect := image.Rect(x0, 0, x1, h)
			roi := d.w.Region(rect)
			gocv.WarpPerspectiveWithParams(d.a, &roi, d.hm, rect.Size(), gocv.InterpolationLinear|gocv.WarpInverseMap, gocv.BorderReplicate, neutralFill)
			roi.Close()
			for x := max(0, x0); x < x1; x++ {
				u := (float64(x)+0.5)/s - 0.5
				base := seg.BaseRow0 + (seg.BaseRow1-seg.BaseRow0)*(u-float64(seg.Col0)+0.5)/float64(seg.Col1-seg.Col0)
				y0, y1 := max(0, int(math.Ceil((seg.TopRow+0.5)*sy-0.5))), min(h, int(math.Floor((base+0.5)*sy-0.5))+1)
				for y := y0; y < y1; y++ {
					cp[y*w+x] = fp[y*w+x]
				}
			}
		}
	}
	gocv.AbsDiff(d.comp, d.b, &d.diff)
	thr := cmp0(o.Threshold, DefaultMoverThreshold)
	gocv.Threshold(d.diff, &d.diff, float32(thr), 255, gocv.ThresholdBinary)
	gocv.MorphologyEx(d.diff, &d.diff, gocv.MorphOpen, d.kern)
	gocv.Dilate(d.diff, &d.diff, d.kern)
	gocv.Dilate(d.diff, &d.diff, d.kern)
	// A uniformly coloured thing changes only at its edges: close gaps of
	// up to moverClosePx low-resolution pixels so its edges make one region.
	gocv.MorphologyEx(d.diff, &d.diff, gocv.MorphClose, d.close)
	n := gocv.ConnectedComponentsWithStats(d.diff, &d.labels, &d.stats, &d.cents)
	minArea := float64(cmp0(o.MinAreaPx, DefaultMoverMinAreaPx)) * s * sy
	ap, err := d.a.DataPtrUint8()
	if err != nil {
		return fmt.Errorf("mover scratch: %w", err)
	}
	back := GroundHomographyPlanar(cam, dx, dy, dyaw) // newer -> older, full resolution
	ua := uprightAt{back: back, s: s, sy: sy, hz: hz}
	bp, err := d.b.DataPtrUint8()
	if err != nil {
		return fmt.Errorf("mover scratch: %w", err)
	}
	dt := float64(m.T1Us-m.T0Us) / 1e6
	// The shift is searched up to moverMaxSpeedWidthsPerS over the
	// baseline (at least 8 low-resolution pixels).
	searchPx := max(8, int(math.Ceil(moverMaxSpeedWidthsPerS*float64(w)*dt)))
	lb, err := d.labels.DataPtrUint8()
	if err != nil || d.labels.Type() != gocv.MatTypeCV32S || len(lb) < 4*w*h {
		return fmt.Errorf("mover labels are not a %dx%d CV_32S image (%v): %w", w, h, err, ErrFrameFormat)
	}
	lab := unsafe.Slice((*int32)(unsafe.Pointer(&lb[0])), w*h) // CV_32S, native byte order
	for i := 1; i < n; i++ {
		x := int(d.stats.GetIntAt(i, int(gocv.CC_STAT_LEFT)))
		y := int(d.stats.GetIntAt(i, int(gocv.CC_STAT_TOP)))
		bw := int(d.stats.GetIntAt(i, int(gocv.CC_STAT_WIDTH)))
		bh := int(d.stats.GetIntAt(i, int(gocv.CC_STAT_HEIGHT)))
		if float64(bw*bh) < minArea {
			continue
		}
		// A road user stands on the road: a region whose bottom is above
		// the horizon is a misfit of the static scene (a facade, a roof
		// line), not one.
		if r, ok := hz.RowAt((float64(x)+float64(bw)/2)/s - 0.5); ok && float64(y+bh)/sy-0.5 < r {
			continue
		}
		if static != nil && static.Explains(d.labels, int32(i), image.Rect(x, y, x+bw, y+bh), thr) {
			continue
		}
		// The region holds the thing at both places; its content in the
		// newer frame matched the older one shifted by (sx, sy), so it
		// moved by -(sx, sy) and its last place is the region without the
		// trailing part.
		// Its content is compared with the older frame as a static upright
		// surface standing at its base would have moved (the bottom
		// corners follow the road, the rest scales with their distance;
		// as placeMarks places the mark), so the shift is the thing's own
		// motion. A region whose bottom is not on the road keeps the
		// compensated frame.
		src, af, onBase := cp, affine{k: 1}, false
		if a, ok := ua.at(x, x+bw, y+bh); ok {
			src, af, onBase = ap, a, true
		}
		rbox := image.Rect(x, y, x+bw, y+bh)
		sx, sy0, c0, cb := bestShift(src, bp, lab, int32(i), w, h, rbox, af, searchPx)
		if onBase && staticAtBase(cp, bp, lab, int32(i), w, h, rbox, c0, cb) {
			continue
		}
		if onBase && staticInside(staticSweep(ap, bp, lab, int32(i), w, h, rbox, ua), leastNear(cp, bp, lab, int32(i), w, h, rbox, affine{k: 1}), cb) {
			continue
		}
		lx0, lx1, ly0, ly1 := x, x+bw, y, y+bh
		// The two dilations grew the region by 2 px on every side: take
		// them back, so the mark is as tight as the change.
		if bw > 6 && bh > 6 {
			lx0, lx1, ly0, ly1 = lx0+2, lx1-2, ly0+2, ly1-2
		}
		// A road user is at most moverRoadUserHeightM tall at the
		// distance of its foot: what the region holds above that is
		// clutter behind or above it (a facade, a post's top).
		if ly1 < h-moverFootCutPx {
			u := float64(lx0+lx1)/2/s - 0.5
			if top, ok := roadUserTopRow(cam, u, float64(ly1+moverFootSlackPx)/sy-0.5); ok {
				if t := int(math.Floor((top + 0.5) * sy)); t > ly0 && t < ly1 {
					ly0, bh = t, ly1-t
				}
			}
		}
		// The part it left is cut by at most moverCutMaxPx.
		cx, cy := max(-moverCutMaxPx, min(moverCutMaxPx, sx)), max(-moverCutMaxPx, min(moverCutMaxPx, sy0))
		if cx > 0 && cx < bw/2 { // moved left: drop the right end
			lx1 -= cx
		} else if cx < 0 && -cx < bw/2 {
			lx0 -= cx
		}
		if cy > 0 && cy < bh/2 {
			ly1 -= cy
		} else if cy < 0 && -cy < bh/2 {
			ly0 -= cy
		}
		// Moving toward a side of the picture within its own width of it,
		// the thing may reach beyond the region to that side.
		if sx > 0 && lx0 < bw {
			lx0 = bodyToSide(bp, w, lx0, lx1, ly0, ly1, -1, thr)
		} else if sx < 0 && w-lx1 < bw {
			lx1 = bodyToSide(bp, w, lx0, lx1, ly0, ly1, 1, thr)
		}
		var vx, vy float64
		if dt > 0 {
			vx, vy = -float64(sx)/s/dt, -float64(sy0)/sy/dt
		}
		box := image.Rect(int(math.Floor(float64(lx0)/s)), int(math.Floor(float64(ly0)/sy)),
			int(math.Ceil(float64(lx1)/s)), int(math.Ceil(float64(ly1)/sy))).Intersect(image.Rect(0, 0, cam.Width, cam.Height))
		model.Movers = append(model.Movers, Mover{Box: box, VxPxPerS: vx, VyPxPerS: vy})
	}
	return nil
}

// bodyToSide returns how far toward the picture's side dir (-1 left, +1
// right) a thing whose last known place spans columns x0 to x1 (exclusive)
// and rows y0 to y1 (exclusive) of the newer frame b (w pixels wide, grey)
// reaches: the new x0 for dir -1, x1 for +1. A uniformly coloured body
// changes only at its ends, and a near one moving toward the side may have
// its leading end outside the picture (a van passing close beside the
// vehicle at the picture's edge), so its region holds only its trailing
// end; the columns beyond the region whose mean grey over the rows stays
// within thr of the region's leading column are taken as the same body.
// The Detector asks only for a thing moving toward that side whose region
// lies within its own width of it.
func bodyToSide(b []byte, w, x0, x1, y0, y1, dir, thr int) int {
	if y1 <= y0 || x1 <= x0 {
		if dir < 0 {
			return x0
		}
		return x1
	}
	mean := func(x int) float64 {
		sum := 0
		for y := y0; y < y1; y++ {
			sum += int(b[y*w+x])
		}
		return float64(sum) / float64(y1-y0)
	}
	if dir < 0 {
		ref, x := mean(x0), x0-1
		for x >= 0 && math.Abs(mean(x)-ref) <= float64(thr) {
			x--
		}
		return x + 1
	}
	ref, x := mean(x1-1), x1
	for x < w && math.Abs(mean(x)-ref) <= float64(thr) {
		x++
	}
	return x
}

// affine maps a low-resolution pixel (x, y) of the newer frame to
// (k x + ox, k y + oy) in the older one.
type affine struct{ k, ox, oy float64 }

// regionCost returns the mean absolute difference between the newer frame
// b over the pixels of region id (label image lab) in box, at most about
// 256 of them, and the older image c at the pixels af maps them to,
// shifted by (dx, dy); +Inf if none maps inside c.
func regionCost(c, b []byte, lab []int32, id int32, w, h int, box image.Rectangle, af affine, dx, dy int) float64 {
	step := max(1, int(math.Sqrt(float64(box.Dx()*box.Dy())/256)))
	sum, n := 0, 0
	for y := box.Min.Y; y < box.Max.Y; y += step {
		yy := int(math.Round(af.k*float64(y)+af.oy)) + dy
		if yy < 0 || yy >= h {
			continue
		}
		for x := box.Min.X; x < box.Max.X; x += step {
			if lab[y*w+x] != id {
				continue
			}
			xx := int(math.Round(af.k*float64(x)+af.ox)) + dx
			if xx < 0 || xx >= w {
				continue
			}
			sum += abs(int(b[y*w+x]) - int(c[yy*w+xx]))
			n++
		}
	}
	if n == 0 {
		return math.Inf(1)
	}
	return float64(sum) / float64(n)
}

// bestShift returns the shift (dx, dy), in low-resolution pixels, within
// ±r that minimises regionCost: how far the region's content moved between
// the two frames (against what af predicts); and the cost at no shift (c0)
// and at the shift returned (cb). The near shifts (within moverNearPx) are
// searched first, a farther one is taken only if it matches better
// (moverFarGain, or moverBoundGain when the near best lies at its bound).
func bestShift(c, b []byte, lab []int32, id int32, w, h int, box image.Rectangle, af affine, r int) (dx, dy int, c0, cb float64) {
	// Shifts searched on a grid of g = max(2, radius/8) px, then refined
	// by 1 px within g-1 of the best.
	cost := func(dx, dy int) float64 { return regionCost(c, b, lab, id, w, h, box, af, dx, dy) }
	search := func(r int) (bx, by int, bc float64) {
		g := max(2, r/8)
		bc = cost(0, 0)
		for dy := -r; dy <= r; dy += g {
			for dx := -r; dx <= r; dx += g {
				if c := cost(dx, dy); c < bc-1e-9 {
					bx, by, bc = dx, dy, c
				}
			}
		}
		cx, cy := bx, by
		for dy := cy - g + 1; dy <= cy+g-1; dy++ {
			for dx := cx - g + 1; dx <= cx+g-1; dx++ {
				if c := cost(dx, dy); c < bc-1e-9 {
					bx, by, bc = dx, dy, c
				}
			}
		}
		return bx, by, bc
	}
	// The near shifts first; a farther one only if it matches clearly
	// better, or a little better when the near best lies at the near
	// search's bound (see moverBoundGain).
	n := min(r, moverNearPx)
	bx, by, bc := search(n)
	if r > n {
		gain := moverFarGain
		if abs(bx) >= n || abs(by) >= n {
			gain = moverBoundGain
		}
		if fx, fy, fc := search(r); fc < gain*bc {
			bx, by, bc = fx, fy, fc
		}
	}
	return bx, by, cost(0, 0), bc
}
