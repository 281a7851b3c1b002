package whip

// RejectReason says why the server refused a request or dropped a half-open session. Counts per reason are
// reported by Server.Stats. The zero value is invalid.
type RejectReason int

// Reject reasons, with the HTTP status each produces.
const (
	RejectInvalid              RejectReason = iota // zero value, never counted
	RejectUnauthorized                             // 401: missing or wrong bearer token
	RejectRateLimited                              // 429: POST rate limit per remote address exceeded
	RejectBodyTooLarge                             // 413: offer larger than Config.MaxOfferBytes
	RejectUnsupportedMediaType                     // 415: Content-Type is not application/sdp
	RejectBadOffer                                 // 400: malformed SDP or no usable VP8 video track
	RejectTooManySessions                          // 503: Config.MaxSessions sessions already exist
	RejectMethodNotAllowed                         // 405: e.g. PATCH (trickle ICE is not supported)
	RejectNotFound                                 // 404: unknown session resource
	RejectICETimeout                               // session dropped: ICE/DTLS did not connect in time
	RejectInternal                                 // 500: the WebRTC stack failed while answering
	RejectSuperseded                               // half-open session dropped: a newer offer came from its address
	numRejectReasons
)

var rejectNames = [...]string{
	RejectInvalid:              "invalid",
	RejectUnauthorized:         "unauthorized",
	RejectRateLimited:          "rate_limited",
	RejectBodyTooLarge:         "body_too_large",
	RejectUnsupportedMediaType: "unsupported_media_type",
	RejectBadOffer:             "bad_offer",
	RejectTooManySessions:      "too_many_sessions",
	RejectMethodNotAllowed:     "method_not_allowed",
	RejectNotFound:             "not_found",
	RejectICETimeout:           "ice_timeout",
	RejectInternal:             "internal",
	RejectSuperseded:           "superseded",
}

// String returns a short snake_case name, e.g. "rate_limited".
func (r RejectReason) String() string {
	if r < 0 || r >= numRejectReasons {
		return "invalid"
	}
	return rejectNames[r]
}

// EndReason says why a session ended. The zero value is invalid (the session has not ended).
type EndReason int

// End reasons.
const (
	EndInvalid        EndReason = iota // zero value: not ended
	EndDeleted                         // the vehicle sent DELETE on the session resource
	EndClosed                          // Session.Close was called (relay side)
	EndICETimeout                      // ICE/DTLS did not connect within Config.ICETimeout
	EndFailed                          // the PeerConnection failed or was closed by the peer
	EndServerShutdown                  // Server.Close
	EndSuperseded                      // not yet connected when a newer offer came from the same address
	numEndReasons
)

var endNames = [...]string{
	EndInvalid:        "invalid",
	EndDeleted:        "deleted",
	EndClosed:         "closed",
	EndICETimeout:     "ice_timeout",
	EndFailed:         "failed",
	EndServerShutdown: "server_shutdown",
	EndSuperseded:     "superseded",
}

// String returns a short snake_case name, e.g. "ice_timeout".
func (r EndReason) String() string {
	if r < 0 || r >= numEndReasons {
		return "invalid"
	}
	return endNames[r]
}
