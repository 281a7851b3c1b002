// See vpxwrap.h.
#include "vpxwrap.h"

#include <malloc.h>
#include <stdlib.h>
#include <string.h>
#include <vpx/vp8cx.h>
#include <vpx/vp8dx.h>
#include <vpx/vpx_decoder.h>
#include <vpx/vpx_encoder.h>

// Zero bytes kept after every input frame, so that a small over-read inside
// libvpx stays in memory we own and reads zeros.
#define SG_PAD 64

struct sg_dec {
  vpx_codec_ctx_t ctx;
  int inited;
  unsigned threads;
  uint8_t *buf;
  size_t cap;
  int corrupt;
  vpx_image_t *img;
};

static const char *safe_str(const char *s) { return s ? s : ""; }

int sg_dec_reset(sg_dec *d) {
  d->img = NULL;
  d->corrupt = 0;
  if (d->inited) {
    vpx_codec_destroy(&d->ctx);
    d->inited = 0;
  }
  memset(&d->ctx, 0, sizeof d->ctx);
  vpx_codec_dec_cfg_t cfg;
  memset(&cfg, 0, sizeof cfg);
  cfg.threads = d->threads;
  vpx_codec_err_t e = vpx_codec_dec_init(&d->ctx, vpx_codec_vp8_dx(), &cfg, 0);
  if (e == VPX_CODEC_OK) d->inited = 1;
  return (int)e;
}

sg_dec *sg_dec_new(unsigned threads, int *res) {
  sg_dec *d = calloc(1, sizeof *d);
  if (!d) {
    *res = VPX_CODEC_MEM_ERROR;
    return NULL;
  }
  d->threads = threads;
  *res = sg_dec_reset(d);
  if (*res != VPX_CODEC_OK) {
    if (d->inited) vpx_codec_destroy(&d->ctx);
    free(d);
    return NULL;
  }
  return d;
}

int sg_dec_decode(sg_dec *d, const uint8_t *data, size_t n) {
  d->corrupt = 0;
  d->img = NULL;
  if (!d->inited) return VPX_CODEC_ERROR;
  if (n == 0 || n > 0x7fffffff) return VPX_CODEC_INVALID_PARAM;
  if (n + SG_PAD > d->cap) {
    size_t cap = n + SG_PAD;
    uint8_t *nb = realloc(d->buf, cap);
    if (!nb) return VPX_CODEC_MEM_ERROR;
    d->buf = nb;
    d->cap = cap;
  }
  memcpy(d->buf, data, n);
  memset(d->buf + n, 0, SG_PAD);
  vpx_codec_err_t e = vpx_codec_decode(&d->ctx, d->buf, (unsigned int)n, NULL, 0);
  if (e != VPX_CODEC_OK) return (int)e;
  int c = 0;
  e = vpx_codec_control(&d->ctx, VP8D_GET_FRAME_CORRUPTED, &c);
  if (e != VPX_CODEC_OK) return (int)e;
  d->corrupt = c;
  vpx_codec_iter_t it = NULL;
  d->img = vpx_codec_get_frame(&d->ctx, &it);
  return VPX_CODEC_OK;
}

int sg_dec_corrupt(const sg_dec *d) { return d->corrupt; }
vpx_image_t *sg_dec_image(const sg_dec *d) { return d->img; }

// After a failed (re)initialisation libvpx may leave err_detail pointing at
// freed memory, so the strings are only read from a live context.
const char *sg_dec_error(sg_dec *d) {
  if (!d->inited) return "decoder context not initialised";
  return safe_str(vpx_codec_error(&d->ctx));
}
const char *sg_dec_error_detail(sg_dec *d) {
  if (!d->inited) return "";
  return safe_str(vpx_codec_error_detail(&d->ctx));
}

void sg_dec_free(sg_dec *d) {
  if (!d) return;
  if (d->inited) vpx_codec_destroy(&d->ctx);
  free(d->buf);
  free(d);
}

struct sg_enc {
  vpx_codec_ctx_t ctx;
  vpx_codec_enc_cfg_t cfg;
  vpx_image_t *img;
  vpx_codec_iter_t iter;
  int inited;
  const void *out_buf;
  size_t out_size;
  int out_key;
};

sg_enc *sg_enc_new(const sg_enc_params *p, int *res, const char **detail) {
  *detail = "";
  sg_enc *e = calloc(1, sizeof *e);
  if (!e) {
    *res = VPX_CODEC_MEM_ERROR;
    return NULL;
  }
  vpx_codec_err_t r = vpx_codec_enc_config_default(vpx_codec_vp8_cx(), &e->cfg, 0);
  if (r != VPX_CODEC_OK) {
    *res = r;
    *detail = "vpx_codec_enc_config_default failed";
    free(e);
    return NULL;
  }
  vpx_codec_enc_cfg_t *c = &e->cfg;
  c->g_w = p->width;
  c->g_h = p->height;
  c->g_threads = p->threads;
  c->g_timebase.num = 1;
  c->g_timebase.den = 1000;
  c->g_pass = VPX_RC_ONE_PASS;
  c->g_lag_in_frames = 0;
  c->g_error_resilient = VPX_ERROR_RESILIENT_DEFAULT;
  c->rc_end_usage = VPX_CBR;
  c->rc_target_bitrate = p->bitrate_kbps;
  c->rc_min_quantizer = 2;
  c->rc_max_quantizer = 56;
  c->rc_undershoot_pct = 100;
  c->rc_overshoot_pct = 15;
  c->rc_buf_initial_sz = 500;
  c->rc_buf_optimal_sz = 600;
  c->rc_buf_sz = 1000;
  c->rc_dropframe_thresh = 0;
  c->rc_resize_allowed = 0;
  c->kf_mode = VPX_KF_AUTO;
  c->kf_min_dist = 0;
  c->kf_max_dist = p->kf_max_dist;

  r = vpx_codec_enc_init(&e->ctx, vpx_codec_vp8_cx(), c, 0);
  if (r != VPX_CODEC_OK) {
    // The detail string may point into memory libvpx freed on the failed
    // init, so only the static name of the status is reported.
    *res = r;
    *detail = "vpx_codec_enc_init rejected the configuration";
    free(e);
    return NULL;
  }
  e->inited = 1;
#define SG_CTRL(id, val)                                  \
  do {                                                    \
    r = vpx_codec_control(&e->ctx, id, val);              \
    if (r != VPX_CODEC_OK) {                              \
      *res = r;                                           \
      *detail = "vpx_codec_control " #id " failed";       \
      sg_enc_free(e);                                     \
      return NULL;                                        \
    }                                                     \
  } while (0)
  SG_CTRL(VP8E_SET_CPUUSED, p->cpu_used);
  SG_CTRL(VP8E_SET_NOISE_SENSITIVITY, 0u);
  SG_CTRL(VP8E_SET_STATIC_THRESHOLD, 1u);
  SG_CTRL(VP8E_SET_TOKEN_PARTITIONS, (int)p->token_partitions_log2);
  SG_CTRL(VP8E_SET_MAX_INTRA_BITRATE_PCT, p->max_intra_pct);
#undef SG_CTRL

  e->img = vpx_img_alloc(NULL, VPX_IMG_FMT_I420, p->width, p->height, 32);
  if (!e->img) {
    *res = VPX_CODEC_MEM_ERROR;
    *detail = "vpx_img_alloc failed";
    sg_enc_free(e);
    return NULL;
  }
  *res = VPX_CODEC_OK;
  return e;
}

vpx_image_t *sg_enc_image(sg_enc *e) { return e->img; }

int sg_enc_encode(sg_enc *e, int64_t pts, unsigned long duration, int force_kf) {
  e->iter = NULL;
  vpx_enc_frame_flags_t flags = force_kf ? VPX_EFLAG_FORCE_KF : 0;
  return (int)vpx_codec_encode(&e->ctx, e->img, pts, duration, flags, VPX_DL_REALTIME);
}

int sg_enc_next(sg_enc *e) {
  const vpx_codec_cx_pkt_t *pkt;
  e->out_buf = NULL;
  e->out_size = 0;
  e->out_key = 0;
  while ((pkt = vpx_codec_get_cx_data(&e->ctx, &e->iter)) != NULL) {
    if (pkt->kind != VPX_CODEC_CX_FRAME_PKT) continue;
    e->out_buf = pkt->data.frame.buf;
    e->out_size = pkt->data.frame.sz;
    e->out_key = (pkt->data.frame.flags & VPX_FRAME_IS_KEY) != 0;
    return 1;
  }
  return 0;
}

const void *sg_enc_out_buf(const sg_enc *e) { return e->out_buf; }
size_t sg_enc_out_size(const sg_enc *e) { return e->out_size; }
int sg_enc_out_key(const sg_enc *e) { return e->out_key; }

int sg_enc_set_bitrate(sg_enc *e, unsigned kbps) {
  e->cfg.rc_target_bitrate = kbps;
  return (int)vpx_codec_enc_config_set(&e->ctx, &e->cfg);
}

const char *sg_enc_error(sg_enc *e) { return safe_str(vpx_codec_error(&e->ctx)); }
const char *sg_enc_error_detail(sg_enc *e) {
  return safe_str(vpx_codec_error_detail(&e->ctx));
}

void sg_enc_free(sg_enc *e) {
  if (!e) return;
  if (e->inited) vpx_codec_destroy(&e->ctx);
  if (e->img) vpx_img_free(e->img);
  free(e);
}

size_t sg_malloc_in_use(void) {
  struct mallinfo2 mi = mallinfo2();
  return mi.uordblks + mi.hblkhd;
}
