package relay

import (
	"sync/atomic"
	"time"

	"stopgap/internal/display"
	"stopgap/stream/vp8"
)

// FrameTrace describes one output frame the relay sent to the console, for
// latency tracing: where its time went, frame by frame. Times are on the
// relay's clock (Config.Now).
type FrameTrace struct {
	// Seq is the frame's console.Meta.Seq and TickUs its display tick time
	// (Meta.TimeUs, vehicle clock, microseconds); State its state.
	Seq    uint64
	TickUs int64
	State  display.State
	// LastPacketAt is when the relay received the last packet of the input
	// frame and Decode how long decoding it took (VP8 decode and I420 to
	// BGR). Set for LIVE frames, zero for filled ticks.
	LastPacketAt time.Time
	Decode       time.Duration
	// RTPTimestamp is the vehicle's RTP timestamp (90 kHz) of the input
	// frame of a LIVE tick (zero for filled ticks): the frame's identity
	// on the vehicle's side.
	RTPTimestamp uint32
	// Encode is the egress VP8 encode time of this output frame, and
	// WrittenAt when console.WriteFrame returned for it (its packets are
	// then queued to the operator's connection). For a frame that passed
	// through (Forwarded), Encode is zero and WrittenAt is when
	// console.ForwardFrame returned, before the decode.
	Encode    time.Duration
	WrittenAt time.Time
	Forwarded bool
	// Superseded: a LIVE tick whose frame was not sent at all, because a
	// newer vehicle frame had passed through to the console while it waited
	// for the display loop (Encode and WrittenAt are zero). Only its meta
	// went out.
	Superseded bool
}

// frameTracer holds the function TraceFrames installed, if any.
type frameTracer struct {
	fn atomic.Pointer[func(FrameTrace)]
}

// TraceFrames makes the relay call fn for every output frame, after its meta
// message was written; fn == nil stops the calls. fn runs on the relay's
// display goroutine: it must return quickly and must not call the Relay.
// Without a tracer the display loop takes no extra clock reading.
func (r *Relay) TraceFrames(fn func(FrameTrace)) {
	if fn == nil {
		r.tracer.fn.Store(nil)
		return
	}
	r.tracer.fn.Store(&fn)
}

// DecodedFrame is one vehicle frame as the relay's own decoder made it:
// the picture a console viewer must show for that frame when it is passed
// through. See TraceDecoded.
type DecodedFrame struct {
	// RTPTimestamp is the vehicle's RTP timestamp of the frame (90 kHz),
	// console.SentFrame.SourceRTPTimestamp for a forwarded frame.
	RTPTimestamp uint32
	// Forwarded tells whether the frame was passed through to the console
	// (before it was decoded).
	Forwarded bool
	// Image is the decoded picture (I420). It belongs to the relay's
	// decoder and is valid only during the call.
	Image *vp8.Image
}

// decodeTracer holds the function TraceDecoded installed, if any.
type decodeTracer struct {
	fn atomic.Pointer[func(DecodedFrame)]
}

// TraceDecoded makes the relay call fn for every vehicle frame its decoder
// decoded (and found to have the camera's size), forwarded or not; fn ==
// nil stops the calls. It is meant for tests that compare what a console
// viewer shows with what the relay meant it to show. fn runs on the
// ingest goroutine with the ingest locked: it must return quickly, must not
// keep the image and must not call the Relay. Without a tracer the ingest
// only loads a nil pointer.
func (r *Relay) TraceDecoded(fn func(DecodedFrame)) {
	if fn == nil {
		r.decoded.fn.Store(nil)
		return
	}
	r.decoded.fn.Store(&fn)
}
