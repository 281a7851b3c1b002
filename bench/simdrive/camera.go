package simdrive

import (
	"math"

	"stopgap/stream/recording"
)

// vec3 is a 3-vector; mat3 a row-major 3x3 matrix.
type (
	vec3 [3]float64
	mat3 [3][3]float64
)

func (m mat3) mulVec(v vec3) vec3 {
	return vec3{
		m[0][0]*v[0] + m[0][1]*v[1] + m[0][2]*v[2],
		m[1][0]*v[0] + m[1][1]*v[1] + m[1][2]*v[2],
		m[2][0]*v[0] + m[2][1]*v[1] + m[2][2]*v[2],
	}
}

func (m mat3) mul(n mat3) mat3 {
	var r mat3
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			r[i][j] = m[i][0]*n[0][j] + m[i][1]*n[1][j] + m[i][2]*n[2][j]
		}
	}
	return r
}

func (m mat3) transpose() mat3 {
	return mat3{{m[0][0], m[1][0], m[2][0]}, {m[0][1], m[1][1], m[2][1]}, {m[0][2], m[1][2], m[2][2]}}
}

func (a vec3) add(b vec3) vec3      { return vec3{a[0] + b[0], a[1] + b[1], a[2] + b[2]} }
func (a vec3) sub(b vec3) vec3      { return vec3{a[0] - b[0], a[1] - b[1], a[2] - b[2]} }
func (a vec3) scale(s float64) vec3 { return vec3{a[0] * s, a[1] * s, a[2] * s} }
func (a vec3) dot(b vec3) float64   { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }
func rotZ(yaw float64) mat3 {
	c, s := math.Cos(yaw), math.Sin(yaw)
	return mat3{{c, -s, 0}, {s, c, 0}, {0, 0, 1}}
}

// pinhole is our own camera model: intrinsics, OpenCV distortion
// coefficients, and the fixed vehicle-to-camera transform.
type pinhole struct {
	fx, fy, cx, cy     float64
	k1, k2, p1, p2, k3 float64
	rVC                mat3 // rotation vehicle axes -> camera axes
	centreV            vec3 // camera centre in the vehicle frame, metres
}

// newPinhole builds the model from camera.json parameters.
//
// Vehicle (x fwd, y left, z up) to unrotated camera (x right, y down,
// z fwd): xc = -yv, yc = -zv, zc = xv. Pitch θ (down positive) then rotates
// about camera x so that the optical axis gains a downward (+y) component:
// a forward horizontal direction (0,0,1) becomes (0, -sin θ, cos θ), above
// the image centre, as expected when looking down. Roll φ rotates about the
// pitched optical axis, +φ turning the camera's right side down.
func newPinhole(c recording.Camera) pinhole {
	axes := mat3{{0, -1, 0}, {0, 0, -1}, {1, 0, 0}}
	th := c.PitchDeg * math.Pi / 180
	ph := c.RollDeg * math.Pi / 180
	pitch := mat3{{1, 0, 0}, {0, math.Cos(th), -math.Sin(th)}, {0, math.Sin(th), math.Cos(th)}}
	roll := mat3{{math.Cos(ph), math.Sin(ph), 0}, {-math.Sin(ph), math.Cos(ph), 0}, {0, 0, 1}}
	return pinhole{
		fx: c.Fx, fy: c.Fy, cx: c.Cx, cy: c.Cy,
		k1: c.K1, k2: c.K2, p1: c.P1, p2: c.P2, k3: c.K3,
		rVC:     roll.mul(pitch).mul(axes),
		centreV: vec3{c.XOffsetM, c.YOffsetM, c.HeightM},
	}
}

// extrinsics returns R, t with camera = R*world + t for the vehicle at p.
func (cam pinhole) extrinsics(p pose) (mat3, vec3) {
	rWV := rotZ(p.YawRad) // vehicle -> world
	r := cam.rVC.mul(rWV.transpose())
	centreW := vec3{p.XM, p.YM, 0}.add(rWV.mulVec(cam.centreV))
	t := r.mulVec(centreW).scale(-1)
	return r, t
}

// toCamera maps a world point into camera coordinates given extrinsics.
func toCamera(r mat3, t vec3, w vec3) vec3 { return r.mulVec(w).add(t) }

// projectCam maps a camera-frame point (z > 0) to pixel coordinates with
// the OpenCV pinhole and Brown-Conrady distortion model:
//
//	x' = X/Z, y' = Y/Z, r² = x'² + y'²
//	x'' = x'(1 + k1 r² + k2 r⁴ + k3 r⁶) + 2 p1 x'y' + p2 (r² + 2x'²)
//	y'' = y'(1 + k1 r² + k2 r⁴ + k3 r⁶) + p1 (r² + 2y'²) + 2 p2 x'y'
//	u = fx x'' + cx, v = fy y'' + cy
//
// (model as documented for cv::projectPoints; checked against it in tests).
func (cam pinhole) projectCam(pc vec3) (u, v float64) {
	x, y := pc[0]/pc[2], pc[1]/pc[2]
	r2 := x*x + y*y
	radial := 1 + r2*(cam.k1+r2*(cam.k2+r2*cam.k3))
	xd := x*radial + 2*cam.p1*x*y + cam.p2*(r2+2*x*x)
	yd := y*radial + cam.p1*(r2+2*y*y) + 2*cam.p2*x*y
	return cam.fx*xd + cam.cx, cam.fy*yd + cam.cy
}

// project maps a world point seen from vehicle pose p to pixels; ok is
// false if the point is not in front of the camera.
func (cam pinhole) project(p pose, w vec3) (u, v float64, ok bool) {
	r, t := cam.extrinsics(p)
	pc := toCamera(r, t, w)
	if pc[2] <= 1e-9 {
		return 0, 0, false
	}
	u, v = cam.projectCam(pc)
	return u, v, true
}

// kMat returns the intrinsic matrix (no distortion).
func (cam pinhole) kMat() mat3 {
	return mat3{{cam.fx, 0, cam.cx}, {0, cam.fy, cam.cy}, {0, 0, 1}}
}

// horizonY returns the image row of the horizon (the vanishing line of the
// ground plane) at column u, for an undistorted camera: the row where the
// viewing ray is parallel to the ground. It solves d_v·z = 0 with
// d_v = R_VCᵀ K⁻¹ (u, y, 1). ok is false if the horizon is (nearly) vertical.
func (cam pinhole) horizonY(u float64) (y float64, ok bool) {
	// z-row of R_VCᵀ is the z-column of R_VC.
	zr := vec3{cam.rVC[0][2], cam.rVC[1][2], cam.rVC[2][2]}
	// d_c = ((u-cx)/fx, (y-cy)/fy, 1); zr·d_c = 0 -> solve for y.
	a := zr[1] / cam.fy
	if math.Abs(a) < 1e-12 {
		return 0, false
	}
	y = cam.cy - (zr[0]*(u-cam.cx)/cam.fx+zr[2])/a
	return y, true
}
