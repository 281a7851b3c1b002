// Small C wrapper around libvpx's VP8 codec for package vp8.
//
// It exists because cgo cannot call libvpx's macros (vpx_codec_dec_init,
// vpx_codec_enc_init) or its variadic vpx_codec_control, and so that every
// pointer libvpx keeps (codec context, input copy, raw image) lives in C
// memory that Go never has to pin.
#ifndef STOPGAP_VP8_VPXWRAP_H
#define STOPGAP_VP8_VPXWRAP_H

#include <stddef.h>
#include <stdint.h>
#include <vpx/vpx_image.h>

// sg_dec is one VP8 decoder: a libvpx context plus a reusable input buffer.
typedef struct sg_dec sg_dec;

// sg_dec_new allocates and initialises a decoder. On failure it returns NULL
// and stores the libvpx status in *res.
sg_dec *sg_dec_new(unsigned threads, int *res);

// sg_dec_reset destroys the libvpx context and creates a fresh one, dropping
// all reference frames. Returns a vpx_codec_err_t.
int sg_dec_reset(sg_dec *d);

// sg_dec_decode copies n bytes from data into the decoder's own buffer
// (followed by zero padding), decodes them, asks VP8D_GET_FRAME_CORRUPTED and
// fetches the output picture, if any. Returns a vpx_codec_err_t. The results
// are read with sg_dec_corrupt and sg_dec_image (kept in C memory so the
// per-frame call passes no Go pointers that would escape to the heap).
int sg_dec_decode(sg_dec *d, const uint8_t *data, size_t n);

// sg_dec_corrupt returns the VP8D_GET_FRAME_CORRUPTED flag of the last
// successful sg_dec_decode.
int sg_dec_corrupt(const sg_dec *d);

// sg_dec_image returns the picture of the last sg_dec_decode, or NULL (owned
// by libvpx, valid until the next decode, reset or free).
vpx_image_t *sg_dec_image(const sg_dec *d);

// sg_dec_error and sg_dec_error_detail return libvpx's last error strings
// (never NULL; owned by libvpx).
const char *sg_dec_error(sg_dec *d);
const char *sg_dec_error_detail(sg_dec *d);

// sg_dec_free destroys the context and frees everything. NULL is allowed.
void sg_dec_free(sg_dec *d);

// sg_enc_params carries the encoder settings chosen on the Go side.
typedef struct {
  unsigned width, height;
  unsigned bitrate_kbps;
  unsigned kf_max_dist;
  unsigned threads;
  unsigned token_partitions_log2;
  unsigned max_intra_pct;
  int cpu_used;
} sg_enc_params;

// sg_enc is one VP8 encoder: a libvpx context, its configuration and a raw
// I420 input image in C memory that Go fills before each sg_enc_encode.
typedef struct sg_enc sg_enc;

// sg_enc_new allocates and configures an encoder. On failure it returns NULL
// and stores the libvpx status in *res and a static description (a string
// literal) in *detail.
sg_enc *sg_enc_new(const sg_enc_params *p, int *res, const char **detail);

// sg_enc_image returns the raw input image Go must fill (owned by sg_enc).
vpx_image_t *sg_enc_image(sg_enc *e);

// sg_enc_encode encodes the raw image with the given pts and duration (in
// the encoder's 1/1000 s timebase); force_kf asks for a keyframe. Returns a
// vpx_codec_err_t. Output packets are then read with sg_enc_next.
int sg_enc_encode(sg_enc *e, int64_t pts, unsigned long duration, int force_kf);

// sg_enc_next moves to the next compressed frame packet of the last
// sg_enc_encode and returns 1, or returns 0 when there are no more. The
// packet is read with sg_enc_out_buf, sg_enc_out_size and sg_enc_out_key;
// its buffer is owned by libvpx and valid until the next encode call.
int sg_enc_next(sg_enc *e);
const void *sg_enc_out_buf(const sg_enc *e);
size_t sg_enc_out_size(const sg_enc *e);
int sg_enc_out_key(const sg_enc *e);

// sg_enc_set_bitrate changes the target bitrate. Returns a vpx_codec_err_t.
int sg_enc_set_bitrate(sg_enc *e, unsigned kbps);

// sg_enc_error and sg_enc_error_detail return libvpx's last error strings.
const char *sg_enc_error(sg_enc *e);
const char *sg_enc_error_detail(sg_enc *e);

// sg_enc_free destroys the context and frees everything. NULL is allowed.
void sg_enc_free(sg_enc *e);

// sg_malloc_in_use reports the bytes the C heap has handed out (glibc
// mallinfo2), for leak tests.
size_t sg_malloc_in_use(void);

#endif
