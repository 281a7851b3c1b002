package bench

import (
	"encoding/binary"
	"fmt"
	"image"
	"math"

	"gocv.io/x/gocv"

	"stopgap/predictor"
)

// Misalignment meter settings. Design choices of this project (common
// practice for pyramidal Lucas-Kanade tracking, not published values).
const (
	misalignMaxCorners = 300  // corners tracked per frame
	misalignQuality    = 0.01 // corner quality relative to the best
	misalignWindowPx   = 21   // LK window side
	misalignLevels     = 3    // LK pyramid levels above the base
	misalignFBMaxPx    = 1.0  // forward-backward disagreement allowed
	misalignRansacPx   = 2.0  // RANSAC reprojection threshold
	misalignMinPoints  = 12   // fewer inliers: not measured
)

// MisalignmentMeter measures, from the images alone, how far a predicted
// frame places given points from where the true frame shows them: the
// residual motion of a region (the road) between the two.
//
// Method: corners of the true frame inside the region (Shi-Tomasi,
// cv::goodFeaturesToTrack) are tracked into the predicted frame with
// pyramidal Lucas-Kanade (cv::calcOpticalFlowPyrLK), kept if tracking back
// lands within 1 px of the start, and a homography is fitted to them with
// RANSAC (cv::findHomography, 2 px); the misalignment of a point p of the
// true frame is |H p − p|. A planar region (the road) moves by a homography,
// so the fit is exact for the residual of a ground-plane prediction.
//
// The zero value is not usable; create it with NewMisalignmentMeter and
// Close it. Not safe for concurrent use; it owns its scratch images.
type MisalignmentMeter struct {
	grayA, grayB, corners, tracked, back, status, errs, mask gocv.Mat
}

// NewMisalignmentMeter returns a meter with empty scratch images.
func NewMisalignmentMeter() *MisalignmentMeter {
	return &MisalignmentMeter{
		grayA: gocv.NewMat(), grayB: gocv.NewMat(), corners: gocv.NewMat(),
		tracked: gocv.NewMat(), back: gocv.NewMat(), status: gocv.NewMat(), errs: gocv.NewMat(), mask: gocv.NewMat(),
	}
}

// Close frees the scratch images. Safe to call more than once.
func (m *MisalignmentMeter) Close() {
	for _, p := range []*gocv.Mat{&m.grayA, &m.grayB, &m.corners, &m.tracked, &m.back, &m.status, &m.errs, &m.mask} {
		if p.Ptr() != nil {
			p.Close()
			*p = gocv.Mat{}
		}
	}
}

// Measurement is the result of MisalignmentMeter.Measure.
type Measurement struct {
	// MaxPx is the largest displacement over the points, pixels; NaN when
	// too few features could be tracked (Inliers < 12).
	MaxPx float64
	// Inliers is the number of tracked features consistent with the fit.
	Inliers int
	// H maps true-frame pixels to predicted-frame pixels (valid when MaxPx
	// is not NaN).
	H predictor.Homography
}

// Measure returns the misalignment of points (pixel coordinates in the true
// frame) between predicted and truth, estimated from the features of truth
// inside region. Both images are 8-bit BGR or gray of the same size; they
// are only read.
func (m *MisalignmentMeter) Measure(predicted, truth gocv.Mat, region image.Rectangle, points [][2]float64) (Measurement, error) {
	out := Measurement{MaxPx: math.NaN()}
	if predicted.Empty() || truth.Empty() || predicted.Rows() != truth.Rows() || predicted.Cols() != truth.Cols() {
		return out, fmt.Errorf("misalignment: predicted %dx%d and true %dx%d frames must be non-empty and the same size: %w",
			predicted.Cols(), predicted.Rows(), truth.Cols(), truth.Rows(), ErrReplayInput)
	}
	region = region.Intersect(image.Rect(0, 0, truth.Cols(), truth.Rows()))
	if region.Dx() < 2*misalignWindowPx || region.Dy() < 2*misalignWindowPx {
		return out, nil
	}
	if err := toGray(&m.grayA, truth); err != nil {
		return out, err
	}
	if err := toGray(&m.grayB, predicted); err != nil {
		return out, err
	}
	// Work on the region of both images: coordinates are region-relative
	// until the fit is mapped back below.
	ra, rb := m.grayA.Region(region), m.grayB.Region(region)
	defer ra.Close()
	defer rb.Close()
	gocv.GoodFeaturesToTrack(ra, &m.corners, misalignMaxCorners, misalignQuality, 5)
	n := m.corners.Rows()
	if n < misalignMinPoints {
		return out, nil
	}
	win := image.Pt(misalignWindowPx, misalignWindowPx)
	crit := gocv.NewTermCriteria(gocv.Count+gocv.EPS, 30, 0.01)
	m.tracked.Close()
	m.tracked = gocv.NewMat()
	gocv.CalcOpticalFlowPyrLKWithParams(ra, rb, m.corners, m.tracked, &m.status, &m.errs, win, misalignLevels, crit, 0, 1e-4)
	st1 := statusCopy(m.status, n)
	m.back.Close()
	m.back = gocv.NewMat()
	gocv.CalcOpticalFlowPyrLKWithParams(rb, ra, m.tracked, m.back, &m.status, &m.errs, win, misalignLevels, crit, 0, 1e-4)
	st2 := statusCopy(m.status, n)
	var src, dst []float32
	for i := 0; i < n; i++ {
		if !st1[i] || !st2[i] {
			continue
		}
		a, b, c := m.corners.GetVecfAt(i, 0), m.tracked.GetVecfAt(i, 0), m.back.GetVecfAt(i, 0)
		if math.Hypot(float64(c[0]-a[0]), float64(c[1]-a[1])) > misalignFBMaxPx {
			continue
		}
		src = append(src, a[0], a[1])
		dst = append(dst, b[0], b[1])
	}
	if len(src)/2 < misalignMinPoints {
		return out, nil
	}
	sm, err := pointsMat(src)
	if err != nil {
		return out, err
	}
	defer sm.Close()
	dm, err := pointsMat(dst)
	if err != nil {
		return out, err
	}
	defer dm.Close()
	hm := gocv.FindHomography(sm, &dm, gocv.HomograpyMethodRANSAC, misalignRansacPx, &m.mask, 2000, 0.995)
	defer hm.Close()
	if hm.Empty() || hm.Rows() != 3 || hm.Cols() != 3 {
		return out, nil
	}
	inl := 0
	for i := 0; i < m.mask.Rows(); i++ {
		if m.mask.GetUCharAt(i, 0) != 0 {
			inl++
		}
	}
	out.Inliers = inl
	if inl < misalignMinPoints {
		return out, nil
	}
	var h predictor.Homography
	for r := 0; r < 3; r++ {
		for c := 0; c < 3; c++ {
			h[r][c] = hm.GetDoubleAt(r, c)
		}
	}
	if !h.IsFinite() {
		return out, nil
	}
	// Back to full-frame coordinates: H = T H_roi T⁻¹, T the region shift.
	ox, oy := float64(region.Min.X), float64(region.Min.Y)
	worst := 0.0
	for _, p := range points {
		x, y, ok := h.Apply(p[0]-ox, p[1]-oy)
		x, y = x+ox, y+oy
		if !ok {
			return out, nil
		}
		worst = math.Max(worst, math.Hypot(x-p[0], y-p[1]))
	}
	t := predictor.Homography{{1, 0, ox}, {0, 1, oy}, {0, 0, 1}}
	ti := predictor.Homography{{1, 0, -ox}, {0, 1, -oy}, {0, 0, 1}}
	out.MaxPx, out.H = worst, t.Mul(h).Mul(ti)
	return out, nil
}

// pointsMat returns an N x 1 CV_32FC2 Mat of the interleaved x, y values
// (float32 in the machine's byte order, as OpenCV reads them).
func pointsMat(xy []float32) (gocv.Mat, error) {
	b := make([]byte, 4*len(xy))
	for i, v := range xy {
		binary.NativeEndian.PutUint32(b[4*i:], math.Float32bits(v))
	}
	return gocv.NewMatFromBytes(len(xy)/2, 1, gocv.MatTypeCV32FC2, b)
}

// statusCopy reads the first n status bytes of an LK run.
func statusCopy(st gocv.Mat, n int) []bool {
	out := make([]bool, n)
	if st.Rows() < n {
		return out
	}
	for i := range out {
		out[i] = st.GetUCharAt(i, 0) != 0
	}
	return out
}

// toGray writes the 8-bit gray version of src to dst.
func toGray(dst *gocv.Mat, src gocv.Mat) error {
	switch src.Channels() {
	case 1:
		src.CopyTo(dst)
	case 3:
		gocv.CvtColor(src, dst, gocv.ColorBGRToGray)
	default:
		return fmt.Errorf("misalignment: %d-channel image, want gray or BGR: %w", src.Channels(), ErrReplayInput)
	}
	return nil
}

// ReferencePixels returns the pixel positions, in an undistorted frame of
// cam, of the confidence model's reference road points (straight ahead of
// the camera at each reference distance), skipping points that do not
// project in front of the camera.
func ReferencePixels(cam predictor.Camera, cm predictor.ConfidenceModel) [][2]float64 {
	var out [][2]float64
	for _, d := range cm.References() {
		u, v, err := cam.ProjectVehiclePointPinhole([3]float64{cam.XOffsetM + d, cam.YOffsetM, 0})
		if err == nil {
			out = append(out, [2]float64{u, v})
		}
	}
	return out
}

// RoadRegion returns the image rows below the horizon (with a margin of 5 %
// of the height so that the horizon band's blend is left out) as the region
// whose residual motion MisalignmentMeter measures; the lower half of the
// image if the horizon is not in view.
func RoadRegion(cam predictor.Camera) image.Rectangle {
	top := cam.Height / 2
	if v, ok := cam.Horizon().RowAt(cam.Cx); ok && v > 0 && v < float64(cam.Height) {
		top = int(math.Ceil(v + 0.05*float64(cam.Height)))
	}
	if top > cam.Height-2*misalignWindowPx {
		top = cam.Height - 2*misalignWindowPx
	}
	if top < 0 {
		top = 0
	}
	return image.Rect(0, top, cam.Width, cam.Height)
}

// TruthMisalignmentPx returns the misalignment, pixels, that a frame
// predicted with the planar motion pred has when the vehicle really moved
// by truth (both (dx_m, dy_m, dyaw_rad) in the vehicle frame at the gap
// start): the largest distance between where pred and truth project each
// reference road point of cm. It is the exact quantity the confidence
// model's probability is about, available on drives with a truth.csv.
func TruthMisalignmentPx(cam predictor.Camera, cm predictor.ConfidenceModel, pred, truth [3]float64) (float64, error) {
	worst := math.NaN()
	for _, d := range cm.References() {
		p1 := [3]float64{cam.XOffsetM + d, cam.YOffsetM, 0}
		// The world point in the gap-start frame, from the true motion.
		ct, st := math.Cos(truth[2]), math.Sin(truth[2])
		p0 := [2]float64{ct*p1[0] - st*p1[1] + truth[0], st*p1[0] + ct*p1[1] + truth[1]}
		// Where the predicted motion puts it at the target time.
		cp, sp := math.Cos(pred[2]), math.Sin(pred[2])
		qx, qy := p0[0]-pred[0], p0[1]-pred[1]
		q := [3]float64{cp*qx + sp*qy, -sp*qx + cp*qy, 0}
		u1, v1, err1 := cam.ProjectVehiclePointPinhole(p1)
		u2, v2, err2 := cam.ProjectVehiclePointPinhole(q)
		if err1 != nil || err2 != nil {
			continue
		}
		e := math.Hypot(u2-u1, v2-v1)
		if math.IsNaN(worst) || e > worst {
			worst = e
		}
	}
	if math.IsNaN(worst) {
		return worst, fmt.Errorf("misalignment: no reference point projects in front of the camera: %w", ErrReplayInput)
	}
	return worst, nil
}

// PxToMrad converts a pixel distance near the image centre to the angle it
// subtends, milliradians: 1000 · px / fx (small-angle approximation).
func PxToMrad(px, fxPx float64) float64 { return 1000 * px / fxPx }
