package vp8

// #cgo CFLAGS: -O3
// #include "convert.h"
import "C"

import (
	"fmt"
	"unsafe"
)

// Image is an 8-bit planar YUV 4:2:0 picture (I420) in BT.601 limited range
// ("studio swing": Y in 16..235, U and V in 16..240), the colour space of
// VP8 (RFC 6386 section 9.2, color_space = 0).
//
// Plane Y holds Height rows of Width samples, YStride bytes apart. Planes U
// and V hold (Height+1)/2 rows of (Width+1)/2 samples, UVStride bytes apart.
// The zero value is an empty image that Decode and BGRToI420 size on first
// use. An Image owns its planes; the package never keeps references to a
// caller's Image after a call returns.
type Image struct {
	// Width and Height are the picture size in pixels.
	Width, Height int
	// Y, U and V are the luma and chroma planes.
	Y, U, V []byte
	// YStride is the distance in bytes between rows of Y.
	YStride int
	// UVStride is the distance in bytes between rows of U and of V.
	UVStride int
}

// NewImage returns an image of the given size with tightly packed planes
// (YStride = width, UVStride = (width+1)/2), all samples zero.
func NewImage(width, height int) (*Image, error) {
	m := &Image{}
	if err := m.Resize(width, height); err != nil {
		return nil, err
	}
	return m, nil
}

// ChromaWidth returns the width of the U and V planes, (Width+1)/2.
func (m *Image) ChromaWidth() int { return (m.Width + 1) / 2 }

// ChromaHeight returns the height of the U and V planes, (Height+1)/2.
func (m *Image) ChromaHeight() int { return (m.Height + 1) / 2 }

// Resize sets the size to width x height with tightly packed planes,
// reusing the existing plane storage when it is large enough (so it does
// not allocate when the size is unchanged). Sample values are unspecified
// afterwards.
func (m *Image) Resize(width, height int) error {
	if width <= 0 || height <= 0 || width > maxDimension || height > maxDimension {
		return fmt.Errorf("%w: %dx%d, want 1..%d on each side", ErrImageSize, width, height, maxDimension)
	}
	cw, ch := (width+1)/2, (height+1)/2
	m.Width, m.Height = width, height
	m.YStride, m.UVStride = width, cw
	m.Y = grow(m.Y, width*height)
	m.U = grow(m.U, cw*ch)
	m.V = grow(m.V, cw*ch)
	return nil
}

func grow(b []byte, n int) []byte {
	if cap(b) >= n {
		return b[:n]
	}
	return make([]byte, n)
}

// Validate checks that the size is positive and that each plane is long
// enough for its stride and rows.
func (m *Image) Validate() error {
	if m == nil {
		return ErrNilImage
	}
	if m.Width <= 0 || m.Height <= 0 || m.Width > maxDimension || m.Height > maxDimension {
		return fmt.Errorf("%w: %dx%d, want 1..%d on each side", ErrImageSize, m.Width, m.Height, maxDimension)
	}
	cw, ch := m.ChromaWidth(), m.ChromaHeight()
	if m.YStride < m.Width || m.UVStride < cw {
		return fmt.Errorf("%w: strides Y %d UV %d too small for %dx%d", ErrImageSize, m.YStride, m.UVStride, m.Width, m.Height)
	}
	if need := planeLen(m.YStride, m.Width, m.Height); len(m.Y) < need {
		return fmt.Errorf("%w: Y plane has %d bytes, %dx%d with stride %d needs %d", ErrImageSize, len(m.Y), m.Width, m.Height, m.YStride, need)
	}
	need := planeLen(m.UVStride, cw, ch)
	if len(m.U) < need || len(m.V) < need {
		return fmt.Errorf("%w: U/V planes have %d/%d bytes, need %d", ErrImageSize, len(m.U), len(m.V), need)
	}
	return nil
}

// planeLen is the bytes needed for rows rows of w samples stride apart.
func planeLen(stride, w, rows int) int { return stride*(rows-1) + w }

// Fixed-point BT.601 limited-range coefficients, scaled by 2^16.
// Source: ITU-R BT.601-7 clause 2.5.3 (equations from memory):
//
//	Y  = 16  + (65.481 R + 128.553 G + 24.966 B) / 255
//	Cb = 128 + (-37.797 R - 74.203 G + 112.0 B) / 255
//	Cr = 128 + (112.0 R - 93.786 G - 18.214 B) / 255
//
// e.g. 65.481/255 = 0.256788 and 0.256788 * 65536 = 16829. The chroma
// coefficient rows sum to exactly 0 so that grey maps to U = V = 128.
const (
	fixShift = C.SG_FIX_SHIFT
	fixHalf  = 1 << (fixShift - 1)

	yR, yG, yB = C.SG_Y_R, C.SG_Y_G, C.SG_Y_B
	uR, uG, uB = C.SG_U_R, C.SG_U_G, C.SG_U_B
	vR, vG, vB = C.SG_V_R, C.SG_V_G, C.SG_V_B

	// Inverse (same source, inverted): R = 1.164383 (Y-16) + 1.596027 (V-128),
	// G = 1.164383 (Y-16) - 0.391762 (U-128) - 0.812968 (V-128),
	// B = 1.164383 (Y-16) + 2.017232 (U-128).
	cY, crV, cgU, cgV, cbU = C.SG_C_Y, C.SG_CR_V, C.SG_CG_U, C.SG_CG_V, C.SG_CB_U
)

// BGRToI420 converts a packed 8-bit BGR picture (OpenCV's default channel
// order; 3 bytes per pixel, rows width*3 bytes apart, no padding) of
// width x height pixels into dst, resizing dst (see Image.Resize). Chroma is
// the BT.601 conversion of the average colour of each 2x2 block (fewer at
// odd edges). It does not allocate when dst already has room.
func BGRToI420(dst *Image, bgr []byte, width, height int) error {
	if dst == nil {
		return ErrNilImage
	}
	if width <= 0 || height <= 0 || width > maxDimension || height > maxDimension {
		return fmt.Errorf("%w: BGR size %dx%d, want 1..%d on each side", ErrImageSize, width, height, maxDimension)
	}
	if len(bgr) < width*height*3 {
		return fmt.Errorf("%w: BGR buffer has %d bytes, %dx%d needs %d", ErrImageSize, len(bgr), width, height, width*height*3)
	}
	if err := dst.Resize(width, height); err != nil {
		return err
	}
	bgrToI420(dst, bgr)
	return nil
}

// bgrToI420 converts bgr (validated, exactly dst's size) into dst's planes,
// which may have any valid strides (the encoder passes a view of C memory),
// in C (convert.c).
func bgrToI420(dst *Image, bgr []byte) {
	C.sg_bgr_to_i420((*C.uint8_t)(unsafe.Pointer(&bgr[0])), C.int(dst.Width), C.int(dst.Height),
		(*C.uint8_t)(unsafe.Pointer(&dst.Y[0])), C.int(dst.YStride),
		(*C.uint8_t)(unsafe.Pointer(&dst.U[0])), (*C.uint8_t)(unsafe.Pointer(&dst.V[0])), C.int(dst.UVStride))
}

// convertBuilds returns which builds of the C conversions this CPU can run
// ("baseline", plus "avx2" when it has AVX2), and select makes the next
// conversions use one of them (the tests run both).
func convertBuilds() (builds []string, selectBuild func(name string)) {
	builds = []string{"baseline"}
	C.sg_convert_base_only = 0
	if C.sg_convert_avx2() != 0 {
		builds = append(builds, "avx2")
	}
	return builds, func(name string) {
		C.sg_convert_base_only = 0
		if name == "baseline" {
			C.sg_convert_base_only = 1
		}
	}
}

// I420ToBGR converts src into packed 8-bit BGR (3 bytes per pixel, rows
// src.Width*3 bytes apart) in dst[:src.Width*src.Height*3], the layout
// gocv.NewMatFromBytes(h, w, gocv.MatTypeCV8UC3, dst) wraps. dst is owned by
// the caller and must be at least that long. Chroma is replicated over each
// 2x2 block (no interpolation). It does not allocate.
func I420ToBGR(dst []byte, src *Image) error {
	if err := src.Validate(); err != nil {
		return err
	}
	w, h := src.Width, src.Height
	if len(dst) < w*h*3 {
		return fmt.Errorf("%w: BGR buffer has %d bytes, %dx%d needs %d", ErrImageSize, len(dst), w, h, w*h*3)
	}
	C.sg_i420_to_bgr((*C.uint8_t)(unsafe.Pointer(&src.Y[0])), C.int(src.YStride),
		(*C.uint8_t)(unsafe.Pointer(&src.U[0])), (*C.uint8_t)(unsafe.Pointer(&src.V[0])), C.int(src.UVStride),
		C.int(w), C.int(h), (*C.uint8_t)(unsafe.Pointer(&dst[0])))
	return nil
}

// copyImage copies src's pixels into dst (sizes equal, both validated).
func copyImage(dst, src *Image) {
	copyPlane(dst.Y, dst.YStride, src.Y, src.YStride, src.Width, src.Height)
	cw, ch := src.ChromaWidth(), src.ChromaHeight()
	copyPlane(dst.U, dst.UVStride, src.U, src.UVStride, cw, ch)
	copyPlane(dst.V, dst.UVStride, src.V, src.UVStride, cw, ch)
}

func copyPlane(dst []byte, dstStride int, src []byte, srcStride, w, h int) {
	if dstStride == w && srcStride == w {
		copy(dst[:w*h], src[:w*h])
		return
	}
	for y := 0; y < h; y++ {
		copy(dst[y*dstStride:y*dstStride+w], src[y*srcStride:y*srcStride+w])
	}
}
