// Package passthru decides, frame by frame, whether the vehicle's live video
// passes through the relay untouched or goes through the relay's own
// encoder, so that a LIVE frame costs the operator no decode, encode or
// re-packetising delay while the console's decoder never sees a broken
// reference.
//
// # The rule
//
// A frame's packets are held until the frame is complete and its VP8 frame
// header checks out (the assembler's job: every packet from the frame start
// to the marker, tag, start code, picture size, first partition inside the
// frame). Then it is forwarded at once, before the relay decodes it. The
// relay's decode (about 4 ms at 1280x720) follows on the same goroutine,
// off the forwarding path: it needs the picture to predict from.
//
// Pass-through starts only on a vehicle keyframe of the camera's size, and
// only while the relay is not encoding a frame of its own. It continues with
// each next complete frame and stops at once, until the vehicle's next
// keyframe, when:
//
//   - a frame is lost (the assembler gave packets up) or arrives with
//     references missing;
//   - the relay fails to decode a frame (corrupt, truncated, bit-flipped
//     data the header check could not see);
//   - a display tick is filled by the relay (PREDICTED or STALE, or a late
//     frame): the relay's encoder takes over starting with a keyframe, and
//     keeps encoding the real frames (transcoding) until the vehicle's next
//     keyframe, which [Gate.WantKeyframe] asks for (at once when a run
//     ends, [Gate.KeyframeUrgent]). A keyframe that arrives while the
//     relay encodes a frame of its own waits until that frame is written,
//     then starts the run.
//
// The relay never sends a frame of its own that shows an earlier instant
// than the newest frame already forwarded ([Gate.BeginOwnShowing] refuses
// it, and the run stays open): on a busy machine the vehicle's next frame
// can pass through while the display loop still predicts the tick before
// it, and the older picture, sent after the newer one, would stand on the
// console's screen under the next LIVE tick's meta.
//
// Why not forward every packet the moment it arrives? The console's decoder
// would get a frame before anyone knew whether it was whole, and a frame the
// relay cannot decode could reach the operator's screen under a LIVE label.
// Why not wait for the relay's own decode? At 720p it alone takes twice the
// 2 ms the relay may add. Holding until the frame is complete costs nothing
// the console could use (it cannot decode a frame before its last packet
// either), and the header check costs microseconds.
//
// What remains: a frame whose header is sound but whose compressed data the
// relay's decoder rejects has already been forwarded when the rejection
// comes. Its display tick never becomes LIVE (no decoded frame reaches the
// display loop, so the tick is PREDICTED or STALE, sent as a relay
// keyframe), and the console's decoder, libvpx like the relay's, rejects the
// same frame rather than show it. A bit flip that libvpx decodes without
// complaint shows the damaged picture in either mode: no decoder can tell.
//
// The zero [Gate] passes frames through; set Off for always-transcode.
//
// Nothing here uses cgo.
package passthru
