package predictor

import (
	"fmt"
	"image"
	"math"
	"math/rand/v2"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// Defaults of EgoMotionConfig.
const (
	DefaultEgoWorkWidth     = 640
	DefaultEgoMaxFeatures   = 250
	DefaultEgoMaxRangeM     = 15.0
	DefaultEgoMaxIntervalUs = 250_000
	DefaultEgoInlierPx      = 2.0
	DefaultEgoIterations    = 80
	DefaultEgoMinInliers    = 12
	DefaultEgoWindowPx      = 11
	DefaultEgoPyramidLevels = 3
	// DefaultEgoSpeedFloorMps and DefaultEgoYawRateFloorRps are added in
	// quadrature to the noise the fit reports, for what the fit cannot
	// see: a road that is not quite flat, pitch and roll of the body. Our
	// own choice, checked against the photo drives and simdrive (README,
	// "Ego-motion from the video"): on the default simulated drive the
	// fit's own standard deviations alone were over-confident by a factor
	// of about 1.2 (NEES 1.3 for speed, 1.4 for yaw rate), with the floors
	// the NEES is below 1. Real roads, with pitch, need larger floors.
	DefaultEgoSpeedFloorMps   = 0.015
	DefaultEgoYawRateFloorRps = 0.004
	// DefaultEgoSideslipRad is the standard deviation of the angle between
	// the vehicle reference point's direction of travel and the chord of
	// its arc (see EgoMotionConfig.SideslipRad): about 2 degrees, a
	// generous bound for the rear axle of a car in ordinary driving (from
	// memory, common practice). DefaultEgoSideslipFloorM is added in
	// quadrature, for a reference point a little off the rear axle.
	DefaultEgoSideslipRad    = 0.035
	DefaultEgoSideslipFloorM = 0.003
)

// EgoMotionConfig configures an EgoMotion. Zero fields take the defaults
// above; negative or non-finite values are rejected by NewEgoMotion.
type EgoMotionConfig struct {
	// Camera is the calibrated camera of the frames; required.
	Camera Camera
	// WorkWidth is the width frames are reduced to (area averaging) before
	// features are found and tracked; capped at the camera width.
	WorkWidth int
	// MaxFeatures caps the features taken per frame pair
	// (cv::goodFeaturesToTrack).
	MaxFeatures int
	// WindowPx is the side of the Lucas-Kanade search window at each
	// pyramid level, work pixels (odd); PyramidLevels the number of levels
	// above the base (cv::calcOpticalFlowPyrLK's winSize and maxLevel).
	WindowPx, PyramidLevels int
	// MaxRangeM is the farthest ground point used, measured on the ground
	// from the camera: farther ones say little about forward motion.
	MaxRangeM float64
	// MaxIntervalUs is the longest interval between two frames that are
	// paired; after a longer gap the next frame only starts a new pair.
	MaxIntervalUs int64
	// InlierPx is the RANSAC inlier threshold: the distance in
	// full-resolution pixels between a tracked point and where the motion
	// puts it.
	InlierPx float64
	// Iterations is the number of RANSAC draws of two points.
	Iterations int
	// MinInliers is the fewest inliers an estimate may rest on.
	MinInliers int
	// SpeedFloorMps and YawRateFloorRps are added in quadrature to the
	// standard deviations the fit reports.
	SpeedFloorMps, YawRateFloorRps float64
	// SideslipRad and SideslipFloorM state how closely the vehicle
	// follows its heading: a wheeled vehicle's reference point (the rear
	// axle, filter's package doc) moves along the chord of its arc, at the
	// angle half the yaw change from its heading at T0, so the lateral
	// motion is not free but dy ≈ dx·tan(dyaw/2) (the non-holonomic
	// constraint; Scaramuzza, Fraundorfer and Siegwart 2009 use it for
	// 1-point RANSAC). The fit takes it as a prior: the distance of the
	// motion from that chord is normal with standard deviation
	// sqrt((SideslipRad·chord)² + SideslipFloorM²). It pins the lateral
	// motion, which a forward camera sees only through the near road and
	// confuses with yaw; the yaw noise drops accordingly.
	// NoSideslipPrior fits the three parameters freely instead (a
	// vehicle that can move sideways, or a camera whose mount is not
	// known relative to the rear axle).
	SideslipRad, SideslipFloorM float64
	NoSideslipPrior             bool
	// Seed seeds the RANSAC draws, so that a replay is repeatable.
	Seed uint64
}

func (c EgoMotionConfig) withDefaults() (EgoMotionConfig, error) {
	if err := c.Camera.Validate(); err != nil {
		return c, err
	}
	for _, f := range []struct {
		name string
		v    float64
	}{
		{"WorkWidth", float64(c.WorkWidth)}, {"MaxFeatures", float64(c.MaxFeatures)}, {"MaxRangeM", c.MaxRangeM},
		{"MaxIntervalUs", float64(c.MaxIntervalUs)}, {"InlierPx", c.InlierPx}, {"Iterations", float64(c.Iterations)},
		{"MinInliers", float64(c.MinInliers)}, {"SpeedFloorMps", c.SpeedFloorMps}, {"YawRateFloorRps", c.YawRateFloorRps},
		{"WindowPx", float64(c.WindowPx)}, {"PyramidLevels", float64(c.PyramidLevels)},
		{"SideslipRad", c.SideslipRad}, {"SideslipFloorM", c.SideslipFloorM},
	} {
		if !finite(f.v) || f.v < 0 {
			return c, fmt.Errorf("ego-motion %s = %v must be a finite number >= 0 (0 = default): %w", f.name, f.v, ErrInvalidConfig)
		}
	}
	setI := func(p *int, d int) {
		if *p == 0 {
			*p = d
		}
	}
	setF := func(p *float64, d float64) {
		if *p == 0 {
			*p = d
		}
	}
	setI(&c.WorkWidth, DefaultEgoWorkWidth)
	c.WorkWidth = min(c.WorkWidth, c.Camera.Width)
	setI(&c.MaxFeatures, DefaultEgoMaxFeatures)
	setI(&c.WindowPx, DefaultEgoWindowPx)
	setI(&c.PyramidLevels, DefaultEgoPyramidLevels)
	if c.WindowPx < 5 || c.WindowPx%2 == 0 {
		return c, fmt.Errorf("ego-motion WindowPx %d must be odd and at least 5: %w", c.WindowPx, ErrInvalidConfig)
	}
	setF(&c.MaxRangeM, DefaultEgoMaxRangeM)
	if c.MaxIntervalUs == 0 {
		c.MaxIntervalUs = DefaultEgoMaxIntervalUs
	}
	setF(&c.InlierPx, DefaultEgoInlierPx)
	setI(&c.Iterations, DefaultEgoIterations)
	setI(&c.MinInliers, DefaultEgoMinInliers)
	c.MinInliers = max(c.MinInliers, 3)
	setF(&c.SpeedFloorMps, DefaultEgoSpeedFloorMps)
	setF(&c.YawRateFloorRps, DefaultEgoYawRateFloorRps)
	setF(&c.SideslipRad, DefaultEgoSideslipRad)
	setF(&c.SideslipFloorM, DefaultEgoSideslipFloorM)
	if c.WorkWidth < 32 {
		return c, fmt.Errorf("ego-motion WorkWidth %d is below 32 pixels, too small to track: %w", c.WorkWidth, ErrInvalidConfig)
	}
	return c, nil
}

// EgoEstimate is the vehicle's motion between two real frames, estimated
// from the video.
type EgoEstimate struct {
	// T0Us and T1Us are the capture times of the two frames.
	T0Us, T1Us int64
	// DxM, DyM and DyawRad are the motion from T0Us to T1Us in the vehicle
	// frame at T0Us, read as filter.Motion's.
	DxM, DyM, DyawRad float64
	// Cov is the covariance of (DxM, DyM, DyawRad) from the fit.
	Cov [3][3]float64
	// SpeedMps and YawRateRps are the mean speed and yaw rate over the
	// interval; their standard deviations include the Config's floors.
	SpeedMps, YawRateRps       float64
	SpeedStdMps, YawRateStdRps float64
	Tracked, Inliers           int
	// RMSPx is the root-mean-square residual of the inliers, pixels.
	RMSPx float64
}

// Sample returns the estimate as a filter sample (filter.SourceVideo),
// stamped at the middle of the interval: the mean rates over an interval
// are the rates at its middle to first order.
func (e EgoEstimate) Sample() filter.Sample {
	return filter.Sample{
		TimeUs: e.T0Us + (e.T1Us-e.T0Us)/2, SpeedMps: e.SpeedMps, YawRateRps: e.YawRateRps,
		Source: filter.SourceVideo, SpeedStdMps: e.SpeedStdMps, YawRateStdRps: e.YawRateStdRps,
	}
}

// EgoMotion estimates the vehicle's planar motion from consecutive real
// frames: sparse Lucas-Kanade optical flow (cv::calcOpticalFlowPyrLK) of
// corners (cv::goodFeaturesToTrack) on the road region, each point taken
// to the ground plane of the known camera height, and a RANSAC fit of the
// three parameters of the planar motion (forward, lateral, yaw) from pairs
// of ground points (closed-form two-point rigid fit), refined by
// Gauss-Newton on the pixel residuals of the inliers. The camera height
// gives the scale.
//
// It assumes the road is the dominant plane in the region below the
// horizon and within Config.MaxRangeM; moving vehicles and upright
// structures there are outliers to the fit. It sees nothing when the road
// has no texture (fresh asphalt at night): Observe then reports no
// estimate.
//
// Buffers: EgoMotion owns its reduced grey copies of the last two frames
// and the point buffers; Observe only reads the caller's frame. Observe
// does not allocate on the Go heap in steady state (OpenCV may reallocate
// its point Mats when the feature count changes). Not safe for concurrent
// use.
type EgoMotion struct {
	cfg   EgoMotionConfig
	scale float64 // work pixels per full-resolution pixel
	roi   image.Rectangle
	rot   mat3 // R_cv
	rotT  mat3
	tr    vec3 // t = -R_cv C
	ctr   vec3 // camera centre C in the vehicle frame

	small, prev, cur gocv.Mat
	corners, next    gocv.Mat
	status, errs     gocv.Mat
	crit             gocv.TermCriteria
	hasPrev          bool
	prevUs           int64
	rng              *rand.Rand

	// Per-point buffers (capacity MaxFeatures): ground points at T0 and
	// T1 (vehicle frames), the undistorted pixel at T1, inlier flags.
	g0, g1 [][2]float64
	px1    [][2]float64
	in     []bool
	closed bool
	// priorW is the pixel noise variance the sideslip prior is weighed
	// against (0: no prior, the first refinement round).
	priorW float64
}

// NewEgoMotion validates cfg and allocates the buffers.
func NewEgoMotion(cfg EgoMotionConfig) (*EgoMotion, error) {
	c, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	e := &EgoMotion{cfg: c, scale: float64(c.WorkWidth) / float64(c.Camera.Width)}
	e.rot = c.Camera.RotationVehicleToCamera()
	e.rotT = transpose3(e.rot)
	e.ctr = c.Camera.CentreVehicle()
	_, e.tr = c.Camera.Extrinsics()
	wh := max(1, int(math.Round(float64(c.Camera.Height)*e.scale)))
	e.roi = image.Rect(0, e.roadTopRow(wh), c.WorkWidth, wh)
	if e.roi.Dy() < 16 {
		return nil, fmt.Errorf("ego-motion: the road region within %.0f m is %d rows at %d px width; the camera sees too little road (raise MaxRangeM or WorkWidth): %w",
			c.MaxRangeM, e.roi.Dy(), c.WorkWidth, ErrInvalidConfig)
	}
	e.small, e.prev, e.cur = gocv.NewMat(), gocv.NewMat(), gocv.NewMat()
	e.corners, e.next = gocv.NewMat(), gocv.NewMat()
	e.status, e.errs = gocv.NewMat(), gocv.NewMat()
	e.crit = gocv.NewTermCriteria(gocv.Count|gocv.EPS, 20, 0.03)
	e.rng = rand.New(rand.NewPCG(c.Seed, 0x65676f))
	n := c.MaxFeatures
	e.g0, e.g1, e.px1, e.in = make([][2]float64, 0, n), make([][2]float64, 0, n), make([][2]float64, 0, n), make([]bool, n)
	return e, nil
}

// roadTopRow is the first work row of the road region: the highest row
// where a ground point at MaxRangeM (straight ahead or 45 degrees to a
// side) or the horizon falls, whichever is lower, clamped to the image.
func (e *EgoMotion) roadTopRow(wh int) int {
	c := e.cfg.Camera
	top := math.Inf(1)
	for _, dir := range [][2]float64{{1, 0}, {math.Sqrt2 / 2, math.Sqrt2 / 2}, {math.Sqrt2 / 2, -math.Sqrt2 / 2}} {
		p := vec3{c.XOffsetM + dir[0]*e.cfg.MaxRangeM, c.YOffsetM + dir[1]*e.cfg.MaxRangeM, 0}
		if _, v, err := c.ProjectVehiclePointPinhole(p); err == nil {
			top = math.Min(top, v)
		}
	}
	if h := c.Horizon(); h.B != 0 {
		for _, u := range []float64{0, float64(c.Width - 1)} {
			if v, ok := h.RowAt(u); ok {
				top = math.Max(top, v+2)
			}
		}
	}
	if math.IsInf(top, 1) {
		top = 0
	}
	r := int(math.Floor((top+0.5)*e.scale - 0.5))
	return max(0, min(wh, r))
}

// Close frees the OpenCV buffers. Close is idempotent.
func (e *EgoMotion) Close() {
	if e.closed {
		return
	}
	e.closed = true
	for _, m := range []*gocv.Mat{&e.small, &e.prev, &e.cur, &e.corners, &e.next, &e.status, &e.errs} {
		m.Close()
	}
}

// Reset forgets the previous frame (after a camera restart or a seek).
func (e *EgoMotion) Reset() { e.hasPrev = false }

// Observe takes the next real frame (BGR, the camera's size) and its
// capture time and, when the previous observed frame is recent enough,
// returns the motion between the two with ok = true. ok is false for the
// first frame, after a gap longer than Config.MaxIntervalUs, and when the
// fit found too few inliers (too little road texture); the frame still
// becomes the previous one. A frame not newer than the previous one is
// refused with ErrTimeOrder and changes nothing.
func (e *EgoMotion) Observe(frame gocv.Mat, captureUs int64) (est EgoEstimate, ok bool, err error) {
	if e.closed {
		return EgoEstimate{}, false, ErrClosed
	}
	c := e.cfg.Camera
	if err := checkFrame("ego-motion frame", &frame, c.Width, c.Height); err != nil {
		return EgoEstimate{}, false, err
	}
	if e.hasPrev && captureUs <= e.prevUs {
		return EgoEstimate{}, false, fmt.Errorf("ego-motion: frame captured at %d us is not after the previous one at %d us; feed frames in capture order or call Reset: %w",
			captureUs, e.prevUs, ErrTimeOrder)
	}
	wh := max(1, int(math.Round(float64(c.Height)*e.scale)))
	gocv.Resize(frame, &e.small, image.Pt(e.cfg.WorkWidth, wh), 0, 0, gocv.InterpolationArea)
	gocv.CvtColor(e.small, &e.cur, gocv.ColorBGRToGray)
	pair := e.hasPrev && captureUs-e.prevUs <= e.cfg.MaxIntervalUs
	t0 := e.prevUs
	if pair {
		est, ok, err = e.estimate(t0, captureUs)
	}
	e.prev, e.cur = e.cur, e.prev
	e.hasPrev, e.prevUs = true, captureUs
	return est, ok, err
}

// estimate tracks the previous frame's corners into the current one and
// fits the motion.
func (e *EgoMotion) estimate(t0, t1 int64) (EgoEstimate, bool, error) {
	region := e.prev.Region(e.roi)
	gocv.GoodFeaturesToTrack(region, &e.corners, e.cfg.MaxFeatures, 0.01, float64(e.cfg.WorkWidth)/64)
	region.Close()
	n := e.corners.Rows()
	if n < e.cfg.MinInliers {
		return EgoEstimate{}, false, nil
	}
	pts, err := e.corners.DataPtrFloat32()
	if err != nil {
		return EgoEstimate{}, false, fmt.Errorf("ego-motion: corner buffer: %w", err)
	}
	for i := 0; i < n; i++ {
		pts[2*i] += float32(e.roi.Min.X)
		pts[2*i+1] += float32(e.roi.Min.Y)
	}
	gocv.CalcOpticalFlowPyrLKWithParams(e.prev, e.cur, e.corners, e.next, &e.status, &e.errs,
		image.Pt(e.cfg.WindowPx, e.cfg.WindowPx), e.cfg.PyramidLevels, e.crit, 0, 1e-4)
	nxt, err := e.next.DataPtrFloat32()
	if err != nil {
		return EgoEstimate{}, false, fmt.Errorf("ego-motion: flow buffer: %w", err)
	}
	st, err := e.status.DataPtrUint8()
	if err != nil {
		return EgoEstimate{}, false, fmt.Errorf("ego-motion: status buffer: %w", err)
	}
	e.g0, e.g1, e.px1 = e.g0[:0], e.g1[:0], e.px1[:0]
	inv := 1 / e.scale
	for i := 0; i < n && i < len(st); i++ {
		if st[i] == 0 {
			continue
		}
		u0, v0 := (float64(pts[2*i])+0.5)*inv-0.5, (float64(pts[2*i+1])+0.5)*inv-0.5
		u1, v1 := (float64(nxt[2*i])+0.5)*inv-0.5, (float64(nxt[2*i+1])+0.5)*inv-0.5
		x0, y0 := e.undistort(u0, v0)
		x1, y1 := e.undistort(u1, v1)
		p0, ok0 := e.toGround(x0, y0)
		p1, ok1 := e.toGround(x1, y1)
		if !ok0 || !ok1 {
			continue
		}
		e.g0 = append(e.g0, p0)
		e.g1 = append(e.g1, p1)
		c := e.cfg.Camera
		e.px1 = append(e.px1, [2]float64{c.Fx*x1 + c.Cx, c.Fy*y1 + c.Cy})
	}
	m := len(e.g0)
	if m < e.cfg.MinInliers {
		return EgoEstimate{}, false, nil
	}
	best, nBest := e.ransac()
	if nBest < e.cfg.MinInliers {
		return EgoEstimate{}, false, nil
	}
	p := best
	var nIn int
	e.priorW = 0
	for round := 0; round < 2; round++ {
		p = e.refine(p)
		nIn = e.markInliers(p)
		if nIn < e.cfg.MinInliers {
			return EgoEstimate{}, false, nil
		}
		if round == 0 && !e.cfg.NoSideslipPrior {
			// The prior's weight in the normal equations is the pixel
			// noise variance over the prior's: s²/σ_c², with s² from the
			// free fit's residuals (as in covariance).
			_, _, sse := e.normal(p)
			e.priorW = 2 * sse / float64(max(1, 2*nIn-3))
		}
	}
	cov, rms, ok := e.covariance(p, nIn)
	if !ok {
		return EgoEstimate{}, false, nil
	}
	est := EgoEstimate{T0Us: t0, T1Us: t1, DxM: p[0], DyM: p[1], DyawRad: p[2], Cov: cov,
		Tracked: m, Inliers: nIn, RMSPx: rms}
	e.rates(&est)
	return est, true, nil
}

// undistort returns the undistorted normalised coordinates of pixel (u, v)
// by the fixed-point iteration OpenCV's cv::undistortPoints uses (the
// distortion model of Camera.ProjectVehiclePoint inverted, 8 rounds;
// exact for a pinhole camera).
func (e *EgoMotion) undistort(u, v float64) (x, y float64) {
	c := e.cfg.Camera
	xd, yd := (u-c.Cx)/c.Fx, (v-c.Cy)/c.Fy
	if !c.HasDistortion() {
		return xd, yd
	}
	x, y = xd, yd
	for range 8 {
		r2 := x*x + y*y
		radial := 1 + r2*(c.K1+r2*(c.K2+r2*c.K3))
		dx := 2*c.P1*x*y + c.P2*(r2+2*x*x)
		dy := c.P1*(r2+2*y*y) + 2*c.P2*x*y
		x, y = (xd-dx)/radial, (yd-dy)/radial
	}
	return x, y
}

// toGround intersects the ray of undistorted normalised point (x, y) with
// the road plane and returns the point in the vehicle frame, or false if
// the ray does not meet the road within MaxRangeM.
func (e *EgoMotion) toGround(x, y float64) ([2]float64, bool) {
	d := mul3v(e.rotT, vec3{x, y, 1})
	if !(d[2] < -1e-9) {
		return [2]float64{}, false
	}
	s := -e.ctr[2] / d[2]
	gx, gy := s*d[0], s*d[1]
	if math.Hypot(gx, gy) > e.cfg.MaxRangeM {
		return [2]float64{}, false
	}
	return [2]float64{e.ctr[0] + gx, e.ctr[1] + gy}, true
}

// moveAndProject maps ground point g (vehicle frame at T0) by the motion
// p = (dx, dy, dyaw) into the vehicle frame at T1, g1 = Rz(-dyaw)(g - D),
// and returns its pinhole pixel.
func (e *EgoMotion) moveAndProject(p [3]float64, g [2]float64) (u, v float64, ok bool) {
	s, c := math.Sincos(p[2])
	ax, ay := g[0]-p[0], g[1]-p[1]
	q := vec3{c*ax + s*ay, -s*ax + c*ay, 0}
	r := mul3v(e.rot, q)
	r = vec3{r[0] + e.tr[0], r[1] + e.tr[1], r[2] + e.tr[2]}
	if !(r[2] > 1e-6) {
		return 0, 0, false
	}
	cam := e.cfg.Camera
	return cam.Fx*r[0]/r[2] + cam.Cx, cam.Fy*r[1]/r[2] + cam.Cy, true
}

// residual2 is the squared pixel distance of point i from where motion p
// puts it.
func (e *EgoMotion) residual2(p [3]float64, i int) float64 {
	u, v, ok := e.moveAndProject(p, e.g0[i])
	if !ok {
		return math.Inf(1)
	}
	du, dv := u-e.px1[i][0], v-e.px1[i][1]
	return du*du + dv*dv
}

// ransac draws pairs of ground points, fits the rigid motion that takes
// the T1 points onto the T0 points (two-point closed form), and keeps the
// motion with the most inliers (ties: the smaller sum of squared
// residuals).
func (e *EgoMotion) ransac() (best [3]float64, nBest int) {
	m := len(e.g0)
	thr2 := e.cfg.InlierPx * e.cfg.InlierPx
	bestCost := math.Inf(1)
	for it := 0; it < e.cfg.Iterations; it++ {
		i, j := e.rng.IntN(m), e.rng.IntN(m-1)
		if j >= i {
			j++
		}
		a0 := [2]float64{e.g0[j][0] - e.g0[i][0], e.g0[j][1] - e.g0[i][1]}
		a1 := [2]float64{e.g1[j][0] - e.g1[i][0], e.g1[j][1] - e.g1[i][1]}
		if math.Hypot(a0[0], a0[1]) < 0.3 {
			continue
		}
		// g0 = Rz(ψ) g1 + D: ψ is the angle from a1 to a0.
		psi := math.Atan2(a1[0]*a0[1]-a1[1]*a0[0], a1[0]*a0[0]+a1[1]*a0[1])
		s, c := math.Sincos(psi)
		p := [3]float64{e.g0[i][0] - (c*e.g1[i][0] - s*e.g1[i][1]), e.g0[i][1] - (s*e.g1[i][0] + c*e.g1[i][1]), psi}
		n, cost := 0, 0.0
		for k := 0; k < m; k++ {
			r2 := e.residual2(p, k)
			if r2 < thr2 {
				n++
				cost += r2
			}
		}
		if n > nBest || (n == nBest && cost < bestCost) {
			best, nBest, bestCost = p, n, cost
		}
	}
	e.markInliers(best)
	return best, nBest
}

// markInliers flags the points within the threshold of motion p and
// returns their count.
func (e *EgoMotion) markInliers(p [3]float64) int {
	thr2 := e.cfg.InlierPx * e.cfg.InlierPx
	n := 0
	for k := range e.g0 {
		e.in[k] = e.residual2(p, k) < thr2
		if e.in[k] {
			n++
		}
	}
	return n
}

// jacobianStep is the central-difference step of the refinement's
// Jacobian (metres and radians): small against the motion between frames,
// large against rounding.
const jacobianStep = 1e-5

// normal accumulates JᵀJ and Jᵀr over the inliers at p (r = observed -
// predicted pixel).
func (e *EgoMotion) normal(p [3]float64) (jtj mat3, jtr vec3, sse float64) {
	for k := range e.g0 {
		if !e.in[k] {
			continue
		}
		u, v, ok := e.moveAndProject(p, e.g0[k])
		if !ok {
			continue
		}
		ru, rv := e.px1[k][0]-u, e.px1[k][1]-v
		sse += ru*ru + rv*rv
		var ju, jv vec3
		for a := 0; a < 3; a++ {
			pp, pm := p, p
			pp[a] += jacobianStep
			pm[a] -= jacobianStep
			up, vp, _ := e.moveAndProject(pp, e.g0[k])
			um, vm, _ := e.moveAndProject(pm, e.g0[k])
			ju[a], jv[a] = (up-um)/(2*jacobianStep), (vp-vm)/(2*jacobianStep)
		}
		for a := 0; a < 3; a++ {
			jtr[a] += ju[a]*ru + jv[a]*rv
			for b := 0; b < 3; b++ {
				jtj[a][b] += ju[a]*ju[b] + jv[a]*jv[b]
			}
		}
	}
	if e.priorW > 0 {
		jc, c, vc := e.sideslip(p)
		w := e.priorW / vc
		for a := 0; a < 3; a++ {
			jtr[a] -= w * jc[a] * c
			for b := 0; b < 3; b++ {
				jtj[a][b] += w * jc[a] * jc[b]
			}
		}
	}
	return jtj, jtr, sse
}

// sideslip returns the prior's residual c = dy·cos(ψ/2) − dx·sin(ψ/2),
// the signed distance (metres) of the motion p = (dx, dy, ψ) from the
// chord at angle ψ/2, its gradient, and its prior variance
// (SideslipRad·chord)² + SideslipFloorM² (see EgoMotionConfig).
func (e *EgoMotion) sideslip(p [3]float64) (jc vec3, c, variance float64) {
	s, co := math.Sincos(p[2] / 2)
	c = p[1]*co - p[0]*s
	jc = vec3{-s, co, -(p[1]*s + p[0]*co) / 2}
	chord := math.Hypot(p[0], p[1])
	variance = e.cfg.SideslipRad*e.cfg.SideslipRad*chord*chord + e.cfg.SideslipFloorM*e.cfg.SideslipFloorM
	return jc, c, variance
}

// refine runs Gauss-Newton on the inliers' pixel residuals from p.
func (e *EgoMotion) refine(p [3]float64) [3]float64 {
	for range 5 {
		jtj, jtr, _ := e.normal(p)
		inv, ok := inv3(jtj)
		if !ok {
			return p
		}
		d := mul3v(inv, jtr)
		for a := range p {
			p[a] += d[a]
		}
		if math.Abs(d[0])+math.Abs(d[1]) < 1e-6 && math.Abs(d[2]) < 1e-7 {
			break
		}
	}
	return p
}

// covariance is σ²(JᵀJ)⁻¹ at p with σ² the residual variance per pixel
// coordinate, doubled because both frames' points carry tracking noise
// and the fit charges all of it to the second (an approximation of ours).
// With the sideslip prior JᵀJ includes its term (weighed as in normal),
// so the result is the posterior covariance (JᵀJ/σ² + J_cᵀJ_c/σ_c²)⁻¹.
func (e *EgoMotion) covariance(p [3]float64, n int) (cov mat3, rmsPx float64, ok bool) {
	jtj, _, sse := e.normal(p)
	dof := 2*n - 3
	if dof <= 0 {
		return cov, 0, false
	}
	inv, ok := inv3(jtj)
	if !ok {
		return cov, 0, false
	}
	s2 := 2 * sse / float64(dof)
	for a := range 3 {
		for b := range 3 {
			cov[a][b] = s2 * inv[a][b]
		}
	}
	return cov, math.Sqrt(sse / float64(n)), finite(cov[0][0]) && finite(cov[2][2])
}

// rates fills the mean speed and yaw rate over the interval and their
// standard deviations. Along an arc of constant curvature the rotation
// centre moves by v·T·sinc(ψ/2) in the direction ψ/2 (filter's transition),
// so v = (dx cos(ψ/2) + dy sin(ψ/2)) / (T sinc(ψ/2)) and ω = ψ/T; the
// variances follow to first order.
func (e *EgoMotion) rates(est *EgoEstimate) {
	tS := float64(est.T1Us-est.T0Us) * 1e-6
	speed := func(p [3]float64) float64 {
		s, c := math.Sincos(p[2] / 2)
		sc := 1.0
		if h := p[2] / 2; math.Abs(h) > 1e-9 {
			sc = math.Sin(h) / h
		}
		return (p[0]*c + p[1]*s) / (tS * sc)
	}
	p := [3]float64{est.DxM, est.DyM, est.DyawRad}
	est.SpeedMps = speed(p)
	est.YawRateRps = est.DyawRad / tS
	var j vec3
	for a := range 3 {
		pp, pm := p, p
		pp[a] += jacobianStep
		pm[a] -= jacobianStep
		j[a] = (speed(pp) - speed(pm)) / (2 * jacobianStep)
	}
	var vv float64
	for a := range 3 {
		for b := range 3 {
			vv += j[a] * est.Cov[a][b] * j[b]
		}
	}
	est.SpeedStdMps = math.Sqrt(math.Max(vv, 0) + e.cfg.SpeedFloorMps*e.cfg.SpeedFloorMps)
	est.YawRateStdRps = math.Sqrt(math.Max(est.Cov[2][2], 0)/(tS*tS) + e.cfg.YawRateFloorRps*e.cfg.YawRateFloorRps)
}
