// Package cvref exposes the few OpenCV calib3d functions that gocv v0.31.0
// does not wrap (cv::projectPoints, cv::Rodrigues), so that simdrive's own
// projection can be checked against OpenCV as the reference implementation.
// It is for tests; nothing in the renderer depends on it.
package cvref

/*
#cgo !windows pkg-config: opencv4
#cgo CXXFLAGS: --std=c++11
#include "cvref.h"
*/
import "C"

import (
	"errors"
	"unsafe"
)

// ProjectPoints projects world points with cv::projectPoints, given the
// world-to-camera rotation R (row-major 3x3, converted to a rotation vector
// by cv::Rodrigues), translation t, intrinsics and distortion coefficients
// (k1, k2, p1, p2, k3). It returns pixel coordinates.
func ProjectPoints(pts [][3]float64, r [3][3]float64, t [3]float64, fx, fy, cx, cy float64, dist [5]float64) ([][2]float64, error) {
	if len(pts) == 0 {
		return nil, errors.New("cvref: no points")
	}
	in := make([]C.double, 0, 3*len(pts))
	for _, p := range pts {
		in = append(in, C.double(p[0]), C.double(p[1]), C.double(p[2]))
	}
	var rr [9]C.double
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			rr[3*i+j] = C.double(r[i][j])
		}
	}
	tt := [3]C.double{C.double(t[0]), C.double(t[1]), C.double(t[2])}
	k := [4]C.double{C.double(fx), C.double(fy), C.double(cx), C.double(cy)}
	d := [5]C.double{C.double(dist[0]), C.double(dist[1]), C.double(dist[2]), C.double(dist[3]), C.double(dist[4])}
	out := make([]C.double, 2*len(pts))
	if rc := C.cvref_project_points((*C.double)(unsafe.Pointer(&in[0])), C.int(len(pts)), &rr[0], &tt[0], &k[0], &d[0], (*C.double)(unsafe.Pointer(&out[0]))); rc != 0 {
		return nil, errors.New("cvref: cv::projectPoints failed")
	}
	res := make([][2]float64, len(pts))
	for i := range res {
		res[i] = [2]float64{float64(out[2*i]), float64(out[2*i+1])}
	}
	return res, nil
}
