// Package cvref gives our tests and benchmarks a few OpenCV 4.6 calls that
// gocv v0.31.0 does not wrap: cv::projectPoints and cv::Rodrigues (used by the
// tests of predictor and simdrive as the reference for our camera geometry) and cv::setNumThreads /
// cv::getNumThreads (used by benchmarks to pin OpenCV to one thread).
//
// It links the same system OpenCV as gocv (pkg-config opencv4), so the thread
// setting applies to gocv's calls too. Inputs and outputs are plain Go arrays;
// no gocv.Mat crosses this boundary.
package cvref

/*
#cgo pkg-config: opencv4
#cgo CXXFLAGS: --std=c++11
#include <stdlib.h>
#include "cvref.h"
*/
import "C"

import (
	"errors"
	"unsafe"
)

// ErrOpenCV reports that OpenCV threw an exception inside a wrapped call.
var ErrOpenCV = errors.New("cvref: OpenCV raised an exception")

// ProjectPoints projects object points with cv::projectPoints using the
// rotation vector rvec, translation tvec, camera matrix k (row-major) and
// distortion (k1, k2, p1, p2, k3). It returns one pixel per point.
func ProjectPoints(obj [][3]float64, rvec, tvec [3]float64, k [3][3]float64, dist [5]float64) ([][2]float64, error) {
	if len(obj) == 0 {
		return nil, nil
	}
	in := make([]float64, 3*len(obj))
	for i, p := range obj {
		copy(in[3*i:], p[:])
	}
	out := make([]float64, 2*len(obj))
	kf := [9]float64{k[0][0], k[0][1], k[0][2], k[1][0], k[1][1], k[1][2], k[2][0], k[2][1], k[2][2]}
	rc := C.cvref_project_points(
		(*C.double)(unsafe.Pointer(&in[0])), C.int(len(obj)),
		(*C.double)(unsafe.Pointer(&rvec[0])), (*C.double)(unsafe.Pointer(&tvec[0])),
		(*C.double)(unsafe.Pointer(&kf[0])), (*C.double)(unsafe.Pointer(&dist[0])),
		(*C.double)(unsafe.Pointer(&out[0])))
	if rc != 0 {
		return nil, ErrOpenCV
	}
	res := make([][2]float64, len(obj))
	for i := range res {
		res[i] = [2]float64{out[2*i], out[2*i+1]}
	}
	return res, nil
}

// Rodrigues converts a rotation matrix to a rotation vector with cv::Rodrigues.
func Rodrigues(r [3][3]float64) ([3]float64, error) {
	rf := [9]float64{r[0][0], r[0][1], r[0][2], r[1][0], r[1][1], r[1][2], r[2][0], r[2][1], r[2][2]}
	var v [3]float64
	if C.cvref_rodrigues((*C.double)(unsafe.Pointer(&rf[0])), (*C.double)(unsafe.Pointer(&v[0]))) != 0 {
		return v, ErrOpenCV
	}
	return v, nil
}

// SetNumThreads calls cv::setNumThreads(n) for the whole process and returns
// the previous cv::getNumThreads() so callers can restore it.
func SetNumThreads(n int) int { return int(C.cvref_set_num_threads(C.int(n))) }

// NumThreads returns cv::getNumThreads().
func NumThreads() int { return int(C.cvref_get_num_threads()) }
