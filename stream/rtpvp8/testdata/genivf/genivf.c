/*
 * genivf writes the small real VP8 stream used by the rtpvp8 tests, encoded by
 * the system libvpx, plus a sidecar CSV of what libvpx itself says about each
 * frame (encoder flags and vpx_codec_peek_stream_info), which the tests use
 * as the reference for keyframe detection and frame-header parsing.
 *
 * It is not part of the Go build (testdata is ignored by the go tool).
 * Regenerate from stream/rtpvp8 with:
 *
 *   cc -O2 -o /tmp/genivf testdata/genivf/genivf.c -lvpx && /tmp/genivf testdata
 *
 * The picture content is our own: a moving gradient with a bright square.
 */
#include <stdio.h>
#include <stdlib.h>
#include <string.h>
#include <vpx/vpx_encoder.h>
#include <vpx/vpx_decoder.h>
#include <vpx/vp8cx.h>
#include <vpx/vp8dx.h>

enum { W = 96, H = 64, FRAMES = 12 };

static void put16(FILE *f, unsigned v) { fputc(v & 255, f); fputc((v >> 8) & 255, f); }
static void put32(FILE *f, unsigned v) { put16(f, v & 0xffff); put16(f, v >> 16); }
static void put64(FILE *f, unsigned long long v) { put32(f, (unsigned)v); put32(f, (unsigned)(v >> 32)); }

static void fill(vpx_image_t *img, int t) {
	for (int y = 0; y < H; y++)
		for (int x = 0; x < W; x++) {
			int v = (x * 2 + y + t * 5) & 255;
			if (x >= 10 + 4 * t && x < 26 + 4 * t && y >= 20 && y < 36) v = 235;
			img->planes[0][y * img->stride[0] + x] = (unsigned char)v;
		}
	for (int y = 0; y < H / 2; y++)
		for (int x = 0; x < W / 2; x++) {
			img->planes[1][y * img->stride[1] + x] = (unsigned char)(128 + x - y);
			img->planes[2][y * img->stride[2] + x] = (unsigned char)(128 - x + t);
		}
}

int main(int argc, char **argv) {
	const char *dir = argc > 1 ? argv[1] : ".";
	char path[512];
	vpx_codec_enc_cfg_t cfg;
	vpx_codec_ctx_t enc;
	vpx_image_t img;
	if (vpx_codec_enc_config_default(vpx_codec_vp8_cx(), &cfg, 0)) return 1;
	cfg.g_w = W; cfg.g_h = H; cfg.g_timebase.num = 1; cfg.g_timebase.den = 30;
	cfg.rc_target_bitrate = 400; cfg.g_lag_in_frames = 0; cfg.kf_mode = VPX_KF_DISABLED;
	cfg.g_error_resilient = 1;
	if (vpx_codec_enc_init(&enc, vpx_codec_vp8_cx(), &cfg, 0)) return 2;
	if (!vpx_img_alloc(&img, VPX_IMG_FMT_I420, W, H, 1)) return 3;

	snprintf(path, sizeof path, "%s/vp8-96x64.ivf", dir);
	FILE *ivf = fopen(path, "wb");
	snprintf(path, sizeof path, "%s/vp8-96x64.csv", dir);
	FILE *csv = fopen(path, "w");
	if (!ivf || !csv) return 4;
	fwrite("DKIF", 1, 4, ivf); put16(ivf, 0); put16(ivf, 32); fwrite("VP80", 1, 4, ivf);
	put16(ivf, W); put16(ivf, H); put32(ivf, 30); put32(ivf, 1); put32(ivf, FRAMES); put32(ivf, 0);
	fprintf(csv, "index,size,enc_key,peek_key,peek_w,peek_h\n");

	int n = 0;
	for (int t = 0; t < FRAMES; t++) {
		fill(&img, t);
		vpx_enc_frame_flags_t fl = (t == 0 || t == 7) ? VPX_EFLAG_FORCE_KF : 0;
		if (vpx_codec_encode(&enc, &img, t, 1, fl, VPX_DL_REALTIME)) return 5;
		vpx_codec_iter_t it = NULL;
		const vpx_codec_cx_pkt_t *p;
		while ((p = vpx_codec_get_cx_data(&enc, &it)) != NULL) {
			if (p->kind != VPX_CODEC_CX_FRAME_PKT) continue;
			put32(ivf, (unsigned)p->data.frame.sz); put64(ivf, (unsigned long long)p->data.frame.pts);
			fwrite(p->data.frame.buf, 1, p->data.frame.sz, ivf);
			vpx_codec_stream_info_t si;
			memset(&si, 0, sizeof si);
			si.sz = sizeof si;
			vpx_codec_err_t pe = vpx_codec_peek_stream_info(vpx_codec_vp8_dx(), p->data.frame.buf,
				(unsigned)p->data.frame.sz, &si);
			fprintf(csv, "%d,%u,%d,%d,%u,%u\n", n, (unsigned)p->data.frame.sz,
				(p->data.frame.flags & VPX_FRAME_IS_KEY) ? 1 : 0,
				pe == VPX_CODEC_OK ? si.is_kf : -1, si.w, si.h);
			n++;
		}
	}
	fclose(ivf); fclose(csv);
	vpx_img_free(&img);
	vpx_codec_destroy(&enc);
	return n == FRAMES ? 0 : 6;
}
