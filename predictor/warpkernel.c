// Bilinear perspective warp of 8-bit BGR images in fixed point.
//
// Per destination pixel (u, v) the source point is (X/W, Y/W) with
// (X, Y, W) = M (u, v, 1). Along a row X, Y and W are affine in u: they are
// evaluated at the row's first pixel, carried along the row in steps of 8
// pixels and stepped by M's first column inside each block of 8, in double
// precision. The source point is rounded to 1/32 px (round half to
// even: x = rint(X * (32/W))), as cv::warpPerspective does (INTER_BITS = 5,
// imgproc/src/imgwarp.cpp, from memory), and interpolated with the integer
// weights (32-fx)(32-fy), fx(32-fy), (32-fx)fy, fx fy (sum 1024), rounded:
// out = (sum + 512) >> 10. OpenCV's bilinear table holds the same weights
// times 32 with the result shifted by 15, so the arithmetic agrees exactly
// once the coordinates agree. Taps outside the source read the fill value
// (cv::BORDER_CONSTANT); pixels with W <= 0 (behind the source camera) are the
// fill value.
//
// Two paths produce identical output: a portable scalar one and an AVX2 one
// (coordinates four at a time, then one pshufb + two pmaddwd per pixel and
// four pixels packed per store), chosen at run time from the CPU's features
// (__builtin_cpu_supports). Neither is compiled for a target with FMA, so no
// multiply-add is fused in one path and not the other.
#include "warpkernel.h"

#include <math.h>
#include <stdint.h>
#include <string.h>

#define SG_BITS 5
#define SG_ONE (1 << SG_BITS)
#define SG_MASK (SG_ONE - 1)
#define SG_LIM 268435456.0 /* 2^28: clamp before the conversion to int */
#define SG_BLOCK 8

typedef struct {
	unsigned char *dst;
	const unsigned char *src;
	ptrdiff_t dst_stride, src_stride;
	int dw, dh, col0, row0, sw, sh;
	const double *m;
	const int *rowptr, *spans;
	unsigned char fill;
} sg_warp;

// Homogeneous source point of destination pixel (u, v).
static inline void sg_anchor(const double *m, double u, double v, double *x, double *y, double *w) {
	*x = m[0] * u + m[1] * v + m[2];
	*y = m[3] * u + m[4] * v + m[5];
	*w = m[6] * u + m[7] * v + m[8];
}

// Moves the anchors SG_BLOCK pixels along the row: X += 8 m0 and so on.
// Exact products (8 is a power of two); one rounding per addition, about
// 1e-16 relative per block.
static inline void sg_step(const double *m, double *x, double *y, double *w) {
	*x += SG_BLOCK * m[0];
	*y += SG_BLOCK * m[3];
	*w += SG_BLOCK * m[6];
}

static inline double sg_clamp(double x) {
	x = x > -SG_LIM ? x : -SG_LIM; // NaN -> -SG_LIM, like _mm256_max_pd(x, lo)
	x = x < SG_LIM ? x : SG_LIM;
	return x;
}

// One pixel, any position: taps outside the source read the fill value.
static inline void sg_pixel_slow(const sg_warp *a, int ix, int iy, unsigned char *out) {
	int x0 = ix >> SG_BITS, y0 = iy >> SG_BITS;
	int fx = ix & SG_MASK, fy = iy & SG_MASK;
	int w[4] = {(SG_ONE - fx) * (SG_ONE - fy), fx * (SG_ONE - fy), (SG_ONE - fx) * fy, fx * fy};
	int xs[4] = {x0, x0 + 1, x0, x0 + 1};
	int ys[4] = {y0, y0, y0 + 1, y0 + 1};
	int s[3] = {512, 512, 512};
	for (int k = 0; k < 4; k++) {
		const unsigned char *p = NULL;
		if (xs[k] >= 0 && xs[k] < a->sw && ys[k] >= 0 && ys[k] < a->sh) {
			p = a->src + (ptrdiff_t)ys[k] * a->src_stride + 3 * (ptrdiff_t)xs[k];
		}
		for (int c = 0; c < 3; c++) {
			s[c] += w[k] * (p ? p[c] : a->fill);
		}
	}
	out[0] = (unsigned char)(s[0] >> 10);
	out[1] = (unsigned char)(s[1] >> 10);
	out[2] = (unsigned char)(s[2] >> 10);
}

// Pixels [c0, ce) of destination row v into d (the row's column 0), one at
// a time, with the arithmetic of the vector path: X, Y, W evaluated at
// column cb, carried in steps of SG_BLOCK pixels, then X0 + m0*k.
static void sg_row_scalar(const sg_warp *a, unsigned char *d, double v, int cb, int c0, int ce) {
	const double *m = a->m;
	double X0, Y0, W0;
	sg_anchor(m, (double)(a->col0 + cb), v, &X0, &Y0, &W0);
	for (int b = cb; b < c0; b += SG_BLOCK) { // the vector path's anchors, bit for bit
		sg_step(m, &X0, &Y0, &W0);
	}
	for (; c0 < ce; c0 += SG_BLOCK, sg_step(m, &X0, &Y0, &W0)) {
		for (int k = 0; k < SG_BLOCK && c0 + k < ce; k++) {
			double fk = (double)k;
			double W = W0 + m[6] * fk;
			unsigned char *o = d + 3 * (ptrdiff_t)(c0 + k);
			if (!(W > 0)) {
				o[0] = o[1] = o[2] = a->fill;
				continue;
			}
			double iw = (double)SG_ONE / W;
			int ix = (int)lrint(sg_clamp((X0 + m[0] * fk) * iw));
			int iy = (int)lrint(sg_clamp((Y0 + m[3] * fk) * iw));
			sg_pixel_slow(a, ix, iy, o);
		}
	}
}

// Row r's column intervals: rowptr NULL means one, the whole row;
// otherwise intervals rowptr[r] .. rowptr[r+1]-1 of spans, each a pair
// [begin, end) clipped to [0, dw).
static inline int sg_nspans(const sg_warp *a, int r) { return a->rowptr ? a->rowptr[r + 1] - a->rowptr[r] : 1; }

static inline int sg_span(const sg_warp *a, int r, int i, int *cb, int *ce) {
	*cb = 0;
	*ce = a->dw;
	if (a->rowptr) {
		const int *p = a->spans + 2 * (a->rowptr[r] + i);
		*cb = p[0] > 0 ? p[0] : 0;
		*ce = p[1] < a->dw ? p[1] : a->dw;
	}
	return *cb < *ce;
}

static void sg_warp_scalar(const sg_warp *a) {
	for (int r = 0; r < a->dh; r++) {
		for (int i = 0, n = sg_nspans(a, r); i < n; i++) {
			int cb, ce;
			if (sg_span(a, r, i, &cb, &ce)) {
				sg_row_scalar(a, a->dst + (ptrdiff_t)r * a->dst_stride, (double)(a->row0 + r), cb, cb, ce);
			}
		}
	}
}

#if defined(__x86_64__) || defined(__i386__)
#include <immintrin.h>

#define SG_AVX2 __attribute__((target("avx2")))

// Four source points in fixed point from the homogeneous X, Y, W (double):
// ix, iy the rounded 32·X/W, 32·Y/W (clamped), ok all ones where W > 0.
static inline SG_AVX2 void sg_fix4(__m256d X, __m256d Y, __m256d W, __m128i *ix, __m128i *iy, __m128i *ok) {
	const __m256d one = _mm256_set1_pd((double)SG_ONE), lo = _mm256_set1_pd(-SG_LIM), hi = _mm256_set1_pd(SG_LIM);
	__m256d iw = _mm256_div_pd(one, W);
	__m256d fx = _mm256_min_pd(_mm256_max_pd(_mm256_mul_pd(X, iw), lo), hi);
	__m256d fy = _mm256_min_pd(_mm256_max_pd(_mm256_mul_pd(Y, iw), lo), hi);
	*ix = _mm256_cvtpd_epi32(fx);
	*iy = _mm256_cvtpd_epi32(fy);
	// W > 0 as 32-bit masks: the low halves of the 64-bit ones.
	__m256 gt = _mm256_castpd_ps(_mm256_cmp_pd(W, _mm256_setzero_pd(), _CMP_GT_OQ));
	*ok = _mm_castps_si128(_mm_shuffle_ps(_mm256_castps256_ps128(gt), _mm256_extractf128_ps(gt, 1), 0x88));
}

// Interpolates one pixel from precomputed data: p points at tap (x0, y0),
// wa packs the 16-bit weights (w00, w01) and wb (w10, w11). Returns
// (B, G, R, 0) as 32-bit lanes, already rounded and shifted.
static inline SG_AVX2 __m128i sg_pixel_pre(const unsigned char *p, ptrdiff_t stride, int wa, int wb, __m128i sh0,
                                          __m128i sh1) {
	__m128i v = _mm_loadl_epi64((const __m128i *)p);
	v = _mm_castpd_si128(_mm_loadh_pd(_mm_castsi128_pd(v), (const double *)(p + stride)));
	__m128i t = _mm_shuffle_epi8(v, sh0);
	__m128i b = _mm_shuffle_epi8(v, sh1);
	__m128i s = _mm_add_epi32(_mm_madd_epi16(t, _mm_set1_epi32(wa)), _mm_madd_epi16(b, _mm_set1_epi32(wb)));
	return _mm_srli_epi32(_mm_add_epi32(s, _mm_set1_epi32(512)), 10);
}

static SG_AVX2 void sg_warp_avx2(const sg_warp *a) {
	const double *m = a->m;
	const __m256d mx = _mm256_set1_pd(m[0]), my = _mm256_set1_pd(m[3]), mw = _mm256_set1_pd(m[6]);
	const __m256d k0 = _mm256_setr_pd(0, 1, 2, 3), k1 = _mm256_setr_pd(4, 5, 6, 7);
	const __m128i sh0 = _mm_setr_epi8(0, -1, 3, -1, 1, -1, 4, -1, 2, -1, 5, -1, -1, -1, -1, -1);
	const __m128i sh1 = _mm_setr_epi8(8, -1, 11, -1, 9, -1, 12, -1, 10, -1, 13, -1, -1, -1, -1, -1);
	// Packs four (B, G, R, 0) byte quads into 12 bytes.
	const __m128i pack = _mm_setr_epi8(0, 1, 2, 4, 5, 6, 8, 9, 10, 12, 13, 14, -1, -1, -1, -1);
	const int xlim = a->sw >= 3 ? a->sw - 2 : 0; // fast taps: x0 < xlim (8-byte loads stay in the row)
	const __m256i vmask = _mm256_set1_epi32(SG_MASK), vone = _mm256_set1_epi32(SG_ONE);
	const __m256i vxmax = _mm256_set1_epi32(xlim - 1), vymax = _mm256_set1_epi32(a->sh - 2);
	const __m256i vstride = _mm256_set1_epi32((int)a->src_stride), vthree = _mm256_set1_epi32(3);
	const __m256i sh0x2 = _mm256_broadcastsi128_si256(sh0), sh1x2 = _mm256_broadcastsi128_si256(sh1);
	const __m256i packx2 = _mm256_broadcastsi128_si256(pack), round = _mm256_set1_epi32(512);
	const __m256i order = _mm256_setr_epi32(0, 4, 1, 5, 2, 6, 3, 7);
	const __m256i can = _mm256_set1_epi32(xlim > 0 && a->sh >= 2 ? -1 : 0); // any fast pixel possible
	int ixs[SG_BLOCK], iys[SG_BLOCK], oks[SG_BLOCK], offs[SG_BLOCK], was[SG_BLOCK], wbs[SG_BLOCK];
	unsigned char tmp[3 * SG_BLOCK + 8];
	for (int r = 0, si = 0; r < a->dh; si = 0, r++) {
	next_span:;
		if (si >= sg_nspans(a, r)) {
			continue;
		}
		int cb, ce;
		if (!sg_span(a, r, si++, &cb, &ce)) {
			goto next_span;
		}
		unsigned char *d = a->dst + (ptrdiff_t)r * a->dst_stride;
		double v = a->row0 + r;
		int c0 = cb;
		double X0, Y0, W0;
		sg_anchor(m, (double)(a->col0 + cb), v, &X0, &Y0, &W0);
		for (; c0 < ce; c0 += SG_BLOCK, sg_step(m, &X0, &Y0, &W0)) {
			// A last, partial block is computed whole (the extra pixels only
			// cost arithmetic and in-bounds reads) and n pixels copied out.
			int n = ce - c0 < SG_BLOCK ? ce - c0 : SG_BLOCK;
			unsigned char *o = n == SG_BLOCK ? d + 3 * (ptrdiff_t)c0 : tmp;
			__m256d x0 = _mm256_set1_pd(X0), y0 = _mm256_set1_pd(Y0), w0 = _mm256_set1_pd(W0);
			__m128i ixa, iya, oka, ixb, iyb, okb;
			sg_fix4(_mm256_add_pd(x0, _mm256_mul_pd(mx, k0)), _mm256_add_pd(y0, _mm256_mul_pd(my, k0)),
			        _mm256_add_pd(w0, _mm256_mul_pd(mw, k0)), &ixa, &iya, &oka);
			sg_fix4(_mm256_add_pd(x0, _mm256_mul_pd(mx, k1)), _mm256_add_pd(y0, _mm256_mul_pd(my, k1)),
			        _mm256_add_pd(w0, _mm256_mul_pd(mw, k1)), &ixb, &iyb, &okb);
			__m256i ix = _mm256_set_m128i(ixb, ixa), iy = _mm256_set_m128i(iyb, iya);
			__m256i ok = _mm256_set_m128i(okb, oka);
			__m256i xi = _mm256_srai_epi32(ix, SG_BITS), yi = _mm256_srai_epi32(iy, SG_BITS);
			// Inside test as unsigned compares: 0 <= x0 <= xlim-1, 0 <= y0 <= sh-2.
			__m256i inx = _mm256_cmpeq_epi32(_mm256_min_epu32(xi, vxmax), xi);
			__m256i iny = _mm256_cmpeq_epi32(_mm256_min_epu32(yi, vymax), yi);
			__m256i fast = _mm256_and_si256(ok, _mm256_and_si256(inx, iny));
			fast = _mm256_and_si256(fast, can);
			int fmask = _mm256_movemask_ps(_mm256_castsi256_ps(fast));
			__m256i fx = _mm256_and_si256(ix, vmask), fy = _mm256_and_si256(iy, vmask);
			__m256i gx = _mm256_sub_epi32(vone, fx), gy = _mm256_sub_epi32(vone, fy);
			// Products fit in 16 bits (<= 1024): mullo_epi16 on 32-bit lanes whose high halves are 0.
			__m256i wa = _mm256_or_si256(_mm256_mullo_epi16(gx, gy), _mm256_slli_epi32(_mm256_mullo_epi16(fx, gy), 16));
			__m256i wb = _mm256_or_si256(_mm256_mullo_epi16(gx, fy), _mm256_slli_epi32(_mm256_mullo_epi16(fx, fy), 16));
			__m256i off = _mm256_add_epi32(_mm256_mullo_epi32(yi, vstride), _mm256_mullo_epi32(xi, vthree));
			_mm256_storeu_si256((__m256i *)offs, off);
			_mm256_storeu_si256((__m256i *)was, wa);
			_mm256_storeu_si256((__m256i *)wbs, wb);
			if (fmask == 0xFF) {
				// Two pixels per 256-bit register: pixel 2j in the low lane, 2j+1 in the high one.
				__m256i px[SG_BLOCK / 2];
				for (int j = 0; j < SG_BLOCK / 2; j++) {
					const unsigned char *pa = a->src + offs[2 * j], *pb = a->src + offs[2 * j + 1];
					__m128i va = _mm_loadl_epi64((const __m128i *)pa);
					va = _mm_castpd_si128(_mm_loadh_pd(_mm_castsi128_pd(va), (const double *)(pa + a->src_stride)));
					__m128i vb = _mm_loadl_epi64((const __m128i *)pb);
					vb = _mm_castpd_si128(_mm_loadh_pd(_mm_castsi128_pd(vb), (const double *)(pb + a->src_stride)));
					__m256i vv = _mm256_inserti128_si256(_mm256_castsi128_si256(va), vb, 1);
					__m256i sel = _mm256_setr_epi32(2 * j, 2 * j, 2 * j, 2 * j, 2 * j + 1, 2 * j + 1, 2 * j + 1, 2 * j + 1);
					__m256i sum = _mm256_add_epi32(
					    _mm256_madd_epi16(_mm256_shuffle_epi8(vv, sh0x2), _mm256_permutevar8x32_epi32(wa, sel)),
					    _mm256_madd_epi16(_mm256_shuffle_epi8(vv, sh1x2), _mm256_permutevar8x32_epi32(wb, sel)));
					px[j] = _mm256_srli_epi32(_mm256_add_epi32(sum, round), 10);
				}
				// Lanes hold pixels (0,2 | 1,3) and (4,6 | 5,7) after the packs;
				// the permute restores 0..7, the shuffle drops every 4th byte.
				__m256i q = _mm256_packus_epi16(_mm256_packs_epi32(px[0], px[1]), _mm256_packs_epi32(px[2], px[3]));
				q = _mm256_shuffle_epi8(_mm256_permutevar8x32_epi32(q, order), packx2);
				_mm_storeu_si128((__m128i *)o, _mm256_castsi256_si128(q));
				__m128i h = _mm256_extracti128_si256(q, 1);
				_mm_storel_epi64((__m128i *)(o + 12), h);
				uint32_t tail = (uint32_t)_mm_cvtsi128_si32(_mm_srli_si128(h, 8));
				memcpy(o + 20, &tail, 4);
				goto flush;
			}
			_mm256_storeu_si256((__m256i *)ixs, ix);
			_mm256_storeu_si256((__m256i *)iys, iy);
			_mm256_storeu_si256((__m256i *)oks, ok);
			_mm256_storeu_si256((__m256i *)was, wa);
			_mm256_storeu_si256((__m256i *)wbs, wb);
			__m128i px[SG_BLOCK];
			for (int k = 0; k < SG_BLOCK; k++) {
				if (fmask >> k & 1) {
					px[k] = sg_pixel_pre(a->src + offs[k], a->src_stride, was[k], wbs[k], sh0, sh1);
				} else if (!oks[k]) {
					px[k] = _mm_setr_epi32(a->fill, a->fill, a->fill, 0);
				} else {
					unsigned char t[3];
					sg_pixel_slow(a, ixs[k], iys[k], t);
					px[k] = _mm_setr_epi32(t[0], t[1], t[2], 0);
				}
			}
			for (int q = 0; q < SG_BLOCK; q += 4) {
				__m128i b = _mm_packus_epi16(_mm_packs_epi32(px[q], px[q + 1]), _mm_packs_epi32(px[q + 2], px[q + 3]));
				b = _mm_shuffle_epi8(b, pack);
				_mm_storel_epi64((__m128i *)(o + 3 * q), b);
				uint32_t tail = (uint32_t)_mm_cvtsi128_si32(_mm_srli_si128(b, 8));
				memcpy(o + 3 * q + 8, &tail, 4);
			}
		flush:
			if (n < SG_BLOCK) {
				memcpy(d + 3 * (ptrdiff_t)c0, tmp, 3 * (size_t)n);
			}
		}
		goto next_span;
	}
}

int sg_warp_best_path(void) {
	__builtin_cpu_init();
	return __builtin_cpu_supports("avx2") ? 2 : 1;
}
#else
int sg_warp_best_path(void) { return 1; }
#endif

int sg_warp_bgr(unsigned char *dst, const unsigned char *src, const int *rowptr, const int *spans,
                sg_warp_args args) {
	const sg_warp_args *p = &args;
	sg_warp w = {dst, src, p->dst_stride, p->src_stride, p->dw, p->dh, p->col0, p->row0, p->sw, p->sh, p->m, rowptr, spans, p->fill};
	const sg_warp *a = &w;
	int path = p->path == 1 ? 1 : sg_warp_best_path();
	// The vector path computes byte offsets in 32-bit lanes.
	if ((double)p->sh * (double)p->src_stride >= 2147483647.0) {
		path = 1;
	}
#if defined(__x86_64__) || defined(__i386__)
	if (path == 2) {
		sg_warp_avx2(a);
		return 2;
	}
#endif
	sg_warp_scalar(a);
	return 1;
}
