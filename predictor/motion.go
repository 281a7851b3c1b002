package predictor

import (
	"fmt"
	"math"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// MotionSource gives the rigid motion of the vehicle between two vehicle
// clock times with its covariance. *filter.Filter implements it.
type MotionSource interface {
	Relative(t0Us, t1Us int64) (filter.Motion, error)
}

var _ MotionSource = (*filter.Filter)(nil)

// CheckMotion reports a motion with non-finite values, T1Us before T0Us, or
// a covariance with a non-finite entry or negative variance, wrapping
// ErrInvalidMotion.
func CheckMotion(m filter.Motion) error {
	if m.T1Us < m.T0Us {
		return fmt.Errorf("motion ends (%d us) before it starts (%d us): %w", m.T1Us, m.T0Us, ErrInvalidMotion)
	}
	for _, v := range []float64{m.DxM, m.DyM, m.DyawRad} {
		if !finite(v) {
			return fmt.Errorf("motion (%g m, %g m, %g rad) is not finite: %w", m.DxM, m.DyM, m.DyawRad, ErrInvalidMotion)
		}
	}
	_, err := checkCov(m.Cov)
	return err
}

// GroundHomography returns K (R - t nᵀ/d) K^-1, which maps undistorted
// pixels of the frame captured at m.T0Us to undistorted pixels of the frame
// at m.T1Us for points on the road plane. See GroundHomographyPlanar for the
// derivation and RelativePose for R and t.
func GroundHomography(cam Camera, m filter.Motion) (Homography, error) {
	if err := CheckMotion(m); err != nil {
		return Homography{}, err
	}
	return GroundHomographyPlanar(cam, m.DxM, m.DyM, m.DyawRad), nil
}

// RotationHomography returns K R K^-1, the map for far scenery (above the
// horizon), where the translation of the camera makes no visible parallax.
func RotationHomography(cam Camera, m filter.Motion) (Homography, error) {
	if err := CheckMotion(m); err != nil {
		return Homography{}, err
	}
	return RotationHomographyPlanar(cam, m.DxM, m.DyM, m.DyawRad), nil
}

// Confidence returns the confidence in [0, 1] of a prediction over motion m
// and the worst 1-sigma pixel error it is derived from (see ConfidenceModel).
// On error the confidence is 0.
func (cm ConfidenceModel) Confidence(cam Camera, m filter.Motion) (confidence, sigmaPx float64, err error) {
	if err := CheckMotion(m); err != nil {
		return 0, 0, err
	}
	s, err := cm.sigmaPlanar(cam, m.DxM, m.DyM, m.DyawRad, m.Cov)
	if err != nil {
		return 0, 0, err
	}
	return cm.FromSigma(s, cam.Fx), s, nil
}

// Synthesize predicts the frame at m.T1Us from src captured at m.T0Us: the
// ground homography below the horizon, the rotation homography above it,
// blended across the band. dst is owned by the caller (see Warp).
func (s *Synthesizer) Synthesize(src gocv.Mat, m filter.Motion, dst *gocv.Mat) (Synthesis, error) {
	return s.SynthesizeFar(src, m, math.Inf(1), dst)
}

// SynthesizeFar is Synthesize with the far scene modelled as a plane facing
// the camera farDepthM metres ahead (FarHomographyPlanar) instead of at
// infinity; +Inf gives Synthesize. See FarDepthEstimator for where a depth
// comes from.
func (s *Synthesizer) SynthesizeFar(src gocv.Mat, m filter.Motion, farDepthM float64, dst *gocv.Mat) (Synthesis, error) {
	g, err := GroundHomography(s.cam, m) // also validates m
	if err != nil {
		return Synthesis{}, err
	}
	f := FarHomographyPlanar(s.cam, m.DxM, m.DyM, m.DyawRad, farDepthM)
	if !f.IsFinite() {
		return Synthesis{}, fmt.Errorf("far-scene homography at depth %g m is not finite: %w", farDepthM, ErrSingular)
	}
	return s.Warp(src, g, f, dst)
}

// SynthesizeRotation is the rotation-only baseline: the whole frame warped
// with the rotation homography (translation ignored).
func (s *Synthesizer) SynthesizeRotation(src gocv.Mat, m filter.Motion, dst *gocv.Mat) (Synthesis, error) {
	f, err := RotationHomography(s.cam, m)
	if err != nil {
		return Synthesis{}, err
	}
	return s.Warp(src, f, f, dst)
}
