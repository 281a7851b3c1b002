// Package vp8 encodes and decodes VP8 video (RFC 6386) with libvpx through a
// small cgo wrapper, for a live relay fed by a lossy link.
//
// # Decoding on a lossy link
//
// Decoder never panics on bad input: empty, short or truncated frames,
// corrupt bitstreams, oversized pictures and size changes all come back as
// error values (errors.go). libvpx itself is not trusted to notice all
// damage: after every successful decode the wrapper asks
// VP8D_GET_FRAME_CORRUPTED and reports a flagged picture as a *CodecError
// wrapping ErrCorrupt. Still, libvpx accepts some damaged frames without
// any sign, and VP8 frames carry no sequence number, so the caller must
// report losses it sees at the transport (RTP sequence gaps) with
// Decoder.Lost.
//
// After any failure or loss the decoder waits for a keyframe: inter frames
// are rejected with ErrNeedKeyframe, NeedKeyframe reports true, and the
// caller should send a keyframe request (RTCP PLI) at once and repeat it
// while waiting. A keyframe is recognised from its payload header (RFC 6386
// section 9.1: bit 0 of the first byte is 0, then the start code 9d 01 2a
// and 14-bit width and height); see ParseHeader and IsKeyframe.
//
// # Encoding in real time
//
// Encoder is set up for live, low-latency use: VPX_DL_REALTIME, one-pass
// CBR, no look-ahead (one picture in gives its frame out at once),
// error-resilient entropy coding, a capped keyframe size and a maximum
// keyframe interval, with ForceKeyframe for keyframe requests.
// EncoderConfig documents each setting and why.
//
// # Pictures and buffers
//
// Image is an I420 picture (BT.601 limited range, as VP8 uses). Decode
// copies the decoded picture into a caller-owned Image; Encode appends the
// compressed frame to a caller-owned slice. Per-frame calls do not allocate
// once the caller's buffers have the right size. I420ToBGR and BGRToI420
// convert to and from packed BGR bytes, the layout an OpenCV CV_8UC3 Mat
// wraps.
//
// # Memory
//
// Input frames are copied into C memory before libvpx reads them (followed
// by zero padding), so libvpx never holds Go memory. Close frees all C
// memory; there is no finalizer, so every Decoder and Encoder must be
// closed.
package vp8
