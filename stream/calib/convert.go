package calib

import (
	"fmt"
	"math"

	"stopgap/internal/camera"
)

// FromKD converts an image size, a row-major 3x3 camera matrix k and a
// distortion model with its coefficients d into a camera with a zero mount
// (set the mount fields before use). model is ROS's name: "plumb_bob"
// (OpenCV's k1 k2 p1 p2 k3; fewer coefficients mean the rest are zero),
// "rational_polynomial" (8 coefficients; k4 k5 k6 must be zero), or any
// name, "" included, when every coefficient is zero. It fails with
// [ErrValue] for skew, a bad last row, a distortion our camera model does
// not have (e.g. "equidistant", the fisheye model), or a camera that does
// not pass Camera.ValidateIntrinsics (the mount is not checked: a
// calibration has none); the error names the entry.
func FromKD(width, height int, k [9]float64, model string, d []float64) (camera.Camera, string, error) {
	for i, v := range k {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return camera.Camera{}, "camera_matrix", fmt.Errorf("%w: element %d is %v", ErrValue, i, v)
		}
	}
	if k[1] != 0 || k[3] != 0 || k[6] != 0 || k[7] != 0 || k[8] != 1 {
		return camera.Camera{}, "camera_matrix", fmt.Errorf("%w: %v is not [fx 0 cx; 0 fy cy; 0 0 1]: skew or a last row other than 0 0 1 is not supported", ErrValue, k)
	}
	cam := camera.Camera{Width: width, Height: height, Fx: k[0], Fy: k[4], Cx: k[2], Cy: k[5]}
	dist, err := brownConrady(model, d)
	if err != nil {
		return camera.Camera{}, "distortion_coefficients", err
	}
	cam.K1, cam.K2, cam.P1, cam.P2, cam.K3 = dist[0], dist[1], dist[2], dist[3], dist[4]
	if err := cam.ValidateIntrinsics(); err != nil {
		return camera.Camera{}, "camera_matrix", fmt.Errorf("%w: %w", ErrValue, err)
	}
	return cam, "", nil
}

// brownConrady returns k1 k2 p1 p2 k3 for a distortion model and its
// coefficients (see FromKD).
func brownConrady(model string, d []float64) ([5]float64, error) {
	var out [5]float64
	for i, v := range d {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return out, fmt.Errorf("%w: distortion coefficient %d is %v", ErrValue, i, v)
		}
	}
	zero := func(v []float64) bool {
		for _, x := range v {
			if x != 0 {
				return false
			}
		}
		return true
	}
	switch {
	case zero(d):
		return out, nil
	case model == "plumb_bob" && len(d) <= 5:
		copy(out[:], d)
		return out, nil
	case (model == "rational_polynomial" || model == "plumb_bob") && zero(d[min(5, len(d)):]):
		copy(out[:], d)
		return out, nil
	case model == "plumb_bob" || model == "rational_polynomial":
		return out, fmt.Errorf("%w: %d coefficients with non-zero k4 and beyond: only k1 k2 p1 p2 k3 exist in our camera model; recalibrate without the rational model", ErrValue, len(d))
	default:
		return out, fmt.Errorf("%w: distortion model %q is not supported; want plumb_bob (k1 k2 p1 p2 k3) or none", ErrValue, model)
	}
}
