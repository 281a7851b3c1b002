package vp8

// #include "vpxwrap.h"
import "C"

import (
	"fmt"
	"math"
	"sync"
	"sync/atomic"
	"unsafe"
)

// Default values of EncoderConfig.
const (
	// DefaultBitrateBps is the target bitrate when EncoderConfig.BitrateBps
	// is 0: 1 Mbit/s, a usable 720p30 real-time rate for VP8 (common
	// practice).
	DefaultBitrateBps = 1_000_000
	// DefaultFrameRateHz is the nominal frame rate when
	// EncoderConfig.FrameRateHz is 0.
	DefaultFrameRateHz = 30
	// DefaultKeyframeInterval is the longest run of frames between
	// keyframes when EncoderConfig.KeyframeInterval is 0: 150 frames,
	// 5 s at 30 fps, so a receiver that missed a PLI still recovers.
	DefaultKeyframeInterval = 150
	// DefaultCPUUsed is the libvpx speed level when EncoderConfig.CPUUsed
	// is 0. Chosen with BenchmarkEncode720p (libvpx 1.12, 2.5 Mbit/s,
	// generated content, CPU time per frame): speed 6: 8.2-8.8 ms,
	// 40.2 dB; 8: 7.3-8.1 ms, 39.2 dB; 12: 6.7 ms, 39.0 dB; 16: 6.2-6.9
	// ms, 37.8 dB. 12 is nearly as good as 8 and faster; 16 loses 1.2 dB
	// for little time.
	DefaultCPUUsed = 12
)

// EncoderConfig holds Encoder settings. Width and Height are required; zero
// values of the other fields select the documented defaults.
//
// Fixed real-time settings and why (see also the package doc):
//   - deadline VPX_DL_REALTIME and one pass CBR (rc_end_usage VPX_CBR):
//     every frame is encoded as it arrives at a steady rate for the link.
//   - g_lag_in_frames 0: no look-ahead, so one frame in gives the frame out
//     at once (no added latency, no hidden alt-ref frames).
//   - g_error_resilient VPX_ERROR_RESILIENT_DEFAULT: entropy contexts are
//     not carried from frame to frame, so a lost frame that no later frame
//     references does not break decoding. Costs a few percent of bitrate
//     (common practice). Lost reference frames still need a keyframe.
//   - rc_dropframe_thresh 0: the encoder never skips a frame on its own;
//     the relay decides what to send.
//   - quantizer 2..56, undershoot 100 %, overshoot 15 %, buffer
//     500/600/1000 ms: values used by WebRTC senders (from memory).
//   - VP8E_SET_MAX_INTRA_BITRATE_PCT = 0.5 x 600 ms x fps / 10 (at least
//     300 %): caps keyframe size so a PLI does not flood the link; formula
//     used by WebRTC senders (from memory).
//   - VP8E_SET_STATIC_THRESHOLD 1, VP8E_SET_NOISE_SENSITIVITY 0: skip
//     coding of unchanged blocks, no temporal denoiser (costs CPU).
//   - kf_mode VPX_KF_AUTO with kf_max_dist = KeyframeInterval.
//   - timebase 1/1000 s: pts are milliseconds since the first frame, which
//     cannot overflow libvpx's internal 10 MHz timestamps.
type EncoderConfig struct {
	// Width and Height are the picture size in pixels (1..16383). Every
	// input must have this size.
	Width, Height int
	// BitrateBps is the target bitrate in bits per second. 0 means
	// DefaultBitrateBps.
	BitrateBps int
	// FrameRateHz is the nominal frame rate in frames per second, used for
	// the duration of the first frame and the keyframe size cap. 0 means
	// DefaultFrameRateHz.
	FrameRateHz float64
	// KeyframeInterval is the largest number of frames between two
	// keyframes (kf_max_dist). 0 means DefaultKeyframeInterval.
	KeyframeInterval int
	// CPUUsed is libvpx's speed level 1..16 (VP8E_SET_CPUUSED): higher is
	// faster and lower quality. The encoder passes -CPUUsed, which
	// libvpx's real-time mode takes as a fixed level rather than a
	// starting point for automatic speed changes (from memory), so frame
	// times stay predictable. 0 means DefaultCPUUsed.
	CPUUsed int
	// Threads is the number of libvpx encoder threads; more than one also
	// splits the tokens into that many partitions (rounded down to a power
	// of two, at most 8). 0 means 1.
	Threads int
}

func (c EncoderConfig) withDefaults() (EncoderConfig, error) {
	if c.BitrateBps == 0 {
		c.BitrateBps = DefaultBitrateBps
	}
	if c.FrameRateHz == 0 {
		c.FrameRateHz = DefaultFrameRateHz
	}
	if c.KeyframeInterval == 0 {
		c.KeyframeInterval = DefaultKeyframeInterval
	}
	if c.CPUUsed == 0 {
		c.CPUUsed = DefaultCPUUsed
	}
	if c.Threads == 0 {
		c.Threads = 1
	}
	switch {
	case c.Width < 1 || c.Width > maxDimension || c.Height < 1 || c.Height > maxDimension:
		return c, fmt.Errorf("%w: size %dx%d, want 1..%d on each side", ErrConfig, c.Width, c.Height, maxDimension)
	case c.BitrateBps < 1000 || c.BitrateBps > 1_000_000_000:
		return c, fmt.Errorf("%w: BitrateBps %d, want 1000..1e9", ErrConfig, c.BitrateBps)
	case math.IsNaN(c.FrameRateHz) || c.FrameRateHz < 1 || c.FrameRateHz > 1000:
		return c, fmt.Errorf("%w: FrameRateHz %v, want 1..1000", ErrConfig, c.FrameRateHz)
	case c.KeyframeInterval < 1 || c.KeyframeInterval > 1<<20:
		return c, fmt.Errorf("%w: KeyframeInterval %d, want 1..%d", ErrConfig, c.KeyframeInterval, 1<<20)
	case c.CPUUsed < 1 || c.CPUUsed > 16:
		return c, fmt.Errorf("%w: CPUUsed %d, want 1..16", ErrConfig, c.CPUUsed)
	case c.Threads < 1 || c.Threads > 64:
		return c, fmt.Errorf("%w: Threads %d, want 1..64", ErrConfig, c.Threads)
	}
	return c, nil
}

// Encoder is a real-time VP8 encoder (settings in EncoderConfig). One input
// picture gives at most one compressed frame, at once.
//
// Methods are safe for concurrent use: Encode calls are serialised, and
// ForceKeyframe may be called from the goroutine that reads RTCP.
type Encoder struct {
	mu       sync.Mutex
	c        *C.sg_enc
	cfg      EncoderConfig
	forceKey atomic.Bool
	started  bool
	firstUs  int64 // pts of the first frame, microseconds
	lastUs   int64 // pts of the previous frame, microseconds
	lastMs   int64 // libvpx pts of the previous frame, milliseconds
}

// NewEncoder returns an Encoder. Call Close to free its C memory.
func NewEncoder(cfg EncoderConfig) (*Encoder, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	parts := 0
	for parts < 3 && 1<<(parts+1) <= cfg.Threads {
		parts++
	}
	intra := int(0.5 * 600 * cfg.FrameRateHz / 10)
	if intra < 300 {
		intra = 300
	}
	p := C.sg_enc_params{
		width:                 C.uint(cfg.Width),
		height:                C.uint(cfg.Height),
		bitrate_kbps:          C.uint(kbps(cfg.BitrateBps)),
		kf_max_dist:           C.uint(cfg.KeyframeInterval),
		threads:               C.uint(cfg.Threads),
		token_partitions_log2: C.uint(parts),
		max_intra_pct:         C.uint(intra),
		cpu_used:              C.int(-cfg.CPUUsed),
	}
	var res C.int
	var detail *C.char
	c := C.sg_enc_new(&p, &res, &detail)
	if c == nil {
		return nil, &CodecError{Op: "init", Code: int(res), Message: vpxErrorString(res), Detail: C.GoString(detail), Keyframe: true, Err: ErrCodec}
	}
	return &Encoder{c: c, cfg: cfg}, nil
}

// kbps converts bits per second to libvpx's kilobits per second, rounded,
// at least 1.
func kbps(bps int) int {
	k := (bps + 500) / 1000
	if k < 1 {
		k = 1
	}
	return k
}

// Config returns the settings in use, defaults filled in.
func (e *Encoder) Config() EncoderConfig {
	e.mu.Lock()
	defer e.mu.Unlock()
	return e.cfg
}

// ForceKeyframe makes the next Encode produce a keyframe, as a response to
// a keyframe request (RTCP PLI or FIR). Safe to call from any goroutine.
func (e *Encoder) ForceKeyframe() { e.forceKey.Store(true) }

// SetBitrate changes the target bitrate (bits per second, 1000..1e9) from
// the next frame on, for congestion control.
func (e *Encoder) SetBitrate(bps int) error {
	if bps < 1000 || bps > 1_000_000_000 {
		return fmt.Errorf("%w: bitrate %d bps, want 1000..1e9", ErrConfig, bps)
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.c == nil {
		return ErrClosed
	}
	if code := C.sg_enc_set_bitrate(e.c, C.uint(kbps(bps))); code != 0 {
		return e.codecError("set bitrate", code, false)
	}
	e.cfg.BitrateBps = bps
	return nil
}

// Encode encodes one I420 picture of the configured size taken at ptsUs
// (microseconds on any clock that increases; it only steers rate control)
// and appends the compressed frame to dst[:0], returning the extended slice
// (so the caller owns it; pass the previous result to reuse its storage
// without allocating). keyframe tells whether it is a keyframe.
//
// An empty frame with a nil error would mean libvpx skipped the picture;
// with the fixed settings (frame dropping off, no look-ahead) it does not
// happen. On error nothing is appended and the next frame is forced to be a
// keyframe, so a receiver never depends on a frame that was not produced.
func (e *Encoder) Encode(dst []byte, src *Image, ptsUs int64) (frame []byte, keyframe bool, err error) {
	if err := src.Validate(); err != nil {
		return dst[:0], false, fmt.Errorf("%w (encoder input)", err)
	}
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.c == nil {
		return dst[:0], false, ErrClosed
	}
	if src.Width != e.cfg.Width || src.Height != e.cfg.Height {
		return dst[:0], false, fmt.Errorf("%w: picture is %dx%d, encoder is %dx%d", ErrImageSize, src.Width, src.Height, e.cfg.Width, e.cfg.Height)
	}
	view := e.inputView()
	copyImage(&view, src)
	return e.encode(dst, ptsUs)
}

// EncodeBGR is Encode for a packed 8-bit BGR picture (3 bytes per pixel,
// rows Width*3 bytes apart) of the configured size, converted to I420 with
// BGRToI420's BT.601 conversion straight into the encoder's input buffer.
func (e *Encoder) EncodeBGR(dst []byte, bgr []byte, ptsUs int64) (frame []byte, keyframe bool, err error) {
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.c == nil {
		return dst[:0], false, ErrClosed
	}
	if n := e.cfg.Width * e.cfg.Height * 3; len(bgr) != n {
		return dst[:0], false, fmt.Errorf("%w: BGR buffer has %d bytes, %dx%d needs %d", ErrImageSize, len(bgr), e.cfg.Width, e.cfg.Height, n)
	}
	view := e.inputView()
	bgrToI420(&view, bgr)
	return e.encode(dst, ptsUs)
}

// inputView returns the encoder's C input image as an Image (aliasing C
// memory owned by the encoder; valid while e.c is open and e.mu held).
func (e *Encoder) inputView() Image {
	return cImageView(C.sg_enc_image(e.c))
}

func (e *Encoder) encode(dst []byte, ptsUs int64) ([]byte, bool, error) {
	dst = dst[:0]
	if e.started && ptsUs <= e.lastUs {
		return dst, false, fmt.Errorf("%w: pts %d us after %d us: pass a monotonic clock", ErrTimestamp, ptsUs, e.lastUs)
	}
	var ms, dur int64
	if !e.started {
		e.firstUs = ptsUs
		dur = int64(math.Round(1000 / e.cfg.FrameRateHz))
	} else {
		ms = (ptsUs - e.firstUs) / 1000
		if ms <= e.lastMs {
			ms = e.lastMs + 1 // frames under 1 ms apart: keep libvpx pts increasing
		}
		dur = ms - e.lastMs
	}
	if dur < 1 {
		dur = 1
	}
	force := e.forceKey.Swap(false)
	f := C.int(0)
	if force {
		f = 1
	}
	if code := C.sg_enc_encode(e.c, C.int64_t(ms), C.ulong(dur), f); code != 0 {
		e.forceKey.Store(true)
		return dst, false, e.codecError("encode", code, force)
	}
	e.started, e.lastUs, e.lastMs = true, ptsUs, ms
	key := false
	n := 0
	for C.sg_enc_next(e.c) == 1 {
		n++
		if n > 1 {
			e.forceKey.Store(true)
			return dst[:0], false, &CodecError{Op: "encode", Message: "several frames", Detail: "libvpx produced more than one frame for one picture", Err: ErrCodec}
		}
		size := int(C.sg_enc_out_size(e.c))
		if size > 0 {
			dst = append(dst, unsafe.Slice((*byte)(C.sg_enc_out_buf(e.c)), size)...)
		}
		key = C.sg_enc_out_key(e.c) != 0
	}
	return dst, key, nil
}

func (e *Encoder) codecError(op string, code C.int, key bool) error {
	return &CodecError{Op: op, Code: int(code), Message: vpxErrorString(code),
		Detail: C.GoString(C.sg_enc_error_detail(e.c)), Keyframe: key, Err: ErrCodec}
}

// Close frees the encoder's C memory. Later calls return ErrClosed. Close is
// idempotent and returns nil.
func (e *Encoder) Close() error {
	e.mu.Lock()
	defer e.mu.Unlock()
	if e.c != nil {
		C.sg_enc_free(e.c)
		e.c = nil
	}
	return nil
}
