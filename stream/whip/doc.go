// Package whip is the ingest side of the live relay: a WHIP server (RFC 9725) that accepts one vehicle's
// VP8 video track (RFC 7741) and telemetry data channel per session, the matching publishing client, and
// the clock arithmetic needed to put received RTP timestamps on the vehicle's clock.
//
// # Signalling
//
// [Server] is an http.Handler. The vehicle POSTs its SDP offer (Content-Type application/sdp) to the
// endpoint and receives 201 Created with the SDP answer and a Location header naming the session resource;
// DELETE on that resource ends the session. The server gathers all its ICE candidates before answering, so
// trickle ICE and ICE restarts (PATCH) are not supported (405); a vehicle that loses its path publishes
// again. CORS preflights (OPTIONS) are answered without authentication.
//
// Threats named by RFC 9725 section 7 and what the server does about them:
//   - unauthenticated use: a bearer token (RFC 6750) on every request but OPTIONS, compared in constant
//     time over SHA-256 digests, never logged; serve over HTTPS outside loopback;
//   - guessable session URLs: ids are 128 bits from crypto/rand;
//   - POST flooding and half-open sessions: a token bucket per remote IP on POST (429 with Retry-After),
//     a cap on concurrent sessions (503 with Retry-After), a body limit (413), sessions that do not
//     connect within Config.ICETimeout are dropped, and each remote address holds at most one session
//     that has not connected yet: a newer offer from it replaces the older one (counted as
//     RejectSuperseded; an offer replaced while it was still being answered gets 409). A flood from a few
//     addresses therefore pins a few slots, not all of Config.MaxSessions, and a vehicle from another
//     address still connects (stream/e2e TestWhipFlood). An attacker who holds the ingest token and
//     MaxSessions addresses can still fill the server until ICETimeout: keep the token secret;
//   - PATCH flooding: PATCH is refused without allocating anything.
//
// Malformed offers get 400 with a one-line reason; every refusal is counted per [RejectReason] in
// [Server.Stats].
//
// # Media
//
// Each session uses its own pion API: a MediaEngine with only VP8 video registered (NACK and PLI feedback,
// no RTX, no audio) and interceptors for loss repair (a NACK as soon as a gap is seen, repeated at the measured round trip,
// capped per packet by Config.MaxNACKsPerPacket, cancelled by a keyframe request; see [ingest.RepairStats]) and
// RTCP receiver reports. Sender reports from the vehicle are kept for clock mapping
// ([Session.SenderReport]). Keyframe requests are the relay's decision: [Session.RequestKeyframe] sends a
// PLI, spaced by Config.MinKeyframeInterval.
//
// Video packets reach the relay through [Session.ReadRTP] and telemetry messages (raw bytes on the data
// channel labelled [TelemetryLabel]) through [Session.Telemetry]. Both go through bounded queues filled by
// the session's own goroutines, so a slow consumer never blocks the WebRTC stack: when a queue is full the
// newly arrived item is dropped and counted, queued items are kept. Nothing here turns packets into frames;
// sequence-number gaps, wraps, reordering and padding-only packets are all passed on for the depacketiser
// to judge (loss and jitter statistics are in [Session.Stats]).
//
// # Networking
//
// [Network] selects where ICE candidates are gathered. LoopbackOnly restricts both ends to 127.0.0.1 over
// UDP/IPv4 (tests, demos, the simulated vehicle); IncludeLoopback adds loopback candidates to the others;
// Interfaces limits gathering to named interfaces; NAT1To1IPs announces a public address; UDPPort (or a
// caller's UDPMux) puts every session on one UDP port. Multicast DNS candidates are always off. No STUN or
// TURN is used. The answer offers transport-wide congestion control feedback, so a browser sender can
// estimate its bandwidth from the start; it goes every [FeedbackInterval], and at once for the first
// packet after a silence of [FeedbackResumeSilence] (an outage), so the sender's pacer and encoder,
// held back while no feedback came, recover without waiting for the next interval. The answer also asks the
// sender to start its estimate at [Config].SenderStartKbps ([StartBitrateParam] on the VP8 fmtp line, read by
// Chromium-based senders), so a sender whose own start-up probing comes out low does not ramp for seconds
// from there. A vehicle that vanishes without DELETE is
// noticed by ICE consent checks: with pion's defaults (keepalive 2 s) the connection turns disconnected after
// 5 s and failed after 25 s, and a failed connection ends the session (EndFailed). The relay should not wait
// for that: missing video is its own, faster signal.
//
// # Clocks
//
// Arrival times come from the injectable [Clock] (receiver clock). [ingest.SenderReport.SenderTimeUs] maps an RTP
// timestamp to the sender's wall clock in Unix microseconds (NTP conversion per RFC 5905, 32-bit RTP wrap
// handled), and [OffsetEstimator] tracks min(arrival - capture): clock offset plus base one-way delay,
// which cannot be separated without synchronised clocks (see its documentation for what is reported).
//
// # Publishing
//
// [Publish] is the client the simulated vehicle and the tests use: it sends caller-made RTP packets on a
// VP8 track (so a link emulator can drop them, optionally after the NACK buffer via
// PublishConfig.WireFilter), sends telemetry on the data channel, surfaces PLIs as keyframe requests, and
// DELETEs its session on Close.
package whip
