// BT.601 limited-range conversions between packed 8-bit BGR and I420 for
// package vp8 (see image.go for the formulas and their source). They are in
// C so the compiler can vectorise them: at 1280x720 each runs on every
// frame the relay encodes and on every real frame a gap needs as BGR.
#ifndef STOPGAP_VP8_CONVERT_H
#define STOPGAP_VP8_CONVERT_H

#include <stdint.h>

// Fixed-point coefficients scaled by 2^SG_FIX_SHIFT (the one definition;
// image.go names them for Go). Forward: Y, U, V from R, G, B. Inverse:
// R = cY (Y-16) + crV (V-128), G = cY (Y-16) - cgU (U-128) - cgV (V-128),
// B = cY (Y-16) + cbU (U-128).
#define SG_FIX_SHIFT 16
#define SG_Y_R 16829
#define SG_Y_G 33039
#define SG_Y_B 6416
#define SG_U_R (-9714)
#define SG_U_G (-19070)
#define SG_U_B 28784
#define SG_V_R 28784
#define SG_V_G (-24103)
#define SG_V_B (-4681)
#define SG_C_Y 76309
#define SG_CR_V 104597
#define SG_CG_U 25675
#define SG_CG_V 53279
#define SG_CB_U 132201

// sg_bgr_to_i420 converts w x h packed BGR pixels (rows w*3 bytes apart)
// into the planes y (rows ys apart), u and v (rows uvs apart). Chroma is
// the conversion of the average colour of each 2x2 block (fewer at odd
// edges), rounded to nearest.
void sg_bgr_to_i420(const uint8_t *bgr, int w, int h, uint8_t *y, int ys,
                    uint8_t *u, uint8_t *v, int uvs);

// sg_i420_to_bgr converts the planes into w x h packed BGR pixels (rows w*3
// bytes apart), chroma replicated over each 2x2 block.
void sg_i420_to_bgr(const uint8_t *y, int ys, const uint8_t *u,
                    const uint8_t *v, int uvs, int w, int h, uint8_t *bgr);

// sg_convert_avx2 reports whether the conversions use their AVX2 build.
int sg_convert_avx2(void);

// sg_convert_base_only, when non-zero, makes the conversions use their
// baseline build even on a CPU with AVX2 (for the tests of both builds).
extern int sg_convert_base_only;

#endif
