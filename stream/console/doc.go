// Package console is the operator-facing egress of the stopgap relay: an
// http.Handler that serves the operator page, lets a browser receive the
// relay's output over WebRTC, and holds the operator's prediction cutoff.
//
// # What the operator receives
//
// Per display tick the relay produces one output frame whose state
// (display.State) is LIVE (a real frame), PREDICTED (a synthetic frame: the
// last real frame warped to where the camera should be now), STALE (too
// uncertain to predict: the old frame, desaturated) or NO_PICTURE (no real
// frame yet: a labelled empty frame, with no picture age); a tick it decided
// but could not put on screen is NOT_SHOWN, with a meta message and no frame.
// The relay hands each frame it encoded to
// [Console.WriteFrame], each LIVE frame it passes through untouched (the
// vehicle's own packets) to [Console.ForwardFrame], and a description of
// every frame to [Console.WriteMeta]. Each viewer's RTP stream joins the two
// sources into one (stopgap/stream/vp8splice), switching only on a keyframe.
// Every connected viewer gets:
//
//   - one VP8 video track (RTP clock 90 kHz), and
//   - a data channel labelled "meta" carrying one JSON text message per output
//     frame (see [Meta] for the fields and units), with the relay's display
//     tick period, so the page knows how soon the next one is due.
//
// The "meta" channel is pre-negotiated: both sides create it with
// negotiated=true, id=0, ordered=false, maxRetransmits=0, so the offer must
// contain an SCTP application section. It is unordered and unreliable on
// purpose: a late status message is worthless, and silence must show up as
// silence. Receivers drop messages whose seq is not newer than the last one.
//
// # HTTP API (same conventions as WHIP, RFC 9725, but receive-only)
//
//	GET    /                 the operator page (no token: it holds no secrets)
//	GET    /console.js, /console.css
//	POST   /api/view         body: SDP offer (Content-Type application/sdp)
//	                         201 Created, body: SDP answer, Location: /api/view/{id}
//	DELETE /api/view/{id}    ends that viewer session (200)
//	GET    /api/state        profile, cutoff, administrator limits, profiles (JSON)
//	POST   /api/cutoff       {"profile": "...", "cutoff": 0.6}  (JSON) -> new state
//	GET    /api/meta         the last meta message (JSON), 204 if none yet
//
// Every /api/ request needs "Authorization: Bearer <token>" (RFC 6750); the
// token is compared in constant time and never logged. The page reads the
// token from the URL fragment (http://127.0.0.1:PORT/#token=...), which
// browsers never send to the server, keeps it in sessionStorage and removes it
// from the address bar. Session ids are 128 bits from crypto/rand. Request
// bodies are size-limited; the number of sessions (including half-open ones
// that have not finished ICE/DTLS) is capped and excess offers get 503 with
// Retry-After. There is no trickle ICE: the answer carries all candidates.
// No CORS headers are sent: the page and the API share one origin.
//
// The caller owns the listener: bind to 127.0.0.1 (DefaultAddr) unless the
// operator is remote, then serve over TLS, and set http.Server timeouts
// (ReadHeaderTimeout, ReadTimeout, IdleTimeout) so slow clients cannot hold
// connections; the handler itself bounds bodies, sessions and ICE gathering.
//
// # Cutoff
//
// The relay shows a PREDICTED frame only while its confidence is at or above
// the cutoff; below it the frame is STALE. The operator picks a named
// [Profile] and may change its cutoff, always within the administrator's
// [Limits]; [Console.Cutoff] is the thread-safe getter for the relay and
// Config.OnCutoffChange tells it about changes.
//
// # Safety
//
// Predicted frames move the static scene only; anything that moved during the
// gap (a pedestrian, a braking car) is not in them. The page says so
// permanently, frames each state unmistakably, and shows STATE UNKNOWN
// (reasons: [UnknownReasons]) when the meta channel is silent for more than
// [MetaSilenceMs], the picture stops changing for more than [VideoFreezeMs],
// or a LIVE status gets no newer one in time, so a frozen picture never
// looks live.
//
// LIVE claims that the picture is current, so the page lets the claim
// expire on its own clock: [StatusLateAfterMs] of the status's tick period
// ([Meta.PeriodMs]) after a LIVE status, 3 periods within [100, 300] ms
// (100 ms at 30 fps), it shows STATE UNKNOWN, reason [ReasonStatusLate],
// until a newer status comes. On a cut link that covers the time until the
// relay decides the next tick (PREDICTED), which is one period plus the
// display clock's allowance normally and more on a busy relay. The reasons
// for the limits, and why PREDICTED and STALE do not expire so, are beside
// the constants ([StatusLateIntervals]).
//
// This package uses no cgo: frames arrive already VP8-encoded.
//
// Package consoletest (stream/console/consoletest) drives this page in a real
// headless Chromium for tests; the relay's end-to-end test can reuse it.
package console
