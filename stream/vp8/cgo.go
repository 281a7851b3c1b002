package vp8

// #cgo pkg-config: vpx
// #include "vpxwrap.h"
// #include <vpx/vpx_codec.h>
import "C"

import "unsafe"

// vpxErrorString returns libvpx's static name for a vpx_codec_err_t.
func vpxErrorString(code C.int) string {
	return C.GoString(C.vpx_codec_err_to_string(C.vpx_codec_err_t(code)))
}

// cImageView returns an Image whose planes alias the C image img (no
// copy). The view must not be used after libvpx frees or reuses img.
func cImageView(img *C.vpx_image_t) Image {
	w, h := int(img.d_w), int(img.d_h)
	cw, ch := (w+1)/2, (h+1)/2
	ys, us, vs := int(img.stride[0]), int(img.stride[1]), int(img.stride[2])
	m := Image{Width: w, Height: h, YStride: ys, UVStride: us}
	if w == 0 || h == 0 || ys < w || us < cw || vs != us {
		// Caller checks Validate; an empty view fails it.
		m.YStride, m.UVStride = 0, 0
		return m
	}
	m.Y = unsafe.Slice((*byte)(unsafe.Pointer(img.planes[0])), planeLen(ys, w, h))
	m.U = unsafe.Slice((*byte)(unsafe.Pointer(img.planes[1])), planeLen(us, cw, ch))
	m.V = unsafe.Slice((*byte)(unsafe.Pointer(img.planes[2])), planeLen(vs, cw, ch))
	return m
}

// cMallocInUse reports bytes handed out by the C heap (for leak tests).
func cMallocInUse() int { return int(C.sg_malloc_in_use()) }
