package console

// KeyframeReason says why the console asks the egress encoder for a keyframe.
// The zero value is KeyframeInvalid and is never passed.
type KeyframeReason int

// Reasons for a keyframe request.
const (
	KeyframeInvalid       KeyframeReason = iota // not a valid reason
	KeyframeViewerJoined                        // a viewer connected; it can only start decoding at a keyframe
	KeyframeViewerRequest                       // a viewer sent RTCP PLI or FIR
	KeyframeQueueDrop                           // a frame was dropped for a slow viewer; its decoder needs a fresh start
	KeyframeRetry                               // still waiting for a keyframe 200 ms (Config.KeyframeRetry) after asking
	KeyframeSourceSwitch                        // an encoded inter frame followed forwarded frames: the viewer's decoder would mix references

	keyframeReasonLast = KeyframeSourceSwitch
)

var keyframeReasonNames = [...]string{"invalid", "viewer-joined", "viewer-request", "queue-drop", "retry", "source-switch"}

// String returns a short lower-case name such as "viewer-joined".
func (r KeyframeReason) String() string {
	if r < 0 || int(r) >= len(keyframeReasonNames) {
		return "invalid"
	}
	return keyframeReasonNames[r]
}
