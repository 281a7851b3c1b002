// Package ingest names what every vehicle ingest hands to the relay, so
// that the relay and the ingests depend on it and not on each other: the
// Session interface, raw telemetry messages, the RTCP sender report that
// maps the vehicle's RTP clock to its wall clock (RFC 3550 section 6.4.1),
// and the link statistics of RFC 3550 appendix A. The WebRTC ingest
// (stopgap/stream/whip) and the plain RTP/UDP ingest (stopgap/stream/rtpudp)
// implement Session. It needs no cgo.
package ingest
