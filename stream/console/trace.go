package console

import (
	"sync/atomic"

	"stopgap/stream/vp8splice"
)

// SentFrame describes one video frame as one viewer was sent it: the RTP
// timestamp that viewer's decoder sees and where the frame came from. It is
// what a check of the viewer's pictures needs to find, for each picture it
// shows, the picture the relay meant it to see.
type SentFrame struct {
	// Viewer is the viewer's number, as in the console's logs.
	Viewer uint64
	// Num is the frame's number in the order frames reached the console
	// (WriteFrame and ForwardFrame calls, counting from 1, whether anyone
	// watched or not). A viewer that missed no frame sees consecutive
	// numbers.
	Num uint64
	// RTPTimestamp is the frame's RTP timestamp in this viewer's stream
	// (90 kHz, after splicing): the value a browser reports as
	// rtpTimestamp for the picture.
	RTPTimestamp uint32
	// Source is SourceForwarded for a vehicle's frame passed through and
	// SourceEncoded for a frame of the relay's encoder.
	Source   vp8splice.Source
	Keyframe bool
	// SourceRTPTimestamp is the vehicle's own RTP timestamp of a forwarded
	// frame (ForwardFrame's rtpTimestamp); zero for an encoded frame.
	SourceRTPTimestamp uint32
	// Frame is the VP8 frame sent: WriteFrame's bytes, or the forwarded
	// packets' VP8 data in order. It is valid only during the call.
	Frame []byte
}

// sentTracer holds the function TraceSent installed, if any.
type sentTracer struct {
	fn atomic.Pointer[func(SentFrame)]
}

// TraceSent makes the console call fn for every video frame it sends to a
// viewer, after the frame's packets were written to that viewer's
// connection; fn == nil stops the calls. It is meant for tests and
// diagnostics that compare what a viewer shows with what was sent. fn runs
// on the viewer's video goroutine (one per viewer, so calls for different
// viewers may run concurrently): it must return quickly and must not call
// the Console. Without a tracer the send path only loads a nil pointer.
func (c *Console) TraceSent(fn func(SentFrame)) {
	if fn == nil {
		c.sent.fn.Store(nil)
		return
	}
	c.sent.fn.Store(&fn)
}
