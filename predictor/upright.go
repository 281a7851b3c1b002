package predictor

import (
	"fmt"
	"image"
	"math"
	"slices"
	"unsafe"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// Defaults of UprightOptions. They are design choices of this project.
const (
	// DefaultUprightBandPx is the width of a column band at full
	// resolution: 40 bands across 1280 px.
	DefaultUprightBandPx = 32
	// DefaultUprightWidthPx is the width of the downscaled frames the
	// estimate compares (a quarter of 1280).
	DefaultUprightWidthPx = 320
	// DefaultUprightMinGain is the share by which an upright hypothesis
	// must lower a band's matching cost below the road-and-far model to be
	// kept: it keeps textureless bands (where every hypothesis matches)
	// on the simpler model. With fronts tried out to 140 m, the error
	// budget (bench.ErrorBudget, default drive, exact motion) gained 7.62,
	// 7.68, 7.74 and 7.74 dB at 0.1, 0.05, 0.02 and 0.01 (far facades
	// differ from the far plane by a few per cent of the cost only), but
	// on the benchmark street (BenchmarkFillerTickVsBare1280x720) the
	// segments grew from 24 to 34 and 38 and a predicted frame from 1.01
	// to 1.18 and 1.19 bare warps, over the bound of one.
	DefaultUprightMinGain = 0.1
	// DefaultUprightMinBaselineM is the least translation between the two
	// frames for an estimate: 0.1 m moves a wall 4 m away by about 2.5% of
	// its distance, several pixels at a quarter of 720p, so one frame
	// interval at city speeds suffices.
	DefaultUprightMinBaselineM = 0.1
)

// DefaultUprightWallsM returns the lateral offsets of the walls parallel to
// the direction of travel that the estimate tries, metres from the vehicle
// axis (each is tried on the left, +y, and on the right, -y): from a narrow
// street out to the building fronts of a suburban street with front gardens
// (12.5 to 22 m on simdrive's default drive, which the error budget showed
// moved as road and far scene when the farthest wall tried was 13 m), and
// the side streets' fronts beyond them.
func DefaultUprightWallsM() []float64 {
	return []float64{2.5, 3, 3.5, 4, 4.5, 5, 5.5, 6, 6.5, 7, 7.5, 8, 9, 10, 11.5, 13, 15, 17.5, 20, 23, 27, 32}
}

// DefaultUprightFrontsM returns the distances ahead of the vehicle origin of
// the upright surfaces facing the vehicle (across the road) that the
// estimate tries, metres: out to 75 m, because the buildings at the end of
// a street, which the far plane moved when the farthest front tried was
// 30 m, carried a third of the facades' error in the error budget. Fronts
// at 100 and 140 m as well gained 0.03 dB more there but put segments on
// the far scene of the gap benchmark (BenchmarkGapVsBare1280x720), whose
// predicted frame then cost 1.07 bare warps instead of 0.85.
func DefaultUprightFrontsM() []float64 {
	return []float64{5, 6.5, 8, 10, 13, 17, 22, 30, 40, 55, 75}
}

// UprightOptions configures the upright-structure estimate of a Filler.
// The zero value uses the defaults.
type UprightOptions struct {
	// Off disables upright structure: predicted frames use the road and
	// far planes only.
	Off bool
	// BandPx is the column band width at full resolution; 0 means
	// DefaultUprightBandPx, otherwise 8..256.
	BandPx int
	// WidthPx is the width of the downscaled frames compared; 0 means
	// DefaultUprightWidthPx, otherwise >= 64.
	WidthPx int
	// WallsM and FrontsM are the hypotheses (see DefaultUprightWallsM and
	// DefaultUprightFrontsM); nil means the defaults. Values must be > 0.
	WallsM, FrontsM []float64
	// MinGain is the least relative cost decrease for an upright band;
	// 0 means DefaultUprightMinGain, otherwise in (0, 1).
	MinGain float64
	// MinBaselineM is the least translation between the two frames;
	// 0 means DefaultUprightMinBaselineM.
	MinBaselineM float64
}

// Validate reports options out of range, wrapping ErrInvalidConfig.
func (o UprightOptions) Validate() error {
	if o.BandPx != 0 && (o.BandPx < 8 || o.BandPx > 256) {
		return fmt.Errorf("upright BandPx = %d, want 0 (default %d) or 8..256: %w", o.BandPx, DefaultUprightBandPx, ErrInvalidConfig)
	}
	if o.WidthPx != 0 && o.WidthPx < 64 {
		return fmt.Errorf("upright WidthPx = %d, want 0 (default %d) or >= 64: %w", o.WidthPx, DefaultUprightWidthPx, ErrInvalidConfig)
	}
	for _, l := range [][]float64{o.WallsM, o.FrontsM} {
		for i, d := range l {
			if !(d > 0) || math.IsInf(d, 1) {
				return fmt.Errorf("upright hypothesis %d = %g m, want finite > 0: %w", i, d, ErrInvalidConfig)
			}
		}
	}
	if o.MinGain != 0 && !(o.MinGain > 0 && o.MinGain < 1) {
		return fmt.Errorf("upright MinGain = %g, want 0 (default) or in (0, 1): %w", o.MinGain, ErrInvalidConfig)
	}
	if !(o.MinBaselineM >= 0) {
		return fmt.Errorf("upright MinBaselineM = %g, want >= 0: %w", o.MinBaselineM, ErrInvalidConfig)
	}
	return nil
}

// Plane is the plane {X : Normal·X = DistM} in the camera coordinates of a
// frame (metres; Normal a unit vector).
type Plane struct {
	Normal [3]float64
	DistM  float64
}

// PlaneHomography returns the map, for points of the plane p given in the
// T0 camera, from T0 pixels to T1 pixels, when the vehicle moves by (dxM,
// dyM, dyawRad) from T0 to T1 (see RelativePose): K (R + t nᵀ/d) K^-1, the
// plane-induced homography (Hartley and Zisserman, "Multiple View
// Geometry", 2nd ed., result 13.1, from memory). The ground is the plane
// (n_up, -HeightM) and gives GroundHomographyPlanar; (e_z, D) gives
// FarHomographyPlanar.
func PlaneHomography(c Camera, dxM, dyM, dyawRad float64, p Plane) Homography {
	r, t := RelativePose(c, dxM, dyM, dyawRad)
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			r[i][j] += t[i] * p.Normal[j] / p.DistM
		}
	}
	return Homography(mul33(mul33(c.K(), r), c.KInv())).normalised()
}

// verticalPlane returns the plane {P : a·P = b} of vehicle coordinates
// (a a horizontal unit vector) in camera coordinates.
func verticalPlane(c Camera, a [3]float64, b float64) Plane {
	// P = R_cvᵀ X + C, so a·P = (R_cv a)·X + a·C.
	n := mul3v(c.RotationVehicleToCamera(), a)
	return Plane{Normal: n, DistM: b - dot3(a, c.CentreVehicle())}
}

// baseLine returns the image line where the plane meets the road: a pixel
// whose ray r = K^-1 p meets both has n·r/d = -n_g·r/h, so the line is
// K^-T (n/d + n_g/h). Not normalised.
func baseLine(c Camera, p Plane) [3]float64 {
	ng := c.GroundNormalCamera()
	var v vec3
	for i := 0; i < 3; i++ {
		v[i] = p.Normal[i]/p.DistM + ng[i]/c.HeightM
	}
	return mul3v(transpose3(c.KInv()), v)
}

// rowOn returns the row of line l at column u (ok false if l is vertical).
func rowOn(l [3]float64, u float64) (float64, bool) {
	if l[1] == 0 {
		return 0, false
	}
	return -(l[0]*u + l[2]) / l[1], true
}

// UprightSegment is one column band of the held frame where an upright
// surface stands on the road: pixels of columns [Col0, Col1) between row
// TopRow and the surface's base line (where it meets the road) are on the
// plane; above TopRow is the far scene.
type UprightSegment struct {
	Col0, Col1 int
	// TopRow is the row of the surface's top edge in the held frame
	// (-0.5: the image's top edge).
	TopRow float64
	// ClipRow, when positive, is the row from which a nearer segment of
	// the same band hides this one in the held frame: a farther facade
	// seen above a nearer one's top (stacked), its surface shown from
	// TopRow down to ClipRow only. 0: down to its base line.
	ClipRow float64
	// Plane in the held frame's camera coordinates.
	Plane Plane
	// BaseRow0 and BaseRow1 are the base line's rows at the band's edges
	// (pixel edges Col0-0.5 and Col1-0.5), in the held frame.
	BaseRow0, BaseRow1 float64
	// DepthM is the distance along the optical axis of the base point at
	// the band's centre: the painter's order (farther drawn first).
	DepthM float64
}

// clip returns row, or ClipRow if the segment is stacked and row lies below
// it: the lowest row of the segment shown at or above row.
func (s *UprightSegment) clip(row float64) float64 {
	if s.ClipRow > 0 {
		return min(row, s.ClipRow)
	}
	return row
}

// UprightModel is the upright structure of the held frame, column band by
// band: a column model in the spirit of the stixel world (Badino, Franke
// and Pfeiffer, "The Stixel World - A Compact Medium Level Representation of
// the 3D-World", DAGM 2009), with one vertical plane per band: a wall along
// the direction of travel or a surface facing the vehicle. Bands without a
// segment are road below the horizon and far scene above it. The zero value
// is an empty model. Like the road and far planes it models the STATIC
// scene only.
type UprightModel struct {
	Segments []UprightSegment
	// Tops holds, per column of the held frame, the first row its
	// segment's surface covers: the segment's TopRow, or lower where the
	// column shows no structure yet (sky beside a roofline or beside a
	// building's edge inside the band). The synthesis marks as disoccluded
	// only what the road or far map would fetch from a segment at or below
	// its column's top; sky above it is moved with the far scene. Nil (or
	// shorter than the frame's width) means every column starts at its
	// segment's TopRow.
	Tops []float32
}

// UprightEstimator finds the upright structure of the newer of two real
// frames: for each column band it compares, at reduced resolution and in
// grey, the newer frame with the older one warped through each hypothesis
// (road below the base line, the plane from there up to a top row, the far
// scene above; or road below the horizon and the far scene above it), as a
// plane sweep restricted to vertical planes, and keeps the hypothesis and
// top row with the least sum of absolute differences if it beats the
// road-and-far model by MinGain; the kept plane is then refined in
// distance and yaw on the band's own cost (refine) and again, with finer
// steps, at twice the resolution (refineFine), neighbouring segments
// that nearly meet are joined (joinSegments), and no segment reaches above
// its band's first textured row (firstTexturedRow). A farther surface seen
// above a segment's top gets a segment of its own (stacked). The cost per gap is
// about one low-resolution warp per hypothesis (57 by default), each
// restricted to the bands and rows where its plane can stand, about ten
// band-sized evaluations per segment for the refinement and eight at
// twice the resolution for the fine one.
//
// An estimator owns scratch images (Close frees them) and is not safe for
// concurrent use.
type UprightEstimator struct {
	opts      UprightOptions
	a, b, tmp gocv.Mat
	warped    gocv.Mat
	diff      gocv.Mat
	hm        gocv.Mat
	minRes    gocv.Mat // least local |difference| over all hypotheses, per low-resolution pixel
	blur      gocv.Mat // scratch: one hypothesis's local |difference|
	// hypRes[k] is hypothesis k's local |difference| where it was
	// compared, 255 elsewhere (0 road, 1 far, 2+ planes[k-2]); used to
	// ask which static surface could explain a region (Explains).
	hypRes    []gocv.Mat
	cam       Camera
	sx, sy    float64  // low-resolution scale of the last Estimate
	adm       [][]byte // scratch of Explains
	bandLo    []int    // scratch of Estimate
	haveRes   bool
	allocated bool
	sums      [][]float64 // per hypothesis: band-major row sums of |diff|
	pre       [][]float64 // per hypothesis: prefix sums down the current band
	planes    []Plane
	// hyps[i] is how planes[i] was made: its vehicle-frame normal and
	// offset, and its neighbours in offset within the same family (same
	// normal), -1 at the ends; for the refinement of the best plane.
	hyps []planeHyp
	// Scratch of Estimate, per plane for the current band.
	cost []float64
	segs []UprightSegment
	back [3]float64 // the motion from the newer frame back to the older (invertPlanar)
	// coarse holds the last Estimate's segments as the discrete
	// hypotheses chose them, before refine and joinSegments: the movers
	// compensate with these (Filler.moverModel), as their thresholds were
	// set on them.
	coarse []UprightSegment
	// stack holds the last Estimate's stacked segments (stacked).
	stack []UprightSegment
	// fa and fb are the older and newer frames in grey at twice the
	// estimate's resolution (fsx, fsy the scale), for refineFine.
	fa, fb   gocv.Mat
	fsx, fsy float64
}

// planeHyp is a vertical plane hypothesis {P : A·P = B} of vehicle
// coordinates and its neighbours in B within its family.
type planeHyp struct {
	A            vec3
	B            float64
	lower, upper int
}

// NewUprightEstimator validates opts and returns an estimator.
func NewUprightEstimator(opts UprightOptions) (*UprightEstimator, error) {
	if err := opts.Validate(); err != nil {
		return nil, err
	}
	return &UprightEstimator{opts: opts}, nil
}

// Close frees the scratch images. Safe to call more than once.
func (e *UprightEstimator) Close() error {
	if e.allocated {
		for _, m := range []*gocv.Mat{&e.a, &e.b, &e.tmp, &e.warped, &e.diff, &e.hm, &e.minRes, &e.blur, &e.fa, &e.fb} {
			m.Close()
		}
		for i := range e.hypRes {
			e.hypRes[i].Close()
		}
		e.hypRes = e.hypRes[:0]
		e.allocated = false
	}
	return nil
}

// Residual returns, after an Estimate that compared the frames (enough
// baseline), the least 7x7 local mean of the absolute grey-level difference
// per pixel of the downscaled newer frame over every hypothesis tried (road, far scene, each
// vertical plane where it can stand): what no static surface explains. The
// image is owned by the estimator and valid until its next Estimate.
func (e *UprightEstimator) Residual() (gocv.Mat, bool) {
	return e.minRes, e.allocated && e.haveRes
}

// invertPlanar returns the vehicle motion from T1 back to T0, in the T1
// vehicle frame, of the motion (dx, dy, yaw) from T0 to T1 in the T0 frame:
// yaw -ψ and translation -Rz(ψ)ᵀ (dx, dy).
func invertPlanar(dx, dy, yaw float64) (float64, float64, float64) {
	s, c := math.Sincos(yaw)
	return -(c*dx + s*dy), -(-s*dx + c*dy), -yaw
}

// Estimate writes into model (reusing its storage) the upright structure of
// last (captured at m.T1Us) from prev (captured at m.T0Us), m the vehicle
// motion between them, farDepthM the far-scene depth (+Inf for rotation
// only). Both frames are cam-sized BGR. With a translation below
// MinBaselineM the model is left empty (no error).
func (e *UprightEstimator) Estimate(prev, last gocv.Mat, cam Camera, m filter.Motion, farDepthM float64, model *UprightModel) error {
	model.Segments = model.Segments[:0]
	e.coarse = e.coarse[:0]
	e.stack = e.stack[:0]
	e.haveRes = false
	if err := CheckMotion(m); err != nil {
		return err
	}
	for _, f := range []*gocv.Mat{&prev, &last} {
		if err := checkFrame("upright frame", f, cam.Width, cam.Height); err != nil {
			return err
		}
	}
	o := e.opts
	minBase := o.MinBaselineM
	if minBase == 0 {
		minBase = DefaultUprightMinBaselineM
	}
	if math.Hypot(m.DxM, m.DyM) < minBase {
		return nil
	}
	bandPx := cmp0(o.BandPx, DefaultUprightBandPx)
	w := min(cmp0(o.WidthPx, DefaultUprightWidthPx), cam.Width)
	s := float64(w) / float64(cam.Width)
	h := max(8, int(math.Round(float64(cam.Height)*s)))
	sy := float64(h) / float64(cam.Height)
	if !e.allocated {
		for _, p := range []*gocv.Mat{&e.a, &e.b, &e.tmp, &e.warped, &e.diff, &e.minRes, &e.blur, &e.fa, &e.fb} {
			*p = gocv.NewMat()
		}
		e.hm = gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
		e.allocated = true
	}
	size := image.Pt(w, h)
	gocv.Resize(prev, &e.tmp, size, 0, 0, gocv.InterpolationArea)
	gocv.CvtColor(e.tmp, &e.a, gocv.ColorBGRToGray)
	gocv.Resize(last, &e.tmp, size, 0, 0, gocv.InterpolationArea)
	gocv.CvtColor(e.tmp, &e.b, gocv.ColorBGRToGray)
	fw := min(2*w, cam.Width)
	fsize := image.Pt(fw, max(8, int(math.Round(float64(cam.Height)*float64(fw)/float64(cam.Width)))))
	e.fsx, e.fsy = float64(fsize.X)/float64(cam.Width), float64(fsize.Y)/float64(cam.Height)
	gocv.Resize(prev, &e.tmp, fsize, 0, 0, gocv.InterpolationArea)
	gocv.CvtColor(e.tmp, &e.fa, gocv.ColorBGRToGray)
	gocv.Resize(last, &e.tmp, fsize, 0, 0, gocv.InterpolationArea)
	gocv.CvtColor(e.tmp, &e.fb, gocv.ColorBGRToGray)
	e.haveRes = false
	for _, p := range []*gocv.Mat{&e.warped, &e.diff, &e.minRes, &e.blur} { // full size: hypotheses write regions
		if p.Rows() != h || p.Cols() != w || p.Type() != gocv.MatTypeCV8U {
			p.Close()
			*p = gocv.NewMatWithSize(h, w, gocv.MatTypeCV8U)
		}
	}

	// Hypotheses 0 (road) and 1 (far), then the vertical planes, all in the
	// camera of the newer frame; inverse maps newer -> older.
	e.planes = e.planes[:0]
	walls, fronts := o.WallsM, o.FrontsM
	if walls == nil {
		walls = DefaultUprightWallsM()
	}
	if fronts == nil {
		fronts = DefaultUprightFrontsM()
	}
	e.hyps = e.hyps[:0]
	for _, y := range walls {
		e.hyps = append(e.hyps, planeHyp{A: vec3{0, 1, 0}, B: y}, planeHyp{A: vec3{0, -1, 0}, B: y})
	}
	for _, x := range fronts {
		e.hyps = append(e.hyps, planeHyp{A: vec3{1, 0, 0}, B: x})
	}
	for i := range e.hyps {
		hi := &e.hyps[i]
		hi.lower, hi.upper = -1, -1
		for j, hj := range e.hyps {
			if hj.A != hi.A {
				continue
			}
			if hj.B < hi.B && (hi.lower < 0 || hj.B > e.hyps[hi.lower].B) {
				hi.lower = j
			}
			if hj.B > hi.B && (hi.upper < 0 || hj.B < e.hyps[hi.upper].B) {
				hi.upper = j
			}
		}
		e.planes = append(e.planes, verticalPlane(cam, hi.A, hi.B))
	}
	dx, dy, dyaw := invertPlanar(m.DxM, m.DyM, m.DyawRad)
	e.back = [3]float64{dx, dy, dyaw}
	nb := (cam.Width + bandPx - 1) / bandPx
	nh := 2 + len(e.planes)
	for len(e.sums) < nh {
		e.sums = append(e.sums, nil)
		e.pre = append(e.pre, nil)
	}
	for len(e.hypRes) < nh {
		e.hypRes = append(e.hypRes, gocv.NewMat())
	}
	e.cam, e.sx, e.sy = cam, s, sy
	// Low-resolution column edges of the bands (scratch, reused).
	e.bandLo = e.bandLo[:0]
	for b := 0; b <= nb; b++ {
		e.bandLo = append(e.bandLo, min(w, int(math.Round(float64(min(b*bandPx, cam.Width))*s))))
	}
	bandLo := e.bandLo
	hz := cam.Horizon()
	for k := 0; k < nh; k++ {
		var hf Homography
		switch k {
		case 0:
			hf = GroundHomographyPlanar(cam, dx, dy, dyaw)
		case 1:
			hf = FarHomographyPlanar(cam, dx, dy, dyaw, farDepthM)
		default:
			hf = PlaneHomography(cam, dx, dy, dyaw, e.planes[k-2])
		}
		hs := scaleHomography(hf, s, sy)
		if !hs.IsFinite() {
			return fmt.Errorf("upright hypothesis %d: %w", k, ErrSingular)
		}
		// A plane is compared only where it can stand: over the bands
		// where its base is below the horizon, rows down to its lowest
		// base (the road's sums serve below). The road and far maps are
		// compared everywhere.
		b0, b1, rows := 0, nb, h
		if k >= 2 {
			b0, b1, rows = nb, 0, 0
			for b := 0; b < nb; b++ {
				c0, c1 := b*bandPx, min((b+1)*bandPx, cam.Width)
				hzRow, ok := hz.RowAt(float64(c0+c1-1) / 2)
				if !ok {
					continue
				}
				if seg, ok := segment(cam, e.planes[k-2], c0, c1, hzRow); ok {
					b0, b1 = min(b0, b), max(b1, b+1)
					rows = max(rows, min(h, int(math.Ceil(math.Max(seg.BaseRow0, seg.BaseRow1)*sy))+1))
				}
			}
		}
		hr := &e.hypRes[k]
		if hr.Rows() != h || hr.Cols() != w || hr.Type() != gocv.MatTypeCV8U {
			hr.Close()
			*hr = gocv.NewMatWithSize(h, w, gocv.MatTypeCV8U)
		}
		hr.SetTo(gocv.NewScalar(255, 0, 0, 0))
		sums := e.sums[k][:0]
		for range nb * h {
			sums = append(sums, 0)
		}
		e.sums[k] = sums
		if b0 >= b1 || rows == 0 || bandLo[b0] >= bandLo[b1] {
			continue
		}
		rect := image.Rect(bandLo[b0], 0, bandLo[b1], rows)
		if err := setMat3(&e.hm, hs.shiftCols(rect.Min.X)); err != nil {
			return err
		}
		wr, br, dr := e.warped.Region(rect), e.b.Region(rect), e.diff.Region(rect)
		gocv.WarpPerspectiveWithParams(e.a, &wr, e.hm, rect.Size(), gocv.InterpolationLinear|gocv.WarpInverseMap, gocv.BorderReplicate, neutralFill)
		gocv.AbsDiff(wr, br, &dr)
		// The least residual over every hypothesis so far, per pixel, of
		// the residual's 7x7 local mean (a single pixel is too easily
		// matched by some wrong hypothesis).
		bl := e.blur.Region(rect)
		gocv.Blur(dr, &bl, image.Pt(7, 7))
		hrr := hr.Region(rect)
		bl.CopyTo(&hrr)
		hrr.Close()
		if k == 0 {
			bl.CopyTo(&e.minRes)
		} else {
			mr := e.minRes.Region(rect)
			gocv.Min(mr, bl, &mr)
			mr.Close()
		}
		bl.Close()
		wr.Close()
		br.Close()
		dr.Close()
		d, err := e.diff.DataPtrUint8()
		if err != nil {
			return fmt.Errorf("upright scratch: %w", err)
		}
		for b := b0; b < b1; b++ {
			for y := 0; y < rows; y++ {
				t := 0
				for _, v := range d[y*w+bandLo[b] : y*w+bandLo[b+1]] {
					t += int(v)
				}
				sums[b*h+y] = float64(t)
			}
		}
	}
	e.haveRes = true
	gain := o.MinGain
	if gain == 0 {
		gain = DefaultUprightMinGain
	}
	for b := 0; b < nb; b++ {
		c0, c1 := b*bandPx, min((b+1)*bandPx, cam.Width)
		uc := float64(c0+c1-1) / 2
		hzRow, ok := hz.RowAt(uc)
		if !ok {
			continue
		}
		// Prefix sums down the band: pre[k][y] = sum of rows [0, y).
		for k := 0; k < nh; k++ {
			pk := e.pre[k][:0]
			t := 0.0
			pk = append(pk, 0)
			for y := 0; y < h; y++ {
				t += e.sums[k][b*h+y]
				pk = append(pk, t)
			}
			e.pre[k] = pk
		}
		lowRow := func(v float64) int { return int(math.Round(math.Min(math.Max(v*sy, 0), float64(h)))) }
		road, far := e.pre[0], e.pre[1]
		hzLow := lowRow(hzRow)
		none := far[hzLow] + road[h] - road[hzLow]
		best, bestCost := -1, none*(1-gain)
		e.cost, e.segs = e.cost[:0], e.segs[:0]
		textured := e.firstTexturedRow(bandLo[b], bandLo[b+1])
		for i, p := range e.planes {
			e.cost = append(e.cost, math.Inf(1))
			seg, ok := segment(cam, p, c0, c1, hzRow)
			e.segs = append(e.segs, seg)
			if !ok {
				continue
			}
			// Far scene above the top, the plane from the top to the base,
			// road below: the best top for this plane.
			pk := e.pre[2+i]
			base := lowRow((seg.BaseRow0 + seg.BaseRow1) / 2)
			top, tc := 0, math.Inf(1)
			for y := min(textured, base); y <= base; y++ {
				if c := far[y] - pk[y]; c < tc {
					top, tc = y, c
				}
			}
			if base-top < 2 {
				continue
			}
			e.segs[i].TopRow = -0.5
			if top > 0 {
				e.segs[i].TopRow = float64(top)/sy - 0.5
			}
			c := tc + pk[base] + road[h] - road[base]
			e.cost[i] = c
			if c < bestCost {
				best, bestCost = i, c
			}
		}
		if best >= 0 {
			e.coarse = append(e.coarse, e.segs[best])
			near := e.refineFine(cam, e.refine(cam, best, b, hzRow), hzRow)
			model.Segments = append(model.Segments, near)
			if up, ok := e.stacked(cam, near, best, b, textured, gain, hzRow); ok {
				e.stack = append(e.stack, up)
			}
		}
	}
	joinSegments(cam, model.Segments)
	model.Segments = append(model.Segments, e.stack...)
	e.columnTops(cam, model)
	return nil
}

// stacked returns the farther surface seen above the top of band
// segment near (plane hypothesis best) in the newer frame, if one of the
// plane hypotheses standing behind near matches the rows between the
// band's first textured row and near's top better than the far scene by
// the share gain: a taller building behind a lower one, whose front the
// far map would move as if it were at the far scene's depth. Its top is
// the best as for a band's segment; it is shown down to near's top
// (ClipRow) and keeps its hypothesis's plane (the refinement's costs run
// down to a plane's base, which near hides), refined on those rows alone
// (refineStacked).
func (e *UprightEstimator) stacked(cam Camera, near UprightSegment, best, b, textured int, gain, hzRow float64) (UprightSegment, bool) {
	h := len(e.pre[0]) - 1
	sy := e.sy
	nearTop := int(math.Round(math.Min(math.Max((near.TopRow+0.5)*sy, 0), float64(h))))
	if nearTop-textured < 2 {
		return UprightSegment{}, false
	}
	far := e.pre[1]
	found, bestCost := -1, 0.0
	var top int
	for i := range e.planes {
		seg := e.segs[i]
		if i == best || math.IsInf(e.cost[i], 1) || !(seg.DepthM > near.DepthM*1.15) {
			continue
		}
		pk := e.pre[2+i]
		for y := textured; y+2 <= nearTop; y++ {
			c := far[y] + pk[nearTop] - pk[y]
			if found < 0 || c < bestCost {
				found, bestCost, top = i, c, y
			}
		}
	}
	if found < 0 || bestCost > far[nearTop]-gain*(far[nearTop]-far[top]) {
		return UprightSegment{}, false
	}
	up := e.segs[found]
	up.TopRow = -0.5
	if top > 0 {
		up.TopRow = float64(top)/sy - 0.5
	}
	up.ClipRow = float64(nearTop)/sy - 0.5
	return e.refineStacked(cam, up, found, b, top, nearTop, hzRow), true
}

// refineStacked refines stacked segment seg (plane hypothesis best) on the
// low-resolution rows [y0, y1) of band b it is seen on: its offset between
// the neighbouring hypotheses of its family by the vertex of the parabola
// through their costs against the inverse offset (as refine), then its yaw
// about the vertical through its foot point by ±refineYawStep, each kept
// only if it lowers the cost.
func (e *UprightEstimator) refineStacked(cam Camera, seg UprightSegment, best, b, y0, y1 int, hzRow float64) UprightSegment {
	cost := func(r UprightSegment) float64 {
		hs := scaleHomography(PlaneHomography(cam, e.back[0], e.back[1], e.back[2], r.Plane), e.sx, e.sy)
		return e.bandCost(hs, e.bandLo[b], e.bandLo[b+1], y0, y1)
	}
	cur, curCost := seg, cost(seg)
	try := func(a vec3, off float64) {
		if !(off > 0) {
			return
		}
		r, ok := segment(cam, verticalPlane(cam, a, off), seg.Col0, seg.Col1, hzRow)
		if !ok {
			return
		}
		r.TopRow, r.ClipRow = seg.TopRow, seg.ClipRow
		if c := cost(r); c < curCost {
			cur, curCost = r, c
		}
	}
	rows := func(k int) float64 { return e.pre[2+k][y1] - e.pre[2+k][y0] }
	hp := e.hyps[best]
	if lo, hi := hp.lower, hp.upper; lo >= 0 && hi >= 0 && !math.IsInf(e.cost[lo], 1) && !math.IsInf(e.cost[hi], 1) {
		if x, ok := parabolaVertex(1/e.hyps[lo].B, 1/hp.B, 1/e.hyps[hi].B, rows(lo), rows(best), rows(hi)); ok {
			try(hp.A, 1/x)
		}
	}
	foot, ok := e.footPoint(cam, cur)
	if !ok {
		return cur
	}
	a, ok := horizontalNormal(cam, cur)
	if !ok {
		return cur
	}
	for _, phi := range [...]float64{-refineYawStep, refineYawStep} {
		r := yawed(a, phi)
		try(r, dot3(r, foot))
	}
	return cur
}

// columnTops writes model.Tops: for each column of each segment, the first
// row at or below the segment's TopRow where the newer frame at twice the
// estimate's resolution shows structure (the mean absolute step to the
// right and lower neighbours over three columns above uprightTextureGrey,
// the band test of firstTexturedRow on one column), else the segment's
// lower base row; the top edge of that low-resolution row, so a sky row
// next to a roofline still counts as covered. Columns without a segment
// get -0.5 (never consulted: the synthesis asks only where a segment's
// source quad is).
func (e *UprightEstimator) columnTops(cam Camera, model *UprightModel) {
	w := cam.Width
	model.Tops = slices.Grow(model.Tops[:0], w)[:w]
	for i := range model.Tops {
		model.Tops[i] = -0.5
	}
	pb, err := e.fb.DataPtrUint8()
	fw, fh := e.fb.Cols(), e.fb.Rows()
	if err != nil || fw < 3 || fh < 2 {
		for _, seg := range model.Segments {
			for u := max(0, seg.Col0); u < min(w, seg.Col1); u++ {
				model.Tops[u] = float32(seg.TopRow)
			}
		}
		return
	}
	for _, seg := range model.Segments {
		y0 := max(0, int(math.Floor((seg.TopRow+0.5)*e.fsy)))
		bot := seg.clip(math.Min(seg.BaseRow0, seg.BaseRow1))
		yb := min(fh-1, int(math.Ceil((bot+0.5)*e.fsy)))
		xf := -1
		top := float32(seg.TopRow)
		for u := max(0, seg.Col0); u < min(w, seg.Col1); u++ {
			if x := min(fw-1, int(float64(u)*e.fsx)); x != xf {
				xf = x
				y := y0
				for ; y < yb; y++ {
					t := 0
					for xx := max(0, xf-1); xx <= min(fw-2, xf+1); xx++ {
						i := y*fw + xx
						t += absInt(int(pb[i+1])-int(pb[i])) + absInt(int(pb[i+fw])-int(pb[i]))
					}
					if float64(t) > 3*uprightTextureGrey {
						break
					}
				}
				top = float32(math.Max(seg.TopRow, float64(y)/e.fsy-0.5))
			}
			if seg.ClipRow > 0 {
				model.Tops[u] = min(model.Tops[u], top) // a stacked segment comes after its band's
			} else {
				model.Tops[u] = top
			}
		}
	}
}

// uprightJoinRatio is the largest relative difference of the distances of
// two neighbouring segments' foot points at their shared column for which
// they are taken for one surface and joined (a design choice of this
// project: a few times the refinement's step).
const uprightJoinRatio = 0.12

// joinSegments makes neighbouring segments (sharing a band edge) whose
// bases meet the road at nearly the same place there share that foot
// point, each plane turned to pass through it: both planes then contain
// the vertical line above it, which every motion maps alike, so the
// surface stays whole in a predicted frame instead of opening a gap
// between the two bands that the synthesis would mark as disoccluded.
// segs are in band order; a segment whose plane would no longer stand on
// the road keeps its own.
func joinSegments(cam Camera, segs []UprightSegment) {
	for i := 0; i+1 < len(segs); i++ {
		l, r := &segs[i], &segs[i+1]
		if l.Col1 != r.Col0 {
			continue
		}
		u := float64(l.Col1) - 0.5
		gl, ok1 := footAt(cam, u, l.BaseRow1)
		gr, ok2 := footAt(cam, u, r.BaseRow0)
		if !ok1 || !ok2 {
			continue
		}
		ctr := cam.CentreVehicle()
		dl, dr := math.Hypot(gl[0]-ctr[0], gl[1]-ctr[1]), math.Hypot(gr[0]-ctr[0], gr[1]-ctr[1])
		if math.Abs(dl-dr) > uprightJoinRatio*math.Min(dl, dr) {
			continue
		}
		row := (l.BaseRow1 + r.BaseRow0) / 2
		if nl, ok := rebase(cam, *l, l.BaseRow0, row); ok {
			*l = nl
		}
		if nr, ok := rebase(cam, *r, row, r.BaseRow1); ok {
			*r = nr
		}
	}
}

// rebase returns seg with the vertical plane whose base passes through
// rows row0 and row1 at its band's edges.
func rebase(cam Camera, seg UprightSegment, row0, row1 float64) (UprightSegment, bool) {
	g0, ok0 := footAt(cam, float64(seg.Col0)-0.5, row0)
	g1, ok1 := footAt(cam, float64(seg.Col1)-0.5, row1)
	if !ok0 || !ok1 {
		return seg, false
	}
	dx, dy := g1[0]-g0[0], g1[1]-g0[1]
	n := math.Hypot(dx, dy)
	if !(n > 0) {
		return seg, false
	}
	a := vec3{-dy / n, dx / n, 0}
	b := dot3(a, g0)
	if b < 0 {
		a, b = vec3{-a[0], -a[1], 0}, -b
	}
	hz, ok := cam.Horizon().RowAt(float64(seg.Col0+seg.Col1-1) / 2)
	if !ok || !(b > 0) {
		return seg, false
	}
	r, ok := segment(cam, verticalPlane(cam, a, b), seg.Col0, seg.Col1, hz)
	if !ok {
		return seg, false
	}
	r.TopRow = seg.TopRow
	return r, true
}

// footAt returns where the ray of pixel (u, v) meets the road, in vehicle
// coordinates; ok is false at or above the horizon.
func footAt(cam Camera, u, v float64) (vec3, bool) {
	d := mul3v(transpose3(cam.RotationVehicleToCamera()), mul3v(cam.KInv(), vec3{u, v, 1}))
	ctr := cam.CentreVehicle()
	if !(d[2] < 0) {
		return vec3{}, false
	}
	t := -ctr[2] / d[2]
	return vec3{ctr[0] + t*d[0], ctr[1] + t*d[1], 0}, true
}

// uprightTextureGrey is the mean absolute grey-level step between
// neighbouring low-resolution pixels (across and down) above which a row
// of a band shows structure, not sky (a design choice of this project:
// a clear or overcast sky changes by less than a level per pixel at a
// quarter of 720p, a facade's grain and edges by several).
const uprightTextureGrey = 3.0

// firstTexturedRow returns the first row of columns [x0, x1) of the newer
// low-resolution frame whose mean absolute step to its right and lower
// neighbours exceeds uprightTextureGrey (the frame's height if none). An
// upright segment starts no higher: above it the band is sky, which the
// far map moves as well, and a plane reaching into it would make the
// synthesis mark the sky it uncovers as disoccluded.
func (e *UprightEstimator) firstTexturedRow(x0, x1 int) int {
	w, h := e.b.Cols(), e.b.Rows()
	pb, err := e.b.DataPtrUint8()
	if err != nil || x1-x0 < 2 {
		return 0
	}
	x1 = min(x1, w-1)
	for y := 0; y+1 < h; y++ {
		t := 0
		for x := x0; x < x1; x++ {
			i := y*w + x
			t += absInt(int(pb[i+1])-int(pb[i])) + absInt(int(pb[i+w])-int(pb[i]))
		}
		if float64(t) > uprightTextureGrey*float64(x1-x0) {
			return y
		}
	}
	return h
}

// absInt returns |v|.
func absInt(v int) int {
	if v < 0 {
		return -v
	}
	return v
}

// Steps of the refinement around the best hypothesis (design choices of
// this project): the relative change of the foot point's distance, and
// the turn of the plane about the vertical through it.
const (
	refineDepthStep = 0.03
	refineYawStep   = 10 * math.Pi / 180
)

// refine returns the segment of plane hypothesis best over band b (columns
// [c0, c1)): the plane through the foot point at the band's centre column,
// refined in distance and in yaw by local search on the band's matching
// cost (bandPlaneCost). First the offset, between the best hypothesis's
// neighbours of the same family, by the vertex of the parabola through
// their three costs (e.cost) against the inverse offset, to which the
// image motion of the plane's points is proportional; then the foot
// point's distance along its ray by ±refineDepthStep, and the plane's
// yaw about the vertical through the foot point by ±refineYawStep and
// twice that (facades are not all parallel or square to the direction of
// travel: the road turns), each by the vertex of a parabola through the
// costs around the least. A refined plane replaces the hypothesis only if
// its cost is lower. The top row stays the best hypothesis's.
func (e *UprightEstimator) refine(cam Camera, best, b int, hzRow float64) UprightSegment {
	seg := e.segs[best]
	hp := e.hyps[best]
	c0, c1 := seg.Col0, seg.Col1
	cur, curCost := seg, e.bandPlaneCost(cam, b, seg)
	try := func(a vec3, off float64) (UprightSegment, float64, bool) {
		if !(off > 0) {
			return UprightSegment{}, 0, false
		}
		r, ok := segment(cam, verticalPlane(cam, a, off), c0, c1, hzRow)
		if !ok {
			return r, 0, false
		}
		r.TopRow = seg.TopRow
		return r, e.bandPlaneCost(cam, b, r), true
	}
	keep := func(r UprightSegment, c float64, ok bool) {
		if ok && c < curCost {
			cur, curCost = r, c
		}
	}
	// 1. Offset between the neighbouring hypotheses.
	if lo, hi := hp.lower, hp.upper; lo >= 0 && hi >= 0 && !math.IsInf(e.cost[lo], 1) && !math.IsInf(e.cost[hi], 1) {
		if x, ok := parabolaVertex(1/e.hyps[lo].B, 1/hp.B, 1/e.hyps[hi].B, e.cost[lo], e.cost[best], e.cost[hi]); ok {
			keep(try(hp.A, 1/x))
		}
	}
	// The foot point at the band's centre column, vehicle coordinates.
	foot, ok := e.footPoint(cam, cur)
	if !ok {
		return cur
	}
	a := vec3{cur.Plane.Normal[0], cur.Plane.Normal[1], cur.Plane.Normal[2]}
	a = mul3v(transpose3(cam.RotationVehicleToCamera()), a) // back to vehicle axes
	a[2] = 0
	if n := math.Hypot(a[0], a[1]); n > 0 {
		a[0], a[1] = a[0]/n, a[1]/n
	} else {
		return cur
	}
	ctr := cam.CentreVehicle()
	// 2. The foot point's distance along its ray from the camera.
	at := func(k float64) vec3 {
		return vec3{ctr[0] + k*(foot[0]-ctr[0]), ctr[1] + k*(foot[1]-ctr[1]), 0}
	}
	var fs [3]float64
	var rs [3]UprightSegment
	var oks [3]bool
	for i, k := range [3]float64{1 - refineDepthStep, 1, 1 + refineDepthStep} {
		rs[i], fs[i], oks[i] = try(a, dot3(a, at(k)))
	}
	if oks[0] && oks[1] && oks[2] {
		keep(rs[0], fs[0], true)
		keep(rs[2], fs[2], true)
		if x, ok := parabolaVertex(1/(1-refineDepthStep), 1, 1/(1+refineDepthStep), fs[0], fs[1], fs[2]); ok {
			keep(try(a, dot3(a, at(1/x))))
		}
	}
	if f2, ok := e.footPoint(cam, cur); ok {
		foot = f2
	}
	// 3. The yaw about the vertical through the foot point.
	var ys [5]float64
	var yok [5]bool
	ib := -1
	for i := range ys {
		phi := float64(i-2) * refineYawStep
		r := yawed(a, phi)
		var sg UprightSegment
		sg, ys[i], yok[i] = try(r, dot3(r, foot))
		keep(sg, ys[i], yok[i])
		if yok[i] && (ib < 0 || ys[i] < ys[ib]) {
			ib = i
		}
	}
	if ib > 0 && ib < 4 && yok[ib-1] && yok[ib+1] {
		if x, ok := parabolaVertex(-1, 0, 1, ys[ib-1], ys[ib], ys[ib+1]); ok {
			r := yawed(a, (float64(ib-2)+x)*refineYawStep)
			keep(try(r, dot3(r, foot)))
		}
	}
	return cur
}

// Steps of the fine refinement (design choices of this project): a half
// and a fifth of refine's, about the precision refine reaches at the
// estimate's resolution.
const (
	fineDepthStep = 0.015
	fineYawStep   = 4 * math.Pi / 180
	// fineRowStep: fineCost sums every other row, which halves its cost
	// (the error budget moved by 0.01 dB).
	fineRowStep = 2
)

// refineFine refines seg's plane again, in the distance of its foot point
// and its yaw about the vertical through it (each by the vertex of a
// parabola through three costs, as refine), on the band's matching cost
// at twice the estimate's resolution (fineCost): at a quarter of 720p a
// facade placed a quarter of a pixel off is a pixel off in the predicted
// frame, which a window's edge shows. A refined plane replaces seg only if
// its cost is lower.
func (e *UprightEstimator) refineFine(cam Camera, seg UprightSegment, hzRow float64) UprightSegment {
	fh := e.fb.Rows()
	winEnd := min(fh, int(math.Ceil(math.Max(seg.BaseRow0, seg.BaseRow1)*e.fsy))+12)
	cur, curCost := seg, e.fineCost(cam, seg, winEnd)
	if math.IsInf(curCost, 1) {
		return seg
	}
	try := func(a vec3, off float64) (UprightSegment, float64, bool) {
		if !(off > 0) {
			return UprightSegment{}, 0, false
		}
		r, ok := segment(cam, verticalPlane(cam, a, off), seg.Col0, seg.Col1, hzRow)
		if !ok {
			return r, 0, false
		}
		r.TopRow = seg.TopRow
		c := e.fineCost(cam, r, winEnd)
		return r, c, !math.IsInf(c, 1)
	}
	keep := func(r UprightSegment, c float64, ok bool) {
		if ok && c < curCost {
			cur, curCost = r, c
		}
	}
	foot, ok := e.footPoint(cam, seg)
	if !ok {
		return seg
	}
	a, ok := horizontalNormal(cam, seg)
	if !ok {
		return seg
	}
	ctr := cam.CentreVehicle()
	at := func(k float64) vec3 {
		return vec3{ctr[0] + k*(foot[0]-ctr[0]), ctr[1] + k*(foot[1]-ctr[1]), 0}
	}
	var fs [3]float64
	var oks [3]bool
	for i, k := range [3]float64{1 - fineDepthStep, 1, 1 + fineDepthStep} {
		var r UprightSegment
		r, fs[i], oks[i] = try(a, dot3(a, at(k)))
		keep(r, fs[i], oks[i])
	}
	if oks[0] && oks[1] && oks[2] {
		if x, ok := parabolaVertex(1/(1-fineDepthStep), 1, 1/(1+fineDepthStep), fs[0], fs[1], fs[2]); ok {
			keep(try(a, dot3(a, at(1/x))))
		}
	}
	if f2, ok := e.footPoint(cam, cur); ok {
		foot = f2
	}
	a, _ = horizontalNormal(cam, cur)
	var ys [3]float64
	var yok [3]bool
	for i := range ys {
		r := yawed(a, float64(i-1)*fineYawStep)
		var sg UprightSegment
		sg, ys[i], yok[i] = try(r, dot3(r, foot))
		keep(sg, ys[i], yok[i])
	}
	if yok[0] && yok[1] && yok[2] {
		if x, ok := parabolaVertex(-1, 0, 1, ys[0], ys[1], ys[2]); ok {
			r := yawed(a, x*fineYawStep)
			keep(try(r, dot3(r, foot)))
		}
	}
	return cur
}

// fineCost returns band seg's matching cost at the fine resolution over
// every fineRowStep-th of its rows from the top row to winEnd (fine rows): seg's plane down to
// its base, the road below it. Rows below winEnd are left out: refineFine
// compares planes whose bases lie above it, so they add the same to all.
func (e *UprightEstimator) fineCost(cam Camera, seg UprightSegment, winEnd int) float64 {
	fw, fh := e.fb.Cols(), e.fb.Rows()
	row := func(v float64) int { return int(math.Round(math.Min(math.Max(v*e.fsy, 0), float64(fh)))) }
	top := 0
	if seg.TopRow > -0.5 {
		top = row(seg.TopRow + 0.5)
	}
	base := min(row((seg.BaseRow0+seg.BaseRow1)/2), winEnd)
	if base <= top {
		return math.Inf(1)
	}
	x0 := min(fw, int(math.Round(float64(seg.Col0)*e.fsx)))
	x1 := min(fw, int(math.Round(float64(seg.Col1)*e.fsx)))
	hs := scaleHomography(PlaneHomography(cam, e.back[0], e.back[1], e.back[2], seg.Plane), e.fsx, e.fsy)
	road := scaleHomography(GroundHomographyPlanar(cam, e.back[0], e.back[1], e.back[2]), e.fsx, e.fsy)
	return sadOnStep(e.fa, e.fb, hs, x0, x1, top, base, fineRowStep) + sadOnStep(e.fa, e.fb, road, x0, x1, base, winEnd, fineRowStep)
}

// parabolaVertex returns the abscissa of the vertex of the parabola through
// (x0, f0), (x1, f1), (x2, f2) when f1 is the least of the three and the
// vertex lies strictly between x0 and x2 (Press et al., "Numerical
// Recipes", 3rd ed., eq. 10.3.1, from memory).
func parabolaVertex(x0, x1, x2, f0, f1, f2 float64) (float64, bool) {
	if f1 > f0 || f1 > f2 {
		return 0, false
	}
	num := (x1-x0)*(x1-x0)*(f1-f2) - (x1-x2)*(x1-x2)*(f1-f0)
	den := (x1-x0)*(f1-f2) - (x1-x2)*(f1-f0)
	if !(den != 0) {
		return 0, false
	}
	x := x1 - 0.5*num/den
	return x, x > math.Min(x0, x2) && x < math.Max(x0, x2)
}

// horizontalNormal returns seg's plane normal in vehicle coordinates with
// its vertical part dropped, of unit length; ok is false (and the vector
// not scaled) when nothing horizontal is left.
func horizontalNormal(cam Camera, seg UprightSegment) (a vec3, ok bool) {
	a = mul3v(transpose3(cam.RotationVehicleToCamera()), vec3{seg.Plane.Normal[0], seg.Plane.Normal[1], seg.Plane.Normal[2]})
	a[2] = 0
	n := math.Hypot(a[0], a[1])
	if !(n > 0) {
		return a, false
	}
	a[0], a[1] = a[0]/n, a[1]/n
	return a, true
}

// yawed returns the horizontal direction a turned by phi about the
// vertical.
func yawed(a vec3, phi float64) vec3 {
	sn, cs := math.Sincos(phi)
	return vec3{cs*a[0] - sn*a[1], sn*a[0] + cs*a[1], 0}
}

// footPoint returns where seg's base line meets the road at the band's
// centre column, in vehicle coordinates.
func (e *UprightEstimator) footPoint(cam Camera, seg UprightSegment) (vec3, bool) {
	return footAt(cam, float64(seg.Col0+seg.Col1-1)/2, (seg.BaseRow0+seg.BaseRow1)/2)
}

// bandPlaneCost returns band b's matching cost with seg as its upright
// surface, as Estimate sums it: the far map above the top row, seg's plane
// from there to its base, the road below (the far and road sums from the
// band's prefix sums, the plane's by bandCost).
func (e *UprightEstimator) bandPlaneCost(cam Camera, b int, seg UprightSegment) float64 {
	h := e.a.Rows()
	lowRow := func(v float64) int { return int(math.Round(math.Min(math.Max(v*e.sy, 0), float64(h)))) }
	top := 0
	if seg.TopRow > -0.5 {
		top = lowRow(seg.TopRow + 0.5)
	}
	base := lowRow((seg.BaseRow0 + seg.BaseRow1) / 2)
	if base <= top {
		return math.Inf(1)
	}
	hs := scaleHomography(PlaneHomography(cam, e.back[0], e.back[1], e.back[2], seg.Plane), e.sx, e.sy)
	road, far := e.pre[0], e.pre[1]
	return far[top] + e.bandCost(hs, e.bandLo[b], e.bandLo[b+1], top, base) + road[h] - road[base]
}

// bandCost returns the sum over the low-resolution pixels of columns
// [x0, x1) and rows [y0, y1) of |older frame at hs(x, y) - newer frame|,
// bilinear with the border replicated: the sums Estimate takes from its
// warps, for one band and one plane.
func (e *UprightEstimator) bandCost(hs Homography, x0, x1, y0, y1 int) float64 {
	return sadOn(e.a, e.b, hs, x0, x1, y0, y1)
}

// sadOn returns the sum over the pixels of columns [x0, x1) and rows
// [y0, y1) of b of |a at hs(x, y) - b|, bilinear with the border
// replicated (a and b grey images of one size).
func sadOn(a, b gocv.Mat, hs Homography, x0, x1, y0, y1 int) float64 {
	return sadOnStep(a, b, hs, x0, x1, y0, y1, 1)
}

// sadOnStep is sadOn over every step-th row from y0 only.
func sadOnStep(a, b gocv.Mat, hs Homography, x0, x1, y0, y1, step int) float64 {
	w, h := a.Cols(), a.Rows()
	pa, err1 := a.DataPtrUint8()
	pb, err2 := b.DataPtrUint8()
	if err1 != nil || err2 != nil {
		return math.Inf(1)
	}
	t := 0.0
	for y := y0; y < y1; y += step {
		for x := x0; x < x1; x++ {
			fx, fy := float64(x), float64(y)
			d := hs[2][0]*fx + hs[2][1]*fy + hs[2][2]
			if !(d > 0) {
				return math.Inf(1)
			}
			sx := (hs[0][0]*fx + hs[0][1]*fy + hs[0][2]) / d
			sy := (hs[1][0]*fx + hs[1][1]*fy + hs[1][2]) / d
			sx = math.Min(math.Max(sx, 0), float64(w-1))
			sy = math.Min(math.Max(sy, 0), float64(h-1))
			ix, iy := min(int(sx), w-2), min(int(sy), h-2)
			ax, ay := sx-float64(ix), sy-float64(iy)
			i := iy*w + ix
			v := (1-ay)*((1-ax)*float64(pa[i])+ax*float64(pa[i+1])) + ay*((1-ax)*float64(pa[i+w])+ax*float64(pa[i+w+1]))
			t += math.Abs(v - float64(pb[y*w+x]))
		}
	}
	return t
}

// segment builds the segment of plane p over columns [c0, c1); ok is false
// when the plane does not stand on the road in front of the camera across
// the whole band (its base line above the horizon, or behind the camera).
func segment(c Camera, p Plane, c0, c1 int, hzRow float64) (UprightSegment, bool) {
	l := baseLine(c, p)
	seg := UprightSegment{Col0: c0, Col1: c1, Plane: p}
	var ok0, ok1 bool
	seg.BaseRow0, ok0 = rowOn(l, float64(c0)-0.5)
	seg.BaseRow1, ok1 = rowOn(l, float64(c1)-0.5)
	if !ok0 || !ok1 || seg.BaseRow0 <= hzRow+1 || seg.BaseRow1 <= hzRow+1 {
		return seg, false
	}
	// Depth of the base point at the band centre: the ray's road hit.
	uc, vc := float64(c0+c1-1)/2, (seg.BaseRow0+seg.BaseRow1)/2
	ki := c.KInv()
	r := mul3v(ki, vec3{uc, vc, 1})
	ng := c.GroundNormalCamera()
	den := dot3(ng, r)
	if !(den < 0) {
		return seg, false
	}
	seg.DepthM = -c.HeightM / den * r[2]
	// The plane must be in front: its distance along the ray positive.
	if nr := dot3(p.Normal, r); nr == 0 || p.DistM/nr <= 0 {
		return seg, false
	}
	return seg, seg.DepthM > 0
}

// cmp0 returns v, or def when v is 0.
func cmp0(v, def int) int {
	if v == 0 {
		return def
	}
	return v
}

// sortFarToNear orders segments for the painter's algorithm.
func sortFarToNear(s []UprightSegment) {
	slices.SortStableFunc(s, func(a, b UprightSegment) int {
		switch {
		case a.DepthM > b.DepthM:
			return -1
		case a.DepthM < b.DepthM:
			return 1
		}
		return 0
	})
}

// Explains reports whether, after an Estimate that compared the frames,
// some static surface that could stand where a changed region stands
// explains at least two thirds of it: region is the region's pixels
// (label image labels, CV_32S, of the estimate's low-resolution size, value
// id) inside box (low-resolution pixels), thr the grey level above which a
// local residual is unexplained. A surface can stand there when its base
// meets the region's bottom: the road always; the far scene only for a
// region whose bottom is above the horizon; a vertical plane only if its
// base line passes within max(3 low-resolution px, 30 % of the region's
// height) of the region's bottom at the box's centre column. Without that
// condition, a thing moving along the line of sight (an oncoming car, a car
// ahead) is matched by a static surface at another distance, whose base is
// elsewhere on the road.
func (e *UprightEstimator) Explains(labels gocv.Mat, id int32, box image.Rectangle, thr int) bool {
	if !e.allocated || !e.haveRes {
		return false
	}
	lb, err := labels.DataPtrUint8()
	w := labels.Cols()
	if err != nil || labels.Type() != gocv.MatTypeCV32S || len(e.hypRes) == 0 || w != e.hypRes[0].Cols() || labels.Rows() != e.hypRes[0].Rows() {
		return false
	}
	lab := unsafe.Slice((*int32)(unsafe.Pointer(&lb[0])), w*labels.Rows())
	s, sy := e.sx, e.sy
	uc := (float64(box.Min.X+box.Max.X)/2+0.5)/s - 0.5
	vb := (float64(box.Max.Y-1)+0.5)/sy - 0.5
	tol := math.Max(3, 0.3*float64(box.Dy())) / sy
	hzRow, hzOK := e.cam.Horizon().RowAt(uc)
	// The admissible hypotheses' residual images (e.adm is reused).
	e.adm = e.adm[:0]
	for k := 0; k < min(len(e.hypRes), 2+len(e.planes)); k++ {
		ok := false
		switch {
		case k == 0:
			ok = true
		case k == 1:
			ok = hzOK && vb < hzRow+tol
		default:
			r, on := rowOn(baseLine(e.cam, e.planes[k-2]), uc)
			ok = on && math.Abs(r-vb) <= tol
		}
		if ok {
			if p, err := e.hypRes[k].DataPtrUint8(); err == nil {
				e.adm = append(e.adm, p)
			}
		}
	}
	area, bad := 0, 0
	for y := box.Min.Y; y < box.Max.Y; y++ {
		for x := box.Min.X; x < box.Max.X; x++ {
			if lab[y*w+x] != id {
				continue
			}
			area++
			least := byte(255)
			for _, p := range e.adm {
				least = min(least, p[y*w+x])
			}
			if int(least) > thr {
				bad++
			}
		}
	}
	return area > 0 && 3*bad < area
}
