package relay

// keyframeReason says why the relay asked the vehicle for a keyframe: the
// reason label of stopgap_keyframe_requests_total and the "why" of the
// ingest's debug log. A relay whose requests keep coming for one reason
// shows it there (on a weak uplink it was pass-through; see
// passThroughBackoff).
type keyframeReason uint8

// Keyframe request reasons. The zero value is invalid.
const (
	keyReasonInvalid keyframeReason = iota
	// keyLoss: the assembler gave a frame up.
	keyLoss
	// keyDecode: a frame failed to decode.
	keyDecode
	// keyRetry: the decoder still waits for a keyframe a retry interval
	// after the last request.
	keyRetry
	// keyLinkBack: packets came back after a silence.
	keyLinkBack
	// keyLinkBackTelemetry: the sender's telemetry came back after a
	// silence, before its video.
	keyLinkBackTelemetry
	// keyLinkBackRepeat: the link is back and no keyframe came yet.
	keyLinkBackRepeat
	// keyPassThrough: pass-through waits for a keyframe to forward from.
	keyPassThrough
	// keyViewer: a console viewer needs a keyframe while frames pass
	// through.
	keyViewer
	keyReasonCount
)

var keyReasonNames = [keyReasonCount]string{"invalid", "loss", "decode", "retry", "link-back",
	"link-back-telemetry", "link-back-repeat", "pass-through", "viewer"}

// String returns the reason's label value, such as "link-back".
func (r keyframeReason) String() string {
	if r >= keyReasonCount {
		return "invalid"
	}
	return keyReasonNames[r]
}
