package predictor

import "math"

// Small fixed-size linear algebra on arrays. Values, not pointers: nothing
// here allocates.

type mat3 = [3][3]float64
type vec3 = [3]float64

func mul33(a, b mat3) mat3 {
	var c mat3
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			c[i][j] = a[i][0]*b[0][j] + a[i][1]*b[1][j] + a[i][2]*b[2][j]
		}
	}
	return c
}

func mul3v(a mat3, v vec3) vec3 {
	return vec3{
		a[0][0]*v[0] + a[0][1]*v[1] + a[0][2]*v[2],
		a[1][0]*v[0] + a[1][1]*v[1] + a[1][2]*v[2],
		a[2][0]*v[0] + a[2][1]*v[1] + a[2][2]*v[2],
	}
}

func transpose3(a mat3) mat3 {
	return mat3{{a[0][0], a[1][0], a[2][0]}, {a[0][1], a[1][1], a[2][1]}, {a[0][2], a[1][2], a[2][2]}}
}

func sub3(a, b vec3) vec3 { return vec3{a[0] - b[0], a[1] - b[1], a[2] - b[2]} }

func dot3(a, b vec3) float64 { return a[0]*b[0] + a[1]*b[1] + a[2]*b[2] }

func det3(a mat3) float64 {
	return a[0][0]*(a[1][1]*a[2][2]-a[1][2]*a[2][1]) -
		a[0][1]*(a[1][0]*a[2][2]-a[1][2]*a[2][0]) +
		a[0][2]*(a[1][0]*a[2][1]-a[1][1]*a[2][0])
}

// inv3 inverts a 3x3 matrix by the adjugate. ok is false when the matrix is
// singular relative to its scale or not finite.
func inv3(a mat3) (mat3, bool) {
	d := det3(a)
	scale := 0.0
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			if !finite(a[i][j]) {
				return mat3{}, false
			}
			scale = math.Max(scale, math.Abs(a[i][j]))
		}
	}
	if scale == 0 || !finite(d) || math.Abs(d) <= 1e-14*scale*scale*scale {
		return mat3{}, false
	}
	var r mat3
	r[0][0] = (a[1][1]*a[2][2] - a[1][2]*a[2][1]) / d
	r[0][1] = (a[0][2]*a[2][1] - a[0][1]*a[2][2]) / d
	r[0][2] = (a[0][1]*a[1][2] - a[0][2]*a[1][1]) / d
	r[1][0] = (a[1][2]*a[2][0] - a[1][0]*a[2][2]) / d
	r[1][1] = (a[0][0]*a[2][2] - a[0][2]*a[2][0]) / d
	r[1][2] = (a[0][2]*a[1][0] - a[0][0]*a[1][2]) / d
	r[2][0] = (a[1][0]*a[2][1] - a[1][1]*a[2][0]) / d
	r[2][1] = (a[0][1]*a[2][0] - a[0][0]*a[2][1]) / d
	r[2][2] = (a[0][0]*a[1][1] - a[0][1]*a[1][0]) / d
	return r, true
}

// rotZ returns the rotation by yaw about the vehicle z axis (up): it maps
// coordinates in a frame yawed by +yaw (left turn) to the original frame.
func rotZ(yaw float64) mat3 {
	s, c := math.Sincos(yaw)
	return mat3{{c, -s, 0}, {s, c, 0}, {0, 0, 1}}
}

func finite(x float64) bool { return !math.IsNaN(x) && !math.IsInf(x, 0) }
