package predictor

import (
	"fmt"
	"math"
)

// DefaultToleranceMrad is the default ConfidenceModel.ToleranceMrad: the
// misalignment, as an angle seen from the camera, within which a predicted
// frame counts as good. 10 mrad (0.57°) is 10 cm at 10 m and 20 cm at 20 m,
// about a third of a pedestrian's width at 20 m; 6.4 px for a 1280 px wide
// image with a 90° field of view. A design choice of this project, not a
// published value; the cutoff on top of it is chosen from replays with
// `stopgap tune`.
const DefaultToleranceMrad = 10.0

// defaultReferenceDistancesM returns the default ConfidenceModel reference
// distances: near, middle and far road points an operator looks at.
func defaultReferenceDistancesM() [3]float64 { return [3]float64{5, 10, 20} }

// DefaultReferenceDistancesM returns the default reference distances,
// metres ahead of the camera: 5, 10 and 20.
func DefaultReferenceDistancesM() []float64 {
	d := defaultReferenceDistancesM()
	return d[:]
}

// ConfidenceModel turns the covariance of a relative motion into a
// confidence in [0, 1] with a stated meaning:
//
//	confidence = P(misalignment <= ToleranceMrad)
//
// where the misalignment of a predicted frame is the largest angular
// distance, seen from the camera, between where the frame shows the
// reference road points (straight ahead of the camera at the
// ReferenceDistancesM) and where they really are at the target time. The
// zero value uses the documented defaults.
//
// Method: reference road points are placed straight ahead of the camera at
// T1, at (XOffsetM + d, YOffsetM, 0) in the vehicle frame at T1 for each
// reference distance d. For each, the pixel Jacobian J (2x3) of its predicted
// position in the T1 image with respect to the motion (dx, dy, dyaw) is
// computed analytically, holding the world point fixed:
//
//	P1 = Rz(ψ)ᵀ (P0 - D)  =>  ∂P1/∂dx = -Rzᵀ e_x, ∂P1/∂dy = -Rzᵀ e_y, ∂P1/∂ψ = (y1, -x1, 0)
//	X = R_cv (P1 - C)      =>  ∂(u,v)/∂X = [[Fx/Z, 0, -Fx X/Z²], [0, Fy/Z, -Fy Y/Z²]]
//
// Σ_px = J Cov Jᵀ; the point's 1-sigma error along its worst direction is
// the square root of the larger eigenvalue of Σ_px. sigma_px is the worst
// over the reference points. The probability is that of a zero-mean normal
// error of standard deviation sigma_px staying within the tolerance:
//
//	confidence = erf(tol_px / (sqrt(2) · sigma_px)),  tol_px = ToleranceMrad/1000 · Fx
//
// The approximation keeps only the dominant direction and the worst point:
// the reference points move together (a yaw error shifts them all
// sideways), which is what makes it usable; whether it holds is measured on
// every replay (bench: reliability diagram, expected calibration error),
// and the filter's process noise is fitted so that it does. Confidence is
// 1 for a perfectly known motion and never increases when the covariance
// grows (in the positive semi-definite order). Points on or behind the
// camera plane are skipped; if all are, the confidence is 0 with
// ErrBehindCamera.
type ConfidenceModel struct {
	// ToleranceMrad is the misalignment, milliradians, within which a
	// predicted frame is good; in pixels it is ToleranceMrad/1000 · Fx.
	// Zero means DefaultToleranceMrad.
	ToleranceMrad float64
	// ReferenceDistancesM are the distances ahead of the camera of the
	// reference road points, metres (> 0). Nil means 5, 10 and 20 m.
	ReferenceDistancesM []float64
}

// Validate reports a negative or non-finite tolerance or a non-positive or
// non-finite reference distance, wrapping ErrInvalidConfig.
func (cm ConfidenceModel) Validate() error {
	if !finite(cm.ToleranceMrad) || cm.ToleranceMrad < 0 {
		return fmt.Errorf("confidence ToleranceMrad = %g, want a finite value > 0 (0 for the default %g): %w", cm.ToleranceMrad, DefaultToleranceMrad, ErrInvalidConfig)
	}
	for i, d := range cm.ReferenceDistancesM {
		if !finite(d) || d <= 0 {
			return fmt.Errorf("confidence ReferenceDistancesM[%d] = %g, want a finite distance > 0 m: %w", i, d, ErrInvalidConfig)
		}
	}
	return nil
}

// Tolerance returns the tolerance in milliradians (the default for zero).
func (cm ConfidenceModel) Tolerance() float64 {
	if cm.ToleranceMrad == 0 {
		return DefaultToleranceMrad
	}
	return cm.ToleranceMrad
}

// TolerancePx returns the tolerance in pixels for a focal length of fxPx
// pixels: ToleranceMrad/1000 · fxPx.
func (cm ConfidenceModel) TolerancePx(fxPx float64) float64 {
	return cm.Tolerance() / 1000 * fxPx
}

// References returns the reference distances in metres (the defaults for
// nil), as a new slice.
func (cm ConfidenceModel) References() []float64 {
	if cm.ReferenceDistancesM == nil {
		return DefaultReferenceDistancesM()
	}
	return append([]float64(nil), cm.ReferenceDistancesM...)
}

// FromSigma maps a 1-sigma pixel error, for a camera of focal length fxPx
// pixels, to confidence erf(TolerancePx(fxPx) / (sqrt(2) sigmaPx)): the
// probability that a zero-mean normal error of that standard deviation is
// within the tolerance, at most MaxUncertainConfidence. Zero sigma gives 1;
// NaN or negative input gives 0.
func (cm ConfidenceModel) FromSigma(sigmaPx, fxPx float64) float64 {
	if !(sigmaPx >= 0) || !(fxPx > 0) {
		return 0
	}
	if sigmaPx == 0 {
		return 1
	}
	return math.Min(math.Erf(cm.TolerancePx(fxPx)/(math.Sqrt2*sigmaPx)), MaxUncertainConfidence)
}

// MaxUncertainConfidence caps the confidence of any motion that is not known
// exactly (sigma > 0), where erf would round to 1 in float64: only a
// perfectly known motion reaches 1, so a cutoff of 1 never predicts a gap.
const MaxUncertainConfidence = 1 - 1e-9

// checkCov rejects a covariance with a non-finite entry or negative diagonal
// and returns its symmetric part.
func checkCov(cov [3][3]float64) ([3][3]float64, error) {
	var s mat3
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			if !finite(cov[i][j]) {
				return s, fmt.Errorf("covariance entry [%d][%d] = %g is not finite: %w", i, j, cov[i][j], ErrInvalidMotion)
			}
			s[i][j] = 0.5 * (cov[i][j] + cov[j][i])
		}
		if cov[i][i] < 0 {
			return s, fmt.Errorf("covariance diagonal [%d][%d] = %g is negative: %w", i, i, cov[i][i], ErrInvalidMotion)
		}
	}
	return s, nil
}

// sigmaPlanar returns the worst 1-sigma pixel error (see ConfidenceModel) for
// the planar motion (dx, dy, yaw) with covariance cov, in the undistorted
// (pinhole) geometry of predicted frames.
func (cm ConfidenceModel) sigmaPlanar(c Camera, dx, dy, yaw float64, cov [3][3]float64) (float64, error) {
	if !finite(dx) || !finite(dy) || !finite(yaw) {
		return 0, fmt.Errorf("motion (%g, %g, %g) is not finite: %w", dx, dy, yaw, ErrInvalidMotion)
	}
	s, err := checkCov(cov)
	if err != nil {
		return 0, err
	}
	rcv := c.RotationVehicleToCamera()
	rzT := transpose3(rotZ(yaw))
	cv := c.CentreVehicle()
	worst := math.Inf(-1)
	def := defaultReferenceDistancesM()
	ds := cm.ReferenceDistancesM
	if ds == nil {
		ds = def[:]
	}
	for _, d := range ds {
		p1 := vec3{c.XOffsetM + d, c.YOffsetM, 0}
		x := mul3v(rcv, sub3(p1, cv))
		if !(x[2] > 0) {
			continue
		}
		// Columns: ∂P1/∂dx, ∂P1/∂dy, ∂P1/∂ψ in the vehicle frame at T1.
		dP := [3]vec3{
			{-rzT[0][0], -rzT[1][0], -rzT[2][0]},
			{-rzT[0][1], -rzT[1][1], -rzT[2][1]},
			{p1[1], -p1[0], 0},
		}
		var j [2][3]float64
		iz := 1 / x[2]
		for k := 0; k < 3; k++ {
			dx := mul3v(rcv, dP[k])
			j[0][k] = c.Fx * (dx[0]*iz - x[0]*dx[2]*iz*iz)
			j[1][k] = c.Fy * (dx[1]*iz - x[1]*dx[2]*iz*iz)
		}
		// Σ = J S Jᵀ (2x2, symmetric).
		var js [2][3]float64
		for r := 0; r < 2; r++ {
			for k := 0; k < 3; k++ {
				js[r][k] = j[r][0]*s[0][k] + j[r][1]*s[1][k] + j[r][2]*s[2][k]
			}
		}
		a := js[0][0]*j[0][0] + js[0][1]*j[0][1] + js[0][2]*j[0][2]
		b := js[0][0]*j[1][0] + js[0][1]*j[1][1] + js[0][2]*j[1][2]
		cc := js[1][0]*j[1][0] + js[1][1]*j[1][1] + js[1][2]*j[1][2]
		lambda := 0.5*(a+cc) + math.Hypot(0.5*(a-cc), b)
		sigma := math.Sqrt(math.Max(lambda, 0))
		if sigma > worst {
			worst = sigma
		}
	}
	if math.IsInf(worst, -1) {
		return 0, fmt.Errorf("no reference point is in front of the camera: %w", ErrBehindCamera)
	}
	return worst, nil
}
