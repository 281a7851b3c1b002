// Package camera is the one camera model of stopgap: the calibrated camera
// rigidly mounted on the vehicle, the geometry that depends on it alone
// (rotation, projection, horizon), its validation at two levels, and the one
// strict reader and writer of camera.json.
//
// The recording format (stopgap/stream/recording), the predictor, the relay,
// the calibration and ROS 2 converters and the simulators all use this type;
// predictor.Camera and recording.Camera are aliases of it. The package is
// pure Go with no dependency outside the standard library, so that the
// recording format stays free of cgo while the predictor (OpenCV) shares the
// type. The motion of the camera between two frames and the homographies it
// induces belong to the predictor.
//
// # Conventions
//
// Vehicle frame (ISO 8855): x forward, y left, z up, origin at the rotation
// centre on the ground. Camera frame (OpenCV): x right, y down, z forward
// along the optical axis. Pixels: OpenCV, (u, v) = (column, row), pixel
// centres at integer coordinates.
package camera

import (
	"fmt"
	"math"
)

// MaxImageSide is the largest Width or Height either validation level
// accepts, in pixels. It only guards against absurd allocations from a
// corrupt calibration or camera file.
const MaxImageSide = 16384

// Camera is a calibrated camera rigidly mounted on the vehicle, and the
// content of a camera.json file (the JSON keys are the field tags).
//
// Intrinsics follow OpenCV's pinhole model with the 5-coefficient
// Brown-Conrady distortion (k1, k2, p1, p2, k3), in pixels of a Width x Height
// image. Extrinsics (the mount): the camera centre is at (XOffsetM, YOffsetM,
// HeightM) in the vehicle frame. With PitchDeg = RollDeg = 0 the optical axis
// points along vehicle +x and image rows are parallel to the ground.
//
//   - PitchDeg > 0 tilts the optical axis down toward the road.
//   - RollDeg > 0 turns the camera about its optical axis by the right-hand
//     rule (the same sense as ISO 8855 roll about the forward axis): the
//     image's right side dips toward the ground, so in the image the scene
//     turns counter-clockwise and the horizon rises to the right.
//
// Yaw of the camera relative to the vehicle is not modelled (cameras face
// forward). The zero value is invalid: see [Camera.ValidateIntrinsics] for
// what a calibration carries and [Camera.Validate] for what prediction needs.
type Camera struct {
	Width  int     `json:"width"`  // image width, pixels
	Height int     `json:"height"` // image height, pixels
	Fx     float64 `json:"fx"`     // focal length along x, pixels
	Fy     float64 `json:"fy"`     // focal length along y, pixels
	Cx     float64 `json:"cx"`     // principal point x, pixels
	Cy     float64 `json:"cy"`     // principal point y, pixels

	K1 float64 `json:"k1"` // radial distortion, OpenCV convention; all five zero = pinhole
	K2 float64 `json:"k2"` // radial distortion
	P1 float64 `json:"p1"` // tangential distortion
	P2 float64 `json:"p2"` // tangential distortion
	K3 float64 `json:"k3"` // radial distortion

	HeightM  float64 `json:"height_m"`   // camera centre height above the road, metres
	PitchDeg float64 `json:"pitch_deg"`  // downward tilt of the optical axis, degrees
	RollDeg  float64 `json:"roll_deg"`   // roll about the optical axis, degrees (see type doc)
	XOffsetM float64 `json:"x_offset_m"` // camera centre ahead of the vehicle origin, metres
	YOffsetM float64 `json:"y_offset_m"` // camera centre left of the vehicle origin, metres
}

// HasDistortion reports whether any distortion coefficient is non-zero.
func (c Camera) HasDistortion() bool {
	return c.K1 != 0 || c.K2 != 0 || c.P1 != 0 || c.P2 != 0 || c.K3 != 0
}

// K returns the camera matrix [[Fx 0 Cx] [0 Fy Cy] [0 0 1]].
func (c Camera) K() [3][3]float64 {
	return [3][3]float64{{c.Fx, 0, c.Cx}, {0, c.Fy, c.Cy}, {0, 0, 1}}
}

// KInv returns K⁻¹ in closed form: [[1/Fx 0 -Cx/Fx] [0 1/Fy -Cy/Fy] [0 0 1]].
func (c Camera) KInv() [3][3]float64 {
	return [3][3]float64{{1 / c.Fx, 0, -c.Cx / c.Fx}, {0, 1 / c.Fy, -c.Cy / c.Fy}, {0, 0, 1}}
}

// Distortion returns (K1, K2, P1, P2, K3) in OpenCV order.
func (c Camera) Distortion() [5]float64 { return [5]float64{c.K1, c.K2, c.P1, c.P2, c.K3} }

// RotationVehicleToCamera returns R_cv, the rotation that maps a vector in
// vehicle coordinates to camera coordinates (OpenCV axes: x right, y down,
// z forward). Its rows are the camera axes written in vehicle coordinates:
//
//	pitch θ only: x_p = (0, -1, 0), y_p = (-sin θ, 0, -cos θ), z_p = (cos θ, 0, -sin θ)
//	then roll φ about z_p: x_c = cos φ x_p + sin φ y_p, y_c = cos φ y_p - sin φ x_p, z_c = z_p
func (c Camera) RotationVehicleToCamera() [3][3]float64 {
	st, ct := math.Sincos(c.PitchDeg * math.Pi / 180)
	sf, cf := math.Sincos(c.RollDeg * math.Pi / 180)
	xp := [3]float64{0, -1, 0}
	yp := [3]float64{-st, 0, -ct}
	zp := [3]float64{ct, 0, -st}
	var r [3][3]float64
	for k := 0; k < 3; k++ {
		r[0][k] = cf*xp[k] + sf*yp[k]
		r[1][k] = cf*yp[k] - sf*xp[k]
		r[2][k] = zp[k]
	}
	return r
}

// CentreVehicle returns the camera centre in the vehicle frame, metres.
func (c Camera) CentreVehicle() [3]float64 { return [3]float64{c.XOffsetM, c.YOffsetM, c.HeightM} }

// Extrinsics returns R and t such that a point P in the vehicle frame has
// camera coordinates R P + t (t = -R C with C the camera centre). These are
// the rotation and translation that cv::projectPoints expects when the world
// frame is the vehicle frame.
func (c Camera) Extrinsics() (r [3][3]float64, t [3]float64) {
	r = c.RotationVehicleToCamera()
	ct := mulMatVec(r, c.CentreVehicle())
	return r, [3]float64{-ct[0], -ct[1], -ct[2]}
}

// GroundNormalCamera returns the unit normal n of the road plane pointing up,
// in camera coordinates. The road plane is {X : n·X + HeightM = 0}.
func (c Camera) GroundNormalCamera() [3]float64 {
	r := c.RotationVehicleToCamera()
	return [3]float64{r[0][2], r[1][2], r[2][2]}
}

// ProjectVehiclePoint returns the pixel (u, v) of a point given in the
// vehicle frame, with the full OpenCV model including distortion:
//
//	(X, Y, Z) = R_cv (P - C);  x = X/Z, y = Y/Z;  r² = x² + y²
//	x' = x(1 + k1 r² + k2 r⁴ + k3 r⁶) + 2 p1 x y + p2 (r² + 2x²)
//	y' = y(1 + k1 r² + k2 r⁴ + k3 r⁶) + p1 (r² + 2y²) + 2 p2 x y
//	u = Fx x' + Cx;  v = Fy y' + Cy
//
// It returns an error wrapping ErrBehindCamera if Z <= 0. The pixel may lie
// outside the image.
func (c Camera) ProjectVehiclePoint(p [3]float64) (u, v float64, err error) {
	x, y, err := c.normalised(p)
	if err != nil {
		return 0, 0, err
	}
	r2 := x*x + y*y
	radial := 1 + r2*(c.K1+r2*(c.K2+r2*c.K3))
	xd := x*radial + 2*c.P1*x*y + c.P2*(r2+2*x*x)
	yd := y*radial + c.P1*(r2+2*y*y) + 2*c.P2*x*y
	return c.Fx*xd + c.Cx, c.Fy*yd + c.Cy, nil
}

// ProjectVehiclePointPinhole is ProjectVehiclePoint without distortion: the
// geometry of undistorted images, which is the geometry of predicted frames.
func (c Camera) ProjectVehiclePointPinhole(p [3]float64) (u, v float64, err error) {
	x, y, err := c.normalised(p)
	if err != nil {
		return 0, 0, err
	}
	return c.Fx*x + c.Cx, c.Fy*y + c.Cy, nil
}

// normalised returns the normalised image coordinates (X/Z, Y/Z) of a
// vehicle point.
func (c Camera) normalised(p [3]float64) (x, y float64, err error) {
	r, t := c.Extrinsics()
	q := mulMatVec(r, p)
	q = [3]float64{q[0] + t[0], q[1] + t[1], q[2] + t[2]}
	if !(q[2] > 0) {
		return 0, 0, fmt.Errorf("camera z = %g m for vehicle point %v: %w", q[2], p, ErrBehindCamera)
	}
	return q[0] / q[2], q[1] / q[2], nil
}

// Line is the image line A u + B v + C = 0, normalised so that A² + B² = 1.
// For the horizon, A u + B v + C is the signed distance in pixels from the
// line and is positive below it (on the road side).
type Line struct {
	A, B, C float64
}

// SignedDistance returns A u + B v + C.
func (l Line) SignedDistance(u, v float64) float64 { return l.A*u + l.B*v + l.C }

// RowAt returns the v coordinate of the line at column u. ok is false if the
// line is vertical (B = 0).
func (l Line) RowAt(u float64) (v float64, ok bool) {
	if l.B == 0 {
		return 0, false
	}
	return -(l.A*u + l.C) / l.B, true
}

// Horizon returns the horizon in undistorted pixel coordinates: the vanishing
// line of the road plane, i.e. the image of all directions parallel to the
// ground. A pixel p (homogeneous) sees a ray K⁻¹ p whose vertical component
// n·K⁻¹ p is zero on the horizon, so the line is l ∝ -K⁻ᵀ n with n the
// ground normal (up) in camera coordinates; the sign makes the road side
// positive. Because the camera is rigid on the vehicle and the vehicle moves
// on the plane, the horizon is the same in every frame.
func (c Camera) Horizon() Line {
	n := c.GroundNormalCamera()
	ki := c.KInv()
	// K⁻ᵀ n: column j of K⁻¹ dotted with n.
	var l [3]float64
	for j := 0; j < 3; j++ {
		l[j] = ki[0][j]*n[0] + ki[1][j]*n[1] + ki[2][j]*n[2]
	}
	a, b, cc := -l[0], -l[1], -l[2]
	s := math.Hypot(a, b)
	return Line{a / s, b / s, cc / s}
}

// mulMatVec returns a v.
func mulMatVec(a [3][3]float64, v [3]float64) [3]float64 {
	return [3]float64{
		a[0][0]*v[0] + a[0][1]*v[1] + a[0][2]*v[2],
		a[1][0]*v[0] + a[1][1]*v[1] + a[1][2]*v[2],
		a[2][0]*v[0] + a[2][1]*v[1] + a[2][2]*v[2],
	}
}
