package ros2

import (
	"fmt"
	"math"
)

// VehicleFromROS converts a vector in a REP 103 body frame (x forward,
// y left, z up) to the ISO 8855 vehicle frame stopgap uses (x forward,
// y left, z up). The two conventions agree, so this is the identity; it
// exists so the conversion is written down, and tested, in one place.
func VehicleFromROS(v Vector3) (xFwd, yLeft, zUp float64) { return v.X, v.Y, v.Z }

// mat3 is a row-major 3x3 matrix.
type mat3 [3][3]float64

func (a mat3) mul(b mat3) mat3 {
	var c mat3
	for i := range 3 {
		for j := range 3 {
			for k := range 3 {
				c[i][j] += a[i][k] * b[k][j]
			}
		}
	}
	return c
}

func (a mat3) transpose() mat3 {
	var t mat3
	for i := range 3 {
		for j := range 3 {
			t[i][j] = a[j][i]
		}
	}
	return t
}

func (a mat3) mulVec(v Vector3) Vector3 {
	return Vector3{
		a[0][0]*v.X + a[0][1]*v.Y + a[0][2]*v.Z,
		a[1][0]*v.X + a[1][1]*v.Y + a[1][2]*v.Z,
		a[2][0]*v.X + a[2][1]*v.Y + a[2][2]*v.Z,
	}
}

// vehicleToOptical maps vehicle axes (x forward, y left, z up) to the axes
// of an unrotated optical frame (x right, y down, z forward): xc = -yv,
// yc = -zv, zc = xv. The same matrix as the predictor's camera model.
var vehicleToOptical = mat3{{0, -1, 0}, {0, 0, -1}, {1, 0, 0}}

// mountRotation returns R_vc, the rotation from vehicle to camera (optical)
// axes for our mount angles: roll(φ)·pitch(θ)·vehicleToOptical, where
// pitch rotates about the camera x axis so that θ > 0 tilts the optical axis
// down, and roll turns the camera's right side down for φ > 0 (the
// convention of package stopgap/internal/camera's Camera).
func mountRotation(pitchDeg, rollDeg float64) mat3 {
	st, ct := math.Sincos(pitchDeg * math.Pi / 180)
	sf, cf := math.Sincos(rollDeg * math.Pi / 180)
	pitch := mat3{{1, 0, 0}, {0, ct, -st}, {0, st, ct}}
	roll := mat3{{cf, sf, 0}, {-sf, cf, 0}, {0, 0, 1}}
	return roll.mul(pitch).mul(vehicleToOptical)
}

// Mount is where a camera sits on the vehicle, in the terms of camera.json:
// the optical centre at (XOffsetM, YOffsetM, HeightM) in the ISO 8855
// vehicle frame, tilted down by PitchDeg and rolled by RollDeg.
type Mount struct {
	XOffsetM, YOffsetM, HeightM float64
	PitchDeg, RollDeg           float64
}

// TransformFromMount returns the transform from the vehicle (base) frame to
// the camera's optical frame, as a tf TransformStamped carries it: the
// optical frame's origin in base coordinates and the rotation taking
// optical coordinates to base coordinates (R_bo = R_vc^T).
func TransformFromMount(m Mount) (Vector3, Quaternion) {
	return Vector3{m.XOffsetM, m.YOffsetM, m.HeightM}, quatFromMat(mountRotation(m.PitchDeg, m.RollDeg).transpose())
}

// maxMountResidual is the largest element-wise difference accepted between
// a transform's rotation and the best pitch-and-roll rotation: about 0.006
// degrees. More means the camera is yawed on the vehicle, which our camera
// model cannot express.
const maxMountResidual = 1e-4

// MountFromTransform is the inverse of [TransformFromMount]: it derives the
// mount from the translation t and rotation q of the camera's optical frame
// in the base frame. It fails with [ErrMount] if q is not a unit quaternion
// (to 1e-6) or the rotation has a yaw (or an order of angles) that pitch and
// roll cannot express.
//
// With M = R_vc·vehicleToOptical^T = roll(φ)·pitch(θ):
// M[2][1] = sin θ, M[2][2] = cos θ, M[0][0] = cos φ, M[1][0] = -sin φ.
func MountFromTransform(t Vector3, q Quaternion) (Mount, error) {
	n := math.Sqrt(q.X*q.X + q.Y*q.Y + q.Z*q.Z + q.W*q.W)
	if math.IsNaN(n) || math.Abs(n-1) > 1e-6 {
		return Mount{}, fmt.Errorf("%w: rotation quaternion has norm %v, want 1", ErrMount, n)
	}
	for _, v := range []float64{t.X, t.Y, t.Z} {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return Mount{}, fmt.Errorf("%w: translation %v is not finite", ErrMount, t)
		}
	}
	rvc := matFromQuat(q).transpose()
	m := rvc.mul(vehicleToOptical.transpose())
	pitch := math.Atan2(m[2][1], m[2][2]) * 180 / math.Pi
	roll := math.Atan2(-m[1][0], m[0][0]) * 180 / math.Pi
	back := mountRotation(pitch, roll)
	worst := 0.0
	for i := range 3 {
		for j := range 3 {
			worst = math.Max(worst, math.Abs(back[i][j]-rvc[i][j]))
		}
	}
	if worst > maxMountResidual {
		axis := rvc.transpose().mulVec(Vector3{0, 0, 1}) // optical axis in base
		yaw := math.Atan2(axis.Y, axis.X) * 180 / math.Pi
		return Mount{}, fmt.Errorf("%w: the camera's rotation is not a pitch and a roll about a forward-looking axis (its optical axis points %.2f degrees to the left of the vehicle's x axis); our camera model needs a forward-looking camera: check the frames or give the mount with flags", ErrMount, yaw)
	}
	return Mount{XOffsetM: quantize(t.X), YOffsetM: quantize(t.Y), HeightM: quantize(t.Z), PitchDeg: quantize(pitch), RollDeg: quantize(roll)}, nil
}

// quantize rounds v to 1e-9 (nanometres, nanodegrees) and turns -0 into 0.
// Converting angles to a quaternion and back, and chaining transforms,
// leaves rounding noise of about 1e-15 (5 degrees comes back as
// 4.999999999999999); quantizing removes it, so that a mount written to
// MCAP comes back exactly as camera.json had it and a re-imported drive
// replays to the same figures. No camera is mounted to a nanodegree.
func quantize(v float64) float64 {
	return math.Round(v*1e9)/1e9 + 0
}

// matFromQuat returns the rotation matrix of the unit quaternion q
// (Hamilton convention, as ROS uses).
func matFromQuat(q Quaternion) mat3 {
	x, y, z, w := q.X, q.Y, q.Z, q.W
	return mat3{
		{1 - 2*(y*y+z*z), 2 * (x*y - z*w), 2 * (x*z + y*w)},
		{2 * (x*y + z*w), 1 - 2*(x*x+z*z), 2 * (y*z - x*w)},
		{2 * (x*z - y*w), 2 * (y*z + x*w), 1 - 2*(x*x+y*y)},
	}
}

// quatFromMat returns the unit quaternion of rotation matrix r, with w >= 0
// (Shepperd's method: the largest of the four diagonal combinations is
// taken for the square root, for accuracy).
func quatFromMat(r mat3) Quaternion {
	tr := r[0][0] + r[1][1] + r[2][2]
	var q Quaternion
	switch {
	case tr > 0:
		s := math.Sqrt(tr+1) * 2
		q = Quaternion{W: s / 4, X: (r[2][1] - r[1][2]) / s, Y: (r[0][2] - r[2][0]) / s, Z: (r[1][0] - r[0][1]) / s}
	case r[0][0] > r[1][1] && r[0][0] > r[2][2]:
		s := math.Sqrt(1+r[0][0]-r[1][1]-r[2][2]) * 2
		q = Quaternion{W: (r[2][1] - r[1][2]) / s, X: s / 4, Y: (r[0][1] + r[1][0]) / s, Z: (r[0][2] + r[2][0]) / s}
	case r[1][1] > r[2][2]:
		s := math.Sqrt(1+r[1][1]-r[0][0]-r[2][2]) * 2
		q = Quaternion{W: (r[0][2] - r[2][0]) / s, X: (r[0][1] + r[1][0]) / s, Y: s / 4, Z: (r[1][2] + r[2][1]) / s}
	default:
		s := math.Sqrt(1+r[2][2]-r[0][0]-r[1][1]) * 2
		q = Quaternion{W: (r[1][0] - r[0][1]) / s, X: (r[0][2] + r[2][0]) / s, Y: (r[1][2] + r[2][1]) / s, Z: s / 4}
	}
	if q.W < 0 {
		q = Quaternion{-q.X, -q.Y, -q.Z, -q.W}
	}
	return q
}

// composeTransforms returns the transform a∘b: for b the pose of frame C in
// frame B and a the pose of B in A, the pose of C in A.
func composeTransforms(ta Vector3, qa Quaternion, tb Vector3, qb Quaternion) (Vector3, Quaternion) {
	ra := matFromQuat(qa)
	p := ra.mulVec(tb)
	return Vector3{ta.X + p.X, ta.Y + p.Y, ta.Z + p.Z}, quatMul(qa, qb)
}

// quatMul is the Hamilton product a·b.
func quatMul(a, b Quaternion) Quaternion {
	return Quaternion{
		W: a.W*b.W - a.X*b.X - a.Y*b.Y - a.Z*b.Z,
		X: a.W*b.X + a.X*b.W + a.Y*b.Z - a.Z*b.Y,
		Y: a.W*b.Y - a.X*b.Z + a.Y*b.W + a.Z*b.X,
		Z: a.W*b.Z + a.X*b.Y - a.Y*b.X + a.Z*b.W,
	}
}
