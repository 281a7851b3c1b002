// Package rtpudp is a live ingest for cameras without WebRTC: VP8 video over
// plain RTP/UDP (RFC 3550, payload format RFC 7741) with RTCP on the same
// port, and optional telemetry datagrams on a second UDP port. A [Session]
// implements the relay's ingest interface (stopgap/stream/ingest.Session),
// so the relay serves it exactly like a WHIP session.
//
// # Sockets and demultiplexing
//
// [Listen] binds one UDP socket for RTP and RTCP together (RTCP multiplexing,
// RFC 5761). Every datagram is classified by its second octet: with the
// marker bit masked off, values 64..95 are RTCP (packet types 192..223, e.g.
// SR 200, RR 201, BYE 203, feedback 205/206), everything else is RTP
// (RFC 5761 section 4). RTP payload types 64..95 therefore cannot be used for
// video; the default VP8 payload type 96 ([DefaultPayloadType]) is fine.
// Datagrams whose version field is not 2 are malformed.
//
// An optional second socket (Config.TelemetryAddr) receives one telemetry
// message per datagram. The session does not decode them: it forwards the raw
// bytes with their arrival time on [Session.Telemetry] and the relay decodes
// them with the telemetry package, as it does for the WebRTC data channel.
//
// # Security limit
//
// Plain RTP and these telemetry datagrams carry no authentication and no
// encryption: anyone who can send a UDP datagram to the port, with a forged
// source address if the network allows it, can inject video and telemetry,
// and anyone on the path can watch them. The only guard here is
// Config.AllowedSources, a list of source IPs (or IP:ports); datagrams from
// any other source are dropped and counted (Counts.Forbidden). Source
// addresses are not proof of identity, so the allow list stops mistakes and
// casual scanners, not an attacker on the path. For that reason [Listen]
// refuses to bind a non-loopback address (including the unspecified address
// 0.0.0.0 or ::) unless AllowedSources is non-empty ([ErrNeedAllowList]). On a
// loopback address an empty list admits any local sender. Use WHIP (DTLS-SRTP,
// bearer tokens) wherever the camera supports it; use this ingest on a
// trusted, isolated link.
//
// # One source per session
//
// A session locks onto one RTP stream: the SSRC in Config.SSRC, or the first
// SSRC seen when that is 0. Packets of other SSRCs or payload types are
// dropped and counted. RTCP feedback (PLIs from [Session.RequestKeyframe],
// receiver reports every Config.ReportInterval) goes to the address the last
// accepted RTP packet (or, before any, the last accepted sender report) came
// from. The session ends on Close, when the Listen context ends, on an RTCP
// BYE from the locked SSRC, or when nothing was accepted for
// Config.IdleTimeout after the first packet; a caller that wants the port
// open again calls Listen again.
//
// # Queues and counters
//
// The socket readers never block: parsed RTP packets and telemetry datagrams
// go into bounded queues, and when a queue is full the new item is dropped and
// counted (queued items are kept). [Session.Stats] fills the relay's link
// statistics (loss and jitter per RFC 3550 appendix A.3 and A.8 at 90 kHz);
// [Session.Counts] has every drop reason.
package rtpudp
