package predictor

import (
	"fmt"
	"math"
)

// DefaultConfidenceScaleMrad is the default ConfidenceModel.ScaleMrad, an
// angle so that confidence does not depend on the image resolution: 25 mrad
// is the width of a pedestrian (0.5 m) seen from 20 m. It is a design choice
// of this project, not a published value: at the default cutoff 0.5 a
// prediction is shown while the worst 1-sigma error of the reference road
// points stays under sqrt(2 ln 2)·25 ≈ 29 mrad (1.7°), about one pedestrian
// width at 20 m; 19 px for a 1280 px wide image with a 90° field of view.
const DefaultConfidenceScaleMrad = 25.0

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
// confidence in [0, 1]. The zero value uses the documented defaults.
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
// Σ_px = J Cov Jᵀ; the point's 1-sigma error is the square root of the larger
// eigenvalue of Σ_px. sigma_px is the worst over the reference points, and
//
//	confidence = exp(-0.5 · (sigma_px / scale_px)²),  scale_px = ScaleMrad/1000 · Fx
//
// so confidence is 1 for a perfectly known motion, 0.5 at
// sigma_px ≈ 1.18 scale_px, and never increases when the covariance grows (in
// the positive semi-definite order). Points on or behind the camera plane are
// skipped; if all are, the confidence is 0 with ErrBehindCamera.
type ConfidenceModel struct {
	// ScaleMrad is the angular error, milliradians, at which confidence
	// has fallen to exp(-0.5) ≈ 0.61; in pixels it is ScaleMrad/1000 · Fx.
	// Zero means DefaultConfidenceScaleMrad.
	ScaleMrad float64
	// ReferenceDistancesM are the distances ahead of the camera of the
	// reference road points, metres (> 0). Nil means 5, 10 and 20 m.
	ReferenceDistancesM []float64
}

// Validate reports a negative or non-finite scale or a non-positive or
// non-finite reference distance, wrapping ErrInvalidConfig.
func (cm ConfidenceModel) Validate() error {
	if !finite(cm.ScaleMrad) || cm.ScaleMrad < 0 {
		return fmt.Errorf("confidence ScaleMrad = %g, want a finite value > 0 (0 for the default %g): %w", cm.ScaleMrad, DefaultConfidenceScaleMrad, ErrInvalidConfig)
	}
	for i, d := range cm.ReferenceDistancesM {
		if !finite(d) || d <= 0 {
			return fmt.Errorf("confidence ReferenceDistancesM[%d] = %g, want a finite distance > 0 m: %w", i, d, ErrInvalidConfig)
		}
	}
	return nil
}

// ScalePx returns the confidence scale in pixels for a focal length of fxPx
// pixels: ScaleMrad/1000 · fxPx.
func (cm ConfidenceModel) ScalePx(fxPx float64) float64 {
	s := cm.ScaleMrad
	if s == 0 {
		s = DefaultConfidenceScaleMrad
	}
	return s / 1000 * fxPx
}

// FromSigma maps a 1-sigma pixel error, for a camera of focal length fxPx
// pixels, to confidence exp(-0.5 (sigmaPx/ScalePx(fxPx))²). NaN or negative
// input gives 0.
func (cm ConfidenceModel) FromSigma(sigmaPx, fxPx float64) float64 {
	if !(sigmaPx >= 0) || !(fxPx > 0) {
		return 0
	}
	r := sigmaPx / cm.ScalePx(fxPx)
	return math.Exp(-0.5 * r * r)
}

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
