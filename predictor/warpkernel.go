package predictor

/*
#cgo CFLAGS: -O3
#include "warpkernel.h"
*/
import "C"

import (
	"fmt"
	"math"
	"unsafe"

	"gocv.io/x/gocv"
)

// bgrView is an 8-bit BGR image in memory: pixel (u, v) is the three bytes
// at Pix[v*Stride+3u:], blue first. The view does not own Pix.
type bgrView struct {
	Pix    []byte
	Stride int // bytes between rows, >= 3*W
	W, H   int // pixels
}

// check reports whether the view's fields describe memory inside Pix.
func (b bgrView) check(what string) error {
	if b.W < 1 || b.H < 1 || b.Stride < 3*b.W {
		return fmt.Errorf("%s: %dx%d with stride %d bytes, want at least 1x1 and stride >= 3*width: %w", what, b.W, b.H, b.Stride, ErrFrameFormat)
	}
	if need := (b.H-1)*b.Stride + 3*b.W; len(b.Pix) < need {
		return fmt.Errorf("%s: %d bytes for %dx%d with stride %d, want at least %d: %w", what, len(b.Pix), b.W, b.H, b.Stride, need, ErrFrameFormat)
	}
	return nil
}

// rows returns the view of rows [r0, r1).
func (b bgrView) rows(r0, r1 int) bgrView {
	return bgrView{Pix: b.Pix[r0*b.Stride:], Stride: b.Stride, W: b.W, H: r1 - r0}
}

// matView returns a view of a continuous CV_8UC3 Mat's memory (owned by the
// Mat; valid until it is closed or reallocated).
func matView(m *gocv.Mat) (bgrView, error) {
	if !matUsable(m) || m.Empty() || m.Type() != gocv.MatTypeCV8UC3 {
		return bgrView{}, fmt.Errorf("image is not a non-empty CV8UC3 gocv.Mat: %w", ErrFrameFormat)
	}
	p, err := m.DataPtrUint8()
	if err != nil {
		return bgrView{}, fmt.Errorf("image memory: %v: %w", err, ErrFrameFormat)
	}
	return bgrView{Pix: p, Stride: m.Step(), W: m.Cols(), H: m.Rows()}, nil
}

// warpPath selects the implementation of warpBGR.
type warpPath int

const (
	warpPathBest   warpPath = 0 // the fastest the CPU supports
	warpPathScalar warpPath = 1 // portable C, any CPU
	warpPathAVX2   warpPath = 2 // x86-64 with AVX2 (reported, not requested)
)

// bestWarpPath returns the path warpBGR takes on this CPU.
func bestWarpPath() warpPath { return warpPath(C.sg_warp_best_path()) }

// warpBGR is the bilinear perspective warp of this package: it writes the
// whole of dst, whose pixel (c, r) is the destination image pixel (col0+c,
// row0+r), from src through inv, the inverse map (destination image pixel ->
// source pixel, homogeneous, H·(u, v, 1)).
//
// Arithmetic (same as cv::warpPerspective with INTER_LINEAR, WARP_INVERSE_MAP
// and BORDER_CONSTANT, see warpkernel.c): the source point is rounded to 1/32
// px and interpolated with integer weights summing to 1024; taps outside src
// read fill, pixels whose W <= 0 (behind the source camera) are fill. X, Y, W
// are evaluated incrementally along each row in double precision (from the
// row's first pixel in steps of 8 pixels, then by inv's first column inside
// each block of 8), 4 pixels at a time with
// AVX2 when the CPU has it, in portable C otherwise; both give identical
// bytes.
//
// dst and src are owned by the caller, must not overlap, and nothing is
// allocated. It returns the path used.
func warpBGR(dst, src bgrView, inv Homography, col0, row0 int, fill byte, path warpPath) (warpPath, error) {
	return warpBGRSpans(dst, src, inv, col0, row0, nil, nil, fill, path)
}

// warpBGRSpans is warpBGR restricted to column intervals: row r of dst is
// written only in the intervals rowptr[r] .. rowptr[r+1]-1 of spans, each a
// pair [begin, end) of columns (clipped to the row), and left alone
// elsewhere (compressed sparse rows; rowptr may be a window of a larger
// index, its entries are positions in spans). nil rowptr means whole rows;
// otherwise it has dst.H+1 non-decreasing entries within 0..len(spans)/2. A pixel's
// arithmetic does not depend on its interval except through the row
// anchor, evaluated at the interval's first column instead of carried from
// column 0 (about 1e-16 relative in the source point).
func warpBGRSpans(dst, src bgrView, inv Homography, col0, row0 int, rowptr, spans []int32, fill byte, path warpPath) (warpPath, error) {
	if rowptr != nil {
		if len(rowptr) != dst.H+1 || rowptr[0] < 0 || int(rowptr[dst.H]) > len(spans)/2 {
			return 0, fmt.Errorf("span index of %d entries (%d..%d) for %d rows and %d span values, want %d entries within 0..%d: %w",
				len(rowptr), rowptr[0], rowptr[len(rowptr)-1], dst.H, len(spans), dst.H+1, len(spans)/2, ErrInvalidConfig)
		}
		for r := 0; r < dst.H; r++ {
			if rowptr[r+1] < rowptr[r] {
				return 0, fmt.Errorf("span index decreases at row %d: %w", r, ErrInvalidConfig)
			}
		}
	}
	if err := dst.check("warp destination"); err != nil {
		return 0, err
	}
	if err := src.check("warp source"); err != nil {
		return 0, err
	}
	if !inv.IsFinite() {
		return 0, fmt.Errorf("inverse map %v: %w", inv, ErrSingular)
	}
	if overlaps(dst, src) {
		return 0, fmt.Errorf("warp destination overlaps its source; use a separate buffer: %w", ErrFrameFormat)
	}
	if math.Abs(float64(col0))+float64(dst.W) > 1<<24 || math.Abs(float64(row0))+float64(dst.H) > 1<<24 {
		return 0, fmt.Errorf("destination region at (%d, %d) size %dx%d: coordinates beyond 2^24: %w", col0, row0, dst.W, dst.H, ErrFrameFormat)
	}
	a := C.sg_warp_args{
		dst_stride: C.ptrdiff_t(dst.Stride),
		dw:         C.int(dst.W),
		dh:         C.int(dst.H),
		col0:       C.int(col0),
		row0:       C.int(row0),
		src_stride: C.ptrdiff_t(src.Stride),
		sw:         C.int(src.W),
		sh:         C.int(src.H),
		fill:       C.uchar(fill),
		path:       C.int(path),
	}
	for i := 0; i < 9; i++ {
		a.m[i] = C.double(inv[i/3][i%3])
	}
	var rp, sp *C.int
	if rowptr != nil {
		if len(spans) == 0 {
			return path, nil // nothing to write
		}
		rp, sp = (*C.int)(unsafe.Pointer(&rowptr[0])), (*C.int)(unsafe.Pointer(&spans[0]))
	}
	return warpPath(C.sg_warp_bgr((*C.uchar)(unsafe.Pointer(&dst.Pix[0])), (*C.uchar)(unsafe.Pointer(&src.Pix[0])), rp, sp, a)), nil
}

// overlaps reports whether the byte ranges of two views intersect.
func overlaps(a, b bgrView) bool {
	a0 := uintptr(unsafe.Pointer(&a.Pix[0]))
	b0 := uintptr(unsafe.Pointer(&b.Pix[0]))
	a1 := a0 + uintptr((a.H-1)*a.Stride+3*a.W)
	b1 := b0 + uintptr((b.H-1)*b.Stride+3*b.W)
	return a0 < b1 && b0 < a1
}
