package rtpudp

import (
	"errors"
	"fmt"

	"stopgap/stream/ingest"
)

// Errors returned by this package. Compare with errors.Is; most are wrapped
// with context.
var (
	// ErrBadConfig reports a Config value out of range or unparsable.
	ErrBadConfig = errors.New("rtpudp: invalid configuration")

	// ErrNeedAllowList is returned by Listen when a socket would be bound to
	// a non-loopback address with an empty Config.AllowedSources: plain RTP
	// and telemetry datagrams are unauthenticated, so anyone could inject
	// video. List the camera's source IPs, or bind 127.0.0.1.
	ErrNeedAllowList = errors.New("rtpudp: a non-loopback listen address needs a non-empty allow list of source addresses")

	// ErrSessionClosed is returned by ReadRTP and RequestKeyframe after the
	// session ended. It wraps ingest.ErrSessionClosed, so the relay treats the
	// end of a UDP session like the end of a WHIP session.
	ErrSessionClosed = fmt.Errorf("rtpudp: session closed: %w", ingest.ErrSessionClosed)

	// ErrNoSource is returned by RequestKeyframe before any RTP packet or
	// sender report was accepted: there is no address or SSRC to send the
	// PLI to yet.
	ErrNoSource = errors.New("rtpudp: no source yet; wait for the first RTP packet")

	// ErrKeyframeRateLimited is returned by RequestKeyframe when the previous
	// PLI was sent less than MinPLIInterval ago. The request is dropped and
	// counted; retry later.
	ErrKeyframeRateLimited = errors.New("rtpudp: keyframe request rate-limited")
)
