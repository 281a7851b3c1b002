// Package rtpvp8 turns RTP packets (RFC 3550) carrying VP8 (RFC 7741) into
// complete VP8 frames or explicit losses, and packetises frames for sending.
//
// It is written for a live relay on a lossy link, where a missing frame must
// be noticed quickly and named, never silently stalled on:
//
//   - [Descriptor] parses and writes the VP8 payload descriptor of RFC 7741
//     section 4.2 with strict bounds checks and typed errors.
//   - [ParseFrameHeader] reads the uncompressed VP8 frame header of RFC 6386
//     section 9.1 (keyframe flag, first partition size, picture size).
//   - [Assembler] buffers packets, tolerates bounded reordering, ignores
//     duplicates and padding, and hands complete frames and [Loss] events to a
//     [Sink] in stream order. After any loss it reports [Assembler.NeedKeyframe]
//     until a keyframe arrives, so the caller can send a picture loss
//     indication (RTCP PLI, RFC 4585).
//   - [Packetizer] splits VP8 frames into RTP packets with a picture ID.
//
// Units: RTP timestamps are in the clock rate of the payload format, 90 kHz
// for VP8 (RFC 7741 section 6.1). Times are [time.Time] values supplied by
// the caller (arrival times, the "now" of [Assembler.Expire]); the package
// never reads the wall clock, so deadlines are testable without sleeping.
//
// Nothing here uses cgo. Types are not safe for concurrent use unless stated.
package rtpvp8
