package predictor

import "math"

import "fmt"

// Homography is a 3x3 projective map of pixel coordinates, row-major:
// (u', v', w')ᵀ = H (u, v, 1)ᵀ and the image point is (u'/w', v'/w').
// It is a plain value; nothing allocates.
type Homography [3][3]float64

// IdentityHomography returns the identity map.
func IdentityHomography() Homography { return Homography{{1, 0, 0}, {0, 1, 0}, {0, 0, 1}} }

// Apply maps (u, v). ok is false if the point maps to infinity or behind the
// camera (w' <= 0): for the homographies of this package a non-positive w'
// means the ray points away from the scene it was built for.
func (h Homography) Apply(u, v float64) (x, y float64, ok bool) {
	w := h[2][0]*u + h[2][1]*v + h[2][2]
	if !(w > 0) {
		return 0, 0, false
	}
	return (h[0][0]*u + h[0][1]*v + h[0][2]) / w, (h[1][0]*u + h[1][1]*v + h[1][2]) / w, true
}

// Inverse returns H^-1 scaled so that its [2][2] entry is 1 when that entry
// is non-zero and positive (the usual normalisation), or ErrSingular.
func (h Homography) Inverse() (Homography, error) {
	r, ok := inv3(h)
	if !ok {
		return Homography{}, fmt.Errorf("inverting %v: %w", h, ErrSingular)
	}
	return Homography(r).normalised(), nil
}

// Mul returns h · g (apply g first, then h).
func (h Homography) Mul(g Homography) Homography { return Homography(mul33(h, g)) }

// IsFinite reports whether every entry is finite.
func (h Homography) IsFinite() bool {
	for i := range h {
		for j := range h[i] {
			if !finite(h[i][j]) {
				return false
			}
		}
	}
	return true
}

// normalised divides by h[2][2] if it is positive. A positive overall scale
// does not change the map nor the sign test in Apply.
func (h Homography) normalised() Homography {
	s := h[2][2]
	if !(s > 0) || !finite(s) {
		return h
	}
	for i := range h {
		for j := range h[i] {
			h[i][j] /= s
		}
	}
	return h
}

// RelativePose returns the motion of the camera between two frames, given
// the planar motion of the vehicle from T0 to T1 expressed in the vehicle
// frame at T0 (ISO 8855): translation (dxM, dyM) and yaw dyawRad (+ = left).
//
// A world point with vehicle coordinates P0 at T0 has vehicle coordinates
// P1 = Rz(ψ)ᵀ (P0 - D) at T1, D = (dx, dy, 0). With camera coordinates
// X = R_cv (P - C) in both frames this gives X1 = R X0 + t with
//
//	R = R_cv Rz(ψ)ᵀ R_cvᵀ
//	t = R_cv (Rz(ψ)ᵀ (C - D) - C)
//
// R rotates about the ground normal, so R n = n and n·t = 0: the camera keeps
// its height above the road.
func RelativePose(c Camera, dxM, dyM, dyawRad float64) (r [3][3]float64, t [3]float64) {
	rcv := c.RotationVehicleToCamera()
	rzT := transpose3(rotZ(dyawRad))
	r = mul33(mul33(rcv, rzT), transpose3(rcv))
	cv := c.CentreVehicle()
	q := mul3v(rzT, sub3(cv, vec3{dxM, dyM, 0}))
	t = mul3v(rcv, sub3(q, cv))
	return r, t
}

// GroundHomographyPlanar is GroundHomography for a planar motion given as
// numbers (see RelativePose for their meaning).
//
// Derivation: the road plane in the T0 camera frame is n·X + d = 0 with n the
// upward unit normal (Camera.GroundNormalCamera) and d = HeightM > 0. For X on
// it, -n·X/d = 1, so X1 = R X + t = (R - t nᵀ/d) X. Pixels are p = K X up to
// scale, hence p1 ~ K (R - t nᵀ/d) K^-1 p0. The result maps undistorted pixels
// of the T0 frame to undistorted pixels of the T1 frame, for road points only.
func GroundHomographyPlanar(c Camera, dxM, dyM, dyawRad float64) Homography {
	r, t := RelativePose(c, dxM, dyM, dyawRad)
	n := c.GroundNormalCamera()
	d := c.HeightM
	var a mat3
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			a[i][j] = r[i][j] - t[i]*n[j]/d
		}
	}
	return Homography(mul33(mul33(c.K(), a), c.KInv())).normalised()
}

// FarHomographyPlanar is the map for the far scene (above the horizon) when
// it is modelled as a plane facing the camera at T0, depthM metres ahead
// along the optical axis (n = (0, 0, 1), n·X = depthM in the T0 camera
// frame): K (R + t nᵀ/depthM) K^-1, with R, t from RelativePose (X1 = R X0 +
// t). An infinite or non-positive depthM gives the rotation-only map
// K R K^-1. Plane-induced homography: Hartley and Zisserman, "Multiple View
// Geometry", 2nd ed., result 13.1 (section number from memory).
func FarHomographyPlanar(c Camera, dxM, dyM, dyawRad, depthM float64) Homography {
	if !(depthM > 0) || math.IsInf(depthM, 1) {
		return RotationHomographyPlanar(c, dxM, dyM, dyawRad)
	}
	r, t := RelativePose(c, dxM, dyM, dyawRad)
	for i := 0; i < 3; i++ {
		r[i][2] += t[i] / depthM
	}
	return Homography(mul33(mul33(c.K(), r), c.KInv())).normalised()
}

// RotationHomographyPlanar is RotationHomography for a planar motion given as
// numbers: K R K^-1, the limit of the ground homography for a plane at
// infinity, used for far scenery above the horizon (translation is ignored).
func RotationHomographyPlanar(c Camera, dxM, dyM, dyawRad float64) Homography {
	r, _ := RelativePose(c, dxM, dyM, dyawRad)
	return Homography(mul33(mul33(c.K(), r), c.KInv())).normalised()
}

// shiftRows returns H composed with a row shift: the map takes ROI
// coordinates (u, v - row0) of the destination to the same source point as H
// does for (u, v). Used with inverse (destination -> source) maps.
func (h Homography) shiftRows(row0 int) Homography {
	// H · [[1 0 0] [0 1 row0] [0 0 1]]: third column gains row0 * second column.
	r := float64(row0)
	for i := 0; i < 3; i++ {
		h[i][2] += r * h[i][1]
	}
	return h
}

// shiftCols is shiftRows for columns: the map takes ROI coordinates
// (u - col0, v) to the same source point as H does for (u, v).
func (h Homography) shiftCols(col0 int) Homography {
	c := float64(col0)
	for i := 0; i < 3; i++ {
		h[i][2] += c * h[i][0]
	}
	return h
}
