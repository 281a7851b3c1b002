// Package vp8splice joins two sources of VP8 frames into one continuous RTP
// stream (RFC 3550, RFC 7741) for a receiver: frames forwarded from a sender
// packet by packet, and frames a relay encoded itself.
//
// A relay that passes the vehicle's live video through untouched, and
// switches to its own encoder when a frame must be predicted or marked stale,
// sends the console's decoder frames from two encoders. The decoder must
// still see one stream: sequence numbers that run on without a jump,
// timestamps that advance, picture IDs and TL0PICIDX that count on, and
// never an inter frame whose reference picture came from the other source.
// [Splicer] rewrites exactly those fields and nothing else of a forwarded
// packet (the VP8 data, the packet boundaries and the other descriptor
// fields stay as the sender wrote them), and it enforces the one splicing
// rule: a switch of source happens only on a keyframe.
//
// Nothing here uses cgo. A Splicer is not safe for concurrent use.
package vp8splice
