package vp8

// #include "vpxwrap.h"
// #include <vpx/vpx_image.h>
import "C"

import (
	"fmt"
	"sync"
	"unsafe"
)

// Default limits of DecoderConfig.
const (
	// DefaultMaxWidth and DefaultMaxHeight bound the picture size a
	// keyframe may declare, so a corrupt or hostile 16383x16383 keyframe
	// cannot make libvpx allocate about 1.6 GB of frame buffers
	// (estimate: 4 buffers of 16383 x 16383 x 1.5 bytes).
	DefaultMaxWidth  = 4096
	DefaultMaxHeight = 4096
	// DefaultMaxFrameBytes bounds the size of one compressed frame.
	DefaultMaxFrameBytes = 8 << 20
)

// DecoderConfig holds Decoder settings. The zero value works: defaults are
// applied to zero fields.
type DecoderConfig struct {
	// MaxWidth and MaxHeight are the largest picture size accepted, in
	// pixels; larger keyframes fail with ErrSizeTooLarge. 0 means
	// DefaultMaxWidth/DefaultMaxHeight; at most 16383 (the format's
	// limit).
	MaxWidth, MaxHeight int
	// MaxFrameBytes is the largest compressed frame accepted, in bytes.
	// 0 means DefaultMaxFrameBytes.
	MaxFrameBytes int
	// AllowSizeChange lets a keyframe change the picture size. When false
	// (the default) the first decoded keyframe locks the size and later
	// keyframes of another size fail with ErrSizeChanged, because the
	// consumers of this decoder (camera model, frame buffers) are built
	// for one size.
	AllowSizeChange bool
	// Threads is the number of libvpx decoder threads. 0 means 1.
	Threads int
}

func (c DecoderConfig) withDefaults() (DecoderConfig, error) {
	if c.MaxWidth == 0 {
		c.MaxWidth = DefaultMaxWidth
	}
	if c.MaxHeight == 0 {
		c.MaxHeight = DefaultMaxHeight
	}
	if c.MaxFrameBytes == 0 {
		c.MaxFrameBytes = DefaultMaxFrameBytes
	}
	if c.Threads == 0 {
		c.Threads = 1
	}
	switch {
	case c.MaxWidth < 1 || c.MaxWidth > maxDimension || c.MaxHeight < 1 || c.MaxHeight > maxDimension:
		return c, fmt.Errorf("%w: MaxWidth/MaxHeight %dx%d, want 1..%d", ErrConfig, c.MaxWidth, c.MaxHeight, maxDimension)
	case c.MaxFrameBytes < 1 || c.MaxFrameBytes > 1<<30:
		return c, fmt.Errorf("%w: MaxFrameBytes %d, want 1..%d", ErrConfig, c.MaxFrameBytes, 1<<30)
	case c.Threads < 1 || c.Threads > 64:
		return c, fmt.Errorf("%w: Threads %d, want 1..64", ErrConfig, c.Threads)
	}
	return c, nil
}

// Decoder decodes a VP8 stream received over a lossy link. Every failure is
// an error value; none panics.
//
// The decoder starts waiting for a keyframe. While waiting, inter frames are
// rejected with ErrNeedKeyframe without reaching libvpx. Any failed Decode
// (bad header, truncation, libvpx error, picture flagged corrupt by
// VP8D_GET_FRAME_CORRUPTED, size problems) and any call to Lost puts it back
// into that state, because the reference frames can no longer be trusted.
// The first keyframe that decodes cleanly ends the wait. After a libvpx
// error or a corrupt picture the libvpx context is recreated before the
// next keyframe, so no damaged state survives into the new picture.
//
// Methods are safe for concurrent use (a mutex serialises them), so Close
// or Lost may be called from another goroutine; decoding itself is
// sequential by nature.
type Decoder struct {
	mu       sync.Mutex
	c        *C.sg_dec
	cfg      DecoderConfig
	needKey  bool
	dirty    bool // libvpx context may hold damaged state: recreate before next keyframe
	width    int  // locked size, 0 before the first keyframe
	height   int
	lastType FrameType
}

// NewDecoder returns a Decoder with the default DecoderConfig.
func NewDecoder() (*Decoder, error) { return NewDecoderConfig(DecoderConfig{}) }

// NewDecoderConfig returns a Decoder with the given settings. Call Close to
// free its C memory.
func NewDecoderConfig(cfg DecoderConfig) (*Decoder, error) {
	cfg, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	var res C.int
	c := C.sg_dec_new(C.uint(cfg.Threads), &res)
	if c == nil {
		return nil, &CodecError{Op: "init", Code: int(res), Message: vpxErrorString(res), Err: ErrCodec}
	}
	return &Decoder{c: c, cfg: cfg, needKey: true}, nil
}

// NeedKeyframe reports whether the decoder is waiting for a keyframe and
// will reject inter frames. While it is true the caller should keep asking
// the sender for one (RTCP PLI).
func (d *Decoder) NeedKeyframe() bool {
	d.mu.Lock()
	defer d.mu.Unlock()
	return d.needKey
}

// Lost tells the decoder that at least one frame of the stream was lost
// (for example an RTP sequence gap). The decoder then waits for a keyframe.
func (d *Decoder) Lost() {
	d.mu.Lock()
	d.needKey = true
	d.mu.Unlock()
}

// Size returns the picture size locked by the first keyframe (the latest
// one with AllowSizeChange), or 0, 0 before any keyframe decoded.
func (d *Decoder) Size() (width, height int) {
	d.mu.Lock()
	defer d.mu.Unlock()
	return d.width, d.height
}

// Decode decodes one complete VP8 frame and copies the picture into dst,
// resizing dst if needed (it does not allocate when dst already has the
// size). frame is only read during the call: it is copied into C memory
// before libvpx sees it. dst is owned by the caller; the decoder keeps no
// reference to it.
//
// On any error dst is left unchanged (it is written only after every check
// passed), so the caller can keep showing, or predicting from, the last
// good picture. The errors are described in errors.go; all but ErrClosed
// and ErrNotShown leave the decoder waiting for a keyframe.
func (d *Decoder) Decode(frame []byte, dst *Image) error {
	d.mu.Lock()
	defer d.mu.Unlock()
	if d.c == nil {
		return ErrClosed
	}
	err := d.decode(frame, dst)
	if err != nil && err != ErrNotShown {
		d.needKey = true
	}
	return err
}

func (d *Decoder) decode(frame []byte, dst *Image) error {
	d.lastType = FrameTypeInvalid
	if dst == nil {
		return fmt.Errorf("%w: Decode needs an *Image to decode into", ErrNilImage)
	}
	if len(frame) > d.cfg.MaxFrameBytes {
		return fmt.Errorf("%w: %d bytes, limit %d (DecoderConfig.MaxFrameBytes)", ErrFrameTooLarge, len(frame), d.cfg.MaxFrameBytes)
	}
	h, err := ParseHeader(frame)
	if err != nil {
		return fmt.Errorf("%w; dropping inter frames until a keyframe decodes: request one (PLI)", err)
	}
	d.lastType = h.Type
	key := h.Type == FrameTypeKey
	if !key && d.needKey {
		return ErrNeedKeyframe
	}
	if key {
		if h.Width > d.cfg.MaxWidth || h.Height > d.cfg.MaxHeight {
			return &SizeError{Width: h.Width, Height: h.Height, WantWidth: d.cfg.MaxWidth, WantHeight: d.cfg.MaxHeight, Err: ErrSizeTooLarge}
		}
		if d.width != 0 && !d.cfg.AllowSizeChange && (h.Width != d.width || h.Height != d.height) {
			return &SizeError{Width: h.Width, Height: h.Height, WantWidth: d.width, WantHeight: d.height, Err: ErrSizeChanged}
		}
		if d.dirty {
			if code := C.sg_dec_reset(d.c); code != 0 {
				return d.codecError(code, key, ErrCodec)
			}
			d.dirty = false
		}
	}

	code := C.sg_dec_decode(d.c, (*C.uint8_t)(unsafe.Pointer(&frame[0])), C.size_t(len(frame)))
	if code != 0 {
		d.dirty = true
		return d.codecError(code, key, ErrCodec)
	}
	if C.sg_dec_corrupt(d.c) != 0 {
		d.dirty = true
		return d.codecError(0, key, ErrCorrupt)
	}
	img := C.sg_dec_image(d.c)
	if img == nil {
		if !h.ShowFrame {
			if key {
				d.needKey = false
				d.width, d.height = h.Width, h.Height
			}
			return ErrNotShown
		}
		d.dirty = true
		return &CodecError{Op: "decode", Keyframe: key, Message: "no picture", Detail: "libvpx returned no picture for a frame marked for display", Err: ErrCodec}
	}
	if img.fmt != C.VPX_IMG_FMT_I420 {
		d.dirty = true
		return &CodecError{Op: "decode", Keyframe: key, Message: "unexpected format", Detail: fmt.Sprintf("picture format %d, want I420", int(img.fmt)), Err: ErrCodec}
	}
	view := cImageView(img)
	wantW, wantH := d.width, d.height
	if key {
		wantW, wantH = h.Width, h.Height
	}
	if view.Width != wantW || view.Height != wantH {
		d.dirty = true
		return fmt.Errorf("%w: libvpx returned %dx%d, stream is %dx%d", ErrImageSize, view.Width, view.Height, wantW, wantH)
	}
	if err := view.Validate(); err != nil {
		d.dirty = true
		return fmt.Errorf("vp8: decode: libvpx picture: %w", err)
	}
	if err := dst.Resize(view.Width, view.Height); err != nil {
		return err
	}
	copyImage(dst, &view)
	if key {
		d.needKey = false
		d.width, d.height = h.Width, h.Height
	}
	return nil
}

// LastFrameType returns the type of the frame given to the latest Decode
// call, or FrameTypeInvalid if its header did not parse.
func (d *Decoder) LastFrameType() FrameType {
	d.mu.Lock()
	defer d.mu.Unlock()
	return d.lastType
}

func (d *Decoder) codecError(code C.int, key bool, kind error) error {
	e := &CodecError{Op: "decode", Code: int(code), Keyframe: key, Err: kind}
	if code != 0 {
		e.Message = vpxErrorString(code)
		e.Detail = C.GoString(C.sg_dec_error_detail(d.c))
	}
	return e
}

// Close frees the decoder's C memory. Later calls return ErrClosed. Close
// is idempotent and returns nil.
func (d *Decoder) Close() error {
	d.mu.Lock()
	defer d.mu.Unlock()
	if d.c != nil {
		C.sg_dec_free(d.c)
		d.c = nil
	}
	return nil
}
