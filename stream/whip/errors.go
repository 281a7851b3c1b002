package whip

import (
	"errors"
	"fmt"

	"stopgap/stream/ingest"
)

// Errors returned by this package. Compare with errors.Is; most are wrapped with context.
var (
	// ErrNoToken is returned by NewServer when Config.Token is empty: every request but the CORS preflight
	// must carry a bearer token (RFC 9725 section 4.5), so the server refuses to run without one.
	ErrNoToken = errors.New("whip: no bearer token configured; set Config.Token to a long random secret")

	// ErrBadConfig is returned by NewServer and Publish when a configuration value is out of range.
	ErrBadConfig = errors.New("whip: invalid configuration")

	// ErrBadOffer reports an SDP offer the server cannot accept: unparsable, without exactly one VP8 video
	// m-line the vehicle sends on, or rejected by the WebRTC stack. The HTTP status is 400.
	ErrBadOffer = errors.New("whip: bad SDP offer")

	// ErrSessionClosed is returned by Session methods after the session ended, and by Publisher methods
	// after Close.
	// It wraps ingest.ErrSessionClosed, the end of every ingest session.
	ErrSessionClosed = fmt.Errorf("whip: session closed: %w", ingest.ErrSessionClosed)

	// ErrNoTrack is returned by Session.RequestKeyframe before the vehicle's video track has arrived.
	ErrNoTrack = errors.New("whip: no video track yet; wait for the first RTP packet")

	// ErrKeyframeRateLimited is returned by Session.RequestKeyframe when the previous PLI went out less than
	// Config.MinKeyframeInterval ago. The request is dropped (and counted); retry later.
	ErrKeyframeRateLimited = errors.New("whip: keyframe request rate-limited")

	// ErrServerClosed is returned for work attempted after Server.Close.
	ErrServerClosed = errors.New("whip: server closed")

	// ErrNotConnected is returned by Publish when the PeerConnection or the telemetry data channel did not
	// come up before the context ended.
	ErrNotConnected = errors.New("whip: not connected")
)

// HTTPError is returned by Publish and Publisher.Close when the WHIP server answers with an unexpected status.
// Callers can inspect StatusCode (for example 401: check the token; 503/429: retry after RetryAfter).
type HTTPError struct {
	// Method and URL of the failed request.
	Method, URL string
	// StatusCode is the HTTP status the server returned.
	StatusCode int
	// RetryAfter is the raw Retry-After header, if any.
	RetryAfter string
	// Body is the start of the response body (at most 512 bytes), usually a one-line reason.
	Body string
}

// Error implements error.
func (e *HTTPError) Error() string {
	s := fmt.Sprintf("whip: %s %s: HTTP %d: %s", e.Method, e.URL, e.StatusCode, e.Body)
	if e.RetryAfter != "" {
		s += " (retry after " + e.RetryAfter + " s)"
	}
	return s
}
