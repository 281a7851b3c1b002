// Bilinear perspective warp of 8-bit BGR images, fixed point (see warpkernel.go).
#ifndef STOPGAP_WARPKERNEL_H
#define STOPGAP_WARPKERNEL_H

#include <stddef.h>

// Parameters of one warp, passed by value; the images and spans are passed
// beside it so that the struct holds no pointers.
typedef struct {
	ptrdiff_t dst_stride;     // bytes between destination rows
	int dw, dh;               // destination region size, pixels
	int col0, row0;           // image coordinates of the region's top-left pixel
	ptrdiff_t src_stride;     // bytes between source rows
	int sw, sh;               // source size, pixels (>= 1)
	double m[9];              // inverse map, row-major: destination image pixel -> source pixel
	unsigned char fill;       // value of every channel outside the source
	int path;                 // 0 = best available, 1 = portable scalar
} sg_warp_args;

// sg_warp_bgr warps src (pixel (0, 0)) into dst (pixel (col0, row0) of the
// destination image); returns the path used (1 scalar, 2 AVX2). rowptr, if
// not NULL, has dh+1 entries and row r is written only in the column
// intervals rowptr[r] .. rowptr[r+1]-1 of spans, pairs [begin, end) of
// region columns.
int sg_warp_bgr(unsigned char *dst, const unsigned char *src, const int *rowptr, const int *spans,
                sg_warp_args p);

// sg_warp_best_path returns the path sg_warp_bgr uses for path = 0.
int sg_warp_best_path(void);

#endif
