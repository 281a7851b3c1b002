package predictor

import (
	"fmt"
	"image"
	"unsafe"

	"gocv.io/x/gocv"
)

// matUsable reports whether m is non-nil and was created by gocv (a zero
// gocv.Mat{} has no OpenCV object behind it and would crash OpenCV calls).
func matUsable(m *gocv.Mat) bool {
	return m != nil && unsafe.Pointer(m.Ptr()) != nil
}

// checkFrame reports whether m is a usable CV_8UC3 image of the camera size.
func checkFrame(what string, m *gocv.Mat, w, h int) error {
	if !matUsable(m) {
		return fmt.Errorf("%s is nil or a zero gocv.Mat; create it with gocv.NewMat(): %w", what, ErrFrameFormat)
	}
	if m.Empty() {
		return fmt.Errorf("%s is empty: %w", what, ErrFrameFormat)
	}
	if m.Cols() != w || m.Rows() != h || m.Type() != gocv.MatTypeCV8UC3 {
		return fmt.Errorf("%s is %dx%d %v, want %dx%d CV8UC3 (BGR) to match the camera: %w",
			what, m.Cols(), m.Rows(), m.Type(), w, h, ErrFrameFormat)
	}
	return nil
}

// ensureLike makes dst a CV_8UC3 image of like's size. It allocates (inside
// OpenCV, through dst's own header) only when dst has another size or type,
// so a caller that keeps passing the same dst pays once.
func ensureLike(dst *gocv.Mat, like gocv.Mat) error {
	if !matUsable(dst) {
		return fmt.Errorf("destination is nil or a zero gocv.Mat; create it with gocv.NewMat(): %w", ErrFrameFormat)
	}
	if dst.Cols() == like.Cols() && dst.Rows() == like.Rows() && dst.Type() == like.Type() {
		return nil
	}
	like.CopyTo(dst)
	return nil
}

// setMat3 writes h into a preallocated 3x3 CV_64F Mat without allocating.
func setMat3(m *gocv.Mat, h Homography) error {
	d, err := m.DataPtrFloat64()
	if err != nil {
		return fmt.Errorf("homography buffer: %w", err)
	}
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			d[3*i+j] = h[i][j]
		}
	}
	return nil
}

// rowRect is the full-width rectangle of rows [r0, r1).
func rowRect(w, r0, r1 int) image.Rectangle { return image.Rect(0, r0, w, r1) }
