package camera

import (
	"fmt"
	"math"
)

// The two validation levels. A calibration file or a ROS camera_info
// message carries the intrinsics but not the mount; a camera that predicted
// frames are computed with needs both.
//
// ValidateIntrinsics is called by the paths that carry intrinsics only:
// stream/calib (calib.FromKD, behind the OpenCV FileStorage and ROS
// camera_info readers) and stream/ros2 (the importer's camera from a
// CameraInfo message or a calibration file, before the mount is added).
//
// Validate is called by everything that predicts or stores a camera for
// prediction: the camera.json reader and writer ([Decode], [ReadFile],
// [Marshal]), hence the recording format's Open and Create and the relay's
// --camera file; the ROS 2 importer once the mount is set; and the
// predictor's constructors (Synthesizer, Filler, EgoMotion) and the relay's
// configuration.

// ValidateIntrinsics checks what a calibration carries: the image size
// (1..MaxImageSide pixels), positive focal lengths, a principal point inside
// the image and finite distortion coefficients. The mount is not looked at.
// It returns the first problem as an [*Error] wrapping [ErrInvalid], or nil.
func (c Camera) ValidateIntrinsics() error {
	if c.Width <= 0 || c.Width > MaxImageSide {
		return &Error{"width", float64(c.Width), fmt.Sprintf("the image width must be 1..%d pixels; check the calibration's image size", MaxImageSide)}
	}
	if c.Height <= 0 || c.Height > MaxImageSide {
		return &Error{"height", float64(c.Height), fmt.Sprintf("the image height must be 1..%d pixels; check the calibration's image size", MaxImageSide)}
	}
	for _, f := range []struct {
		key string
		v   float64
	}{{"fx", c.Fx}, {"fy", c.Fy}, {"cx", c.Cx}, {"cy", c.Cy},
		{"k1", c.K1}, {"k2", c.K2}, {"p1", c.P1}, {"p2", c.P2}, {"k3", c.K3}} {
		if !finite(f.v) {
			return &Error{f.key, f.v, "must be a finite number; check the calibration"}
		}
	}
	if c.Fx <= 0 {
		return &Error{"fx", c.Fx, "the focal length must be > 0 pixels; copy it from the calibration's camera matrix"}
	}
	if c.Fy <= 0 {
		return &Error{"fy", c.Fy, "the focal length must be > 0 pixels; copy it from the calibration's camera matrix"}
	}
	if c.Cx < 0 || c.Cx > float64(c.Width) {
		return &Error{"cx", c.Cx, fmt.Sprintf("the principal point must lie inside the image, 0..%d pixels; is the calibration for this image size?", c.Width)}
	}
	if c.Cy < 0 || c.Cy > float64(c.Height) {
		return &Error{"cy", c.Cy, fmt.Sprintf("the principal point must lie inside the image, 0..%d pixels; is the calibration for this image size?", c.Height)}
	}
	return nil
}

// MaxPitchDeg and MaxRollDeg bound |pitch_deg| and |roll_deg| (exclusive)
// at the complete level: a camera looking nearly straight up or down sees no
// horizon, and the ground and far-scene split assumes a roughly level image.
const (
	MaxPitchDeg = 89
	MaxRollDeg  = 45
)

// Validate checks everything prediction needs: [Camera.ValidateIntrinsics],
// then the mount: finite offsets, height_m > 0 (the ground homography
// divides by it), |pitch_deg| < MaxPitchDeg and |roll_deg| < MaxRollDeg.
// It returns the first problem as an [*Error] wrapping [ErrInvalid], or nil.
func (c Camera) Validate() error {
	if err := c.ValidateIntrinsics(); err != nil {
		return err
	}
	for _, f := range []struct {
		key string
		v   float64
	}{{"height_m", c.HeightM}, {"pitch_deg", c.PitchDeg}, {"roll_deg", c.RollDeg},
		{"x_offset_m", c.XOffsetM}, {"y_offset_m", c.YOffsetM}} {
		if !finite(f.v) {
			return &Error{f.key, f.v, "must be a finite number; measure the mount"}
		}
	}
	if c.HeightM <= 0 {
		return &Error{"height_m", c.HeightM, "the camera must be above the road (> 0 m); measure the lens centre's height above the ground"}
	}
	if math.Abs(c.PitchDeg) >= MaxPitchDeg {
		return &Error{"pitch_deg", c.PitchDeg, fmt.Sprintf("must be within (-%d, %d) degrees, positive tilting down; a camera looking straight up or down sees no horizon", MaxPitchDeg, MaxPitchDeg)}
	}
	if math.Abs(c.RollDeg) >= MaxRollDeg {
		return &Error{"roll_deg", c.RollDeg, fmt.Sprintf("must be within (-%d, %d) degrees; mount the camera roughly level", MaxRollDeg, MaxRollDeg)}
	}
	return nil
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
