// See convert.h. The arithmetic is exactly that of the per-pixel reference
// in image_test.go (32-bit integers, arithmetic right shift, division
// rounded half away from zero); TestConversionsMatchReference checks it bit
// for bit. Each conversion is compiled twice from one body: for the
// baseline x86-64 (SSE2) and for AVX2, where GCC vectorises the per-pixel
// loops (interleaved BGR loads and stores included); the AVX2 build is used
// when the CPU has it (__builtin_cpu_supports), as in the predictor's warp
// kernel. Neither build may use FMA or other instructions that change
// results: the loops are integer-only, so both give the same bytes.
#include "convert.h"

#define HALF (1 << (SG_FIX_SHIFT - 1))
#define CHUNK 512 // pixels per pass of a row (the chroma terms' scratch)

#if defined(__x86_64__) || defined(__i386__)
#define SG_HAVE_AVX2_BUILD 1
#define SG_AVX2 __attribute__((target("avx2")))
#endif

#define INLINE static inline __attribute__((always_inline))

INLINE uint8_t clamp8(int32_t v) { return v < 0 ? 0 : v > 255 ? 255 : (uint8_t)v; }

INLINE int32_t div_round(int32_t num, int32_t den) {
  return num >= 0 ? (num + den / 2) / den : -((-num + den / 2) / den);
}

INLINE uint8_t luma(int32_t b, int32_t g, int32_t r) {
  return (uint8_t)((SG_Y_R * r + SG_Y_G * g + SG_Y_B * b + (16 << SG_FIX_SHIFT) + HALF) >> SG_FIX_SHIFT);
}

// luma_row converts n BGR pixels to luma.
INLINE void luma_row(const uint8_t *restrict p, int n, uint8_t *restrict y) {
  for (int x = 0; x < n; x++) y[x] = luma(p[3 * x], p[3 * x + 1], p[3 * x + 2]);
}

// chroma writes the U and V of a block whose n pixels sum to sb, sg, sr.
INLINE void chroma(int32_t sb, int32_t sg, int32_t sr, int32_t n, uint8_t *u, uint8_t *v) {
  int32_t den = n << SG_FIX_SHIFT;
  *u = (uint8_t)(div_round(SG_U_R * sr + SG_U_G * sg + SG_U_B * sb, den) + 128);
  *v = (uint8_t)(div_round(SG_V_R * sr + SG_V_G * sg + SG_V_B * sb, den) + 128);
}

// div4 is div_round(num, 4 << SG_FIX_SHIFT): the same rounding, written
// with shifts so the loop below vectorises.
INLINE int32_t div4(int32_t num) {
  const int32_t half = 2 << SG_FIX_SHIFT;
  int32_t a = num >= 0 ? num : -num;
  int32_t q = (a + half) >> (SG_FIX_SHIFT + 2);
  return num >= 0 ? q : -q;
}

// chroma_row4 writes the U and V of the n full 2x2 blocks of rows r0, r1.
INLINE void chroma_row4(const uint8_t *restrict r0, const uint8_t *restrict r1, int n,
                        uint8_t *restrict u, uint8_t *restrict v) {
  for (int cx = 0; cx < n; cx++) {
    const uint8_t *p = r0 + 6 * cx, *q = r1 + 6 * cx;
    int32_t sb = p[0] + p[3] + q[0] + q[3], sg = p[1] + p[4] + q[1] + q[4], sr = p[2] + p[5] + q[2] + q[5];
    u[cx] = (uint8_t)(div4(SG_U_R * sr + SG_U_G * sg + SG_U_B * sb) + 128);
    v[cx] = (uint8_t)(div4(SG_V_R * sr + SG_V_G * sg + SG_V_B * sb) + 128);
  }
}

INLINE void bgr_to_i420(const uint8_t *bgr, int w, int h, uint8_t *y, int ys,
                        uint8_t *u, uint8_t *v, int uvs) {
  const int cw = (w + 1) / 2, full = w / 2;
  for (int row = 0; row < h; row += 2) {
    const int rows = row + 1 < h ? 2 : 1;
    const uint8_t *r0 = bgr + (long)row * w * 3;
    const uint8_t *r1 = rows == 2 ? r0 + (long)w * 3 : r0;
    uint8_t *ur = u + (long)(row / 2) * uvs, *vr = v + (long)(row / 2) * uvs;
    luma_row(r0, w, y + (long)row * ys);
    if (rows == 2) luma_row(r1, w, y + (long)(row + 1) * ys);
    // Chroma: 2x2 block sums (the odd last column and row have fewer).
    if (rows == 2)
      chroma_row4(r0, r1, full, ur, vr);
    else
      for (int cx = 0; cx < full; cx++) {
        const uint8_t *p = r0 + 6 * cx;
        chroma(p[0] + p[3], p[1] + p[4], p[2] + p[5], 2, ur + cx, vr + cx);
      }
    if (full < cw) {
      const uint8_t *p = r0 + 6 * full, *q = r1 + 6 * full;
      int32_t sb = p[0], sg = p[1], sr = p[2], n = 1;
      if (rows == 2) sb += q[0], sg += q[1], sr += q[2], n = 2;
      chroma(sb, sg, sr, n, ur + full, vr + full);
    }
  }
}

// i420_row converts n pixels of one row starting at an even column x0.
INLINE void i420_row(const uint8_t *restrict yr, const uint8_t *restrict ur,
                     const uint8_t *restrict vr, int n, uint8_t *restrict o) {
  int32_t bd[CHUNK], gd[CHUNK], rd[CHUNK];
  for (int cx = 0; cx < (n + 1) / 2; cx++) {
    int32_t d = (int32_t)ur[cx] - 128, e = (int32_t)vr[cx] - 128;
    int32_t b = SG_CB_U * d + HALF, g = -SG_CG_U * d - SG_CG_V * e + HALF, r = SG_CR_V * e + HALF;
    bd[2 * cx] = b, bd[2 * cx + 1] = b;
    gd[2 * cx] = g, gd[2 * cx + 1] = g;
    rd[2 * cx] = r, rd[2 * cx + 1] = r;
  }
  for (int x = 0; x < n; x++) {
    int32_t c = ((int32_t)yr[x] - 16) * SG_C_Y;
    o[3 * x] = clamp8((c + bd[x]) >> SG_FIX_SHIFT);
    o[3 * x + 1] = clamp8((c + gd[x]) >> SG_FIX_SHIFT);
    o[3 * x + 2] = clamp8((c + rd[x]) >> SG_FIX_SHIFT);
  }
}

INLINE void i420_to_bgr(const uint8_t *y, int ys, const uint8_t *u,
                        const uint8_t *v, int uvs, int w, int h, uint8_t *bgr) {
  for (int row = 0; row < h; row++) {
    const uint8_t *yr = y + (long)row * ys;
    const uint8_t *ur = u + (long)(row / 2) * uvs, *vr = v + (long)(row / 2) * uvs;
    uint8_t *o = bgr + (long)row * w * 3;
    for (int x0 = 0; x0 < w; x0 += CHUNK) {
      int n = w - x0 < CHUNK ? w - x0 : CHUNK;
      i420_row(yr + x0, ur + x0 / 2, vr + x0 / 2, n, o + 3 * x0);
    }
  }
}

static void bgr_to_i420_base(const uint8_t *bgr, int w, int h, uint8_t *y, int ys,
                             uint8_t *u, uint8_t *v, int uvs) {
  bgr_to_i420(bgr, w, h, y, ys, u, v, uvs);
}

static void i420_to_bgr_base(const uint8_t *y, int ys, const uint8_t *u,
                             const uint8_t *v, int uvs, int w, int h, uint8_t *bgr) {
  i420_to_bgr(y, ys, u, v, uvs, w, h, bgr);
}

#ifdef SG_HAVE_AVX2_BUILD
static SG_AVX2 void bgr_to_i420_avx2(const uint8_t *bgr, int w, int h, uint8_t *y, int ys,
                                     uint8_t *u, uint8_t *v, int uvs) {
  bgr_to_i420(bgr, w, h, y, ys, u, v, uvs);
}

static SG_AVX2 void i420_to_bgr_avx2(const uint8_t *y, int ys, const uint8_t *u,
                                     const uint8_t *v, int uvs, int w, int h, uint8_t *bgr) {
  i420_to_bgr(y, ys, u, v, uvs, w, h, bgr);
}
#endif

int sg_convert_base_only = 0;

// have_avx2 reports whether the AVX2 builds may run here (and are not
// turned off by sg_convert_base_only).
static int have_avx2(void) {
#ifdef SG_HAVE_AVX2_BUILD
  return !sg_convert_base_only && __builtin_cpu_supports("avx2");
#else
  return 0;
#endif
}

void sg_bgr_to_i420(const uint8_t *bgr, int w, int h, uint8_t *y, int ys,
                    uint8_t *u, uint8_t *v, int uvs) {
#ifdef SG_HAVE_AVX2_BUILD
  if (have_avx2()) {
    bgr_to_i420_avx2(bgr, w, h, y, ys, u, v, uvs);
    return;
  }
#endif
  bgr_to_i420_base(bgr, w, h, y, ys, u, v, uvs);
}

void sg_i420_to_bgr(const uint8_t *y, int ys, const uint8_t *u,
                    const uint8_t *v, int uvs, int w, int h, uint8_t *bgr) {
#ifdef SG_HAVE_AVX2_BUILD
  if (have_avx2()) {
    i420_to_bgr_avx2(y, ys, u, v, uvs, w, h, bgr);
    return;
  }
#endif
  i420_to_bgr_base(y, ys, u, v, uvs, w, h, bgr);
}

int sg_convert_avx2(void) { return have_avx2(); }
