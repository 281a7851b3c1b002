package ingest

import (
	"context"
	"errors"
	"time"

	"github.com/pion/rtp"
)

// ErrSessionClosed ends a session: Session.ReadRTP returns it (or an error
// wrapping it) after the session ended. Each ingest wraps it in its own
// error value, so errors.Is(err, ErrSessionClosed) holds for all of them.
var ErrSessionClosed = errors.New("ingest: session closed")

// Session is the part of one vehicle session the relay consumes.
// *whip.Session and *rtpudp.Session implement it; tests use a fake.
type Session interface {
	// ReadRTP returns the next video RTP packet and its receiver-clock
	// arrival time; ErrSessionClosed (or any error) ends the session.
	ReadRTP(ctx context.Context) (*rtp.Packet, time.Time, error)
	// Telemetry delivers raw telemetry messages; closed when the session ends.
	Telemetry() <-chan TelemetryBytes
	// RequestKeyframe sends a picture loss indication (RTCP PLI).
	RequestKeyframe() error
	// SenderReport returns the latest RTCP sender report, ok false before one.
	SenderReport() (SenderReport, bool)
	// Stats returns link statistics (called about once per second).
	Stats() Stats
	// Done is closed when the session ended.
	Done() <-chan struct{}
	// Close ends the session.
	Close() error
	// ID identifies the session (logs show its first 8 characters).
	ID() string
}

// TelemetryBytes is one telemetry message as it arrived on the data channel: raw bytes (the relay decodes
// them) and the receiver-clock arrival time. Data is owned by the receiver of the value.
type TelemetryBytes struct {
	Data    []byte
	Arrival time.Time
}

// Stats are the counters of one ingest session. Loss and jitter follow RFC 3550 appendix A for the video
// stream, computed from the packets as the ingest hands them on (for WebRTC, after NACK-driven
// retransmissions). A counter an ingest has no use for (data channels on plain RTP) stays zero.
type Stats struct {
	// PacketsReceived counts RTP packets read from the track, including retransmissions and padding-only ones.
	PacketsReceived uint64
	// BytesReceived counts RTP payload octets (no headers, no padding), like the RTCP SR octet count.
	BytesReceived uint64
	// PaddingPackets counts packets with an empty payload. They are delivered too, so the consumer sees
	// every sequence number; they carry no media.
	PaddingPackets uint64
	// PacketsLost is the cumulative loss of RFC 3550 A.3 (expected - received); duplicates can make it
	// negative. A sequence number wrap is not loss.
	PacketsLost int64
	// HighestSeq is the extended highest sequence number received (RFC 3550 A.1).
	HighestSeq uint32
	// JitterRTP is the interarrival jitter of RFC 3550 A.8 in RTP timestamp units (90 kHz); Jitter is the
	// same as a duration.
	JitterRTP float64
	Jitter    time.Duration
	// PacketsDropped counts packets discarded because the RTP queue was full (the consumer fell behind).
	PacketsDropped uint64
	// ReadErrors counts packets the stack could not parse as RTP.
	ReadErrors uint64
	// NACKPackets counts RTCP NACK packets sent; NACKedPackets the sequence numbers they requested.
	NACKPackets, NACKedPackets uint64
	// PLIsSent counts RTCP PLIs written; PLIsSuppressed keyframe requests refused by MinKeyframeInterval.
	PLIsSent, PLIsSuppressed uint64
	// SenderReports counts RTCP sender reports received.
	SenderReports uint64
	// TelemetryMessages counts delivered telemetry messages; TelemetryDropped those discarded because the
	// queue was full or the message exceeded MaxTelemetryBytes.
	TelemetryMessages, TelemetryDropped uint64
	// OtherDataChannels counts data channels with a label other than TelemetryLabel (closed on arrival).
	OtherDataChannels uint64
	// TelemetryOrdered and TelemetryReliable tell how the vehicle opened the telemetry channel. Telemetry
	// wants neither: an ordered or retransmitting channel holds every message behind a lost one (head-of-
	// line blocking), so after an outage samples arrive seconds late. Open it with
	// {ordered: false, maxRetransmits: 0}; a warning is logged once per session otherwise.
	TelemetryOrdered, TelemetryReliable bool
	// RTT is the latest STUN round-trip time of the selected ICE candidate pair (ICE consent checks, every
	// few seconds); HasRTT is false until one was measured. The receive-only session cannot measure RTT
	// from RTCP (that would need XR DLRR from the sender).
	RTT    time.Duration
	HasRTT bool
	// Repair are the counters of the loss repair (NACKs and retransmissions), zero for an ingest without one.
	Repair RepairStats
}

// RepairStats are the counters of the loss repair of one session.
type RepairStats struct {
	// Gaps counts sequence numbers seen missing and asked for (each once, however often it was NACKed),
	// including the successors of a packet without the marker bit asked for when they were late.
	Gaps uint64
	// Repaired counts missing sequence numbers that arrived later (a retransmission or a reordered packet).
	Repaired uint64
	// GaveUp counts missing sequence numbers no longer asked for: NACKed as often as the ingest allows
	// without an answer, older than its repair window, or pushed out of its bounded list.
	GaveUp uint64
	// Cancelled counts missing sequence numbers dropped because a keyframe was requested (the keyframe
	// replaces everything before it).
	Cancelled uint64
	// SkippedGaps counts sequence numbers never asked for: gaps larger than the ingest's limit or after a
	// silence longer than its repair window (an outage).
	SkippedGaps uint64
	// RTT is the smoothed round trip between a first NACK and its retransmission (RFC 6298 section 2 with
	// Karn's rule: only packets NACKed once are sampled); before the first sample it is the ICE round trip
	// if known, else the ingest's initial RTT. RTTSamples counts the samples.
	RTT        time.Duration
	RTTSamples uint64
}

// Arrival is one RTP packet an ingest queued for its consumer, with its receiver-clock arrival time.
type Arrival struct {
	Packet *rtp.Packet
	At     time.Time
}

// ReadQueued is Session.ReadRTP over an ingest's packet queue q: it returns the next queued packet,
// blocking until one is queued, ctx ends (ctx.Err()), or done is closed; packets still queued then are
// returned first, after which it returns closed (the ingest's own error wrapping ErrSessionClosed).
// A packet queued before done closed is never lost to the race between the two.
func ReadQueued(ctx context.Context, q <-chan Arrival, done <-chan struct{}, closed error) (*rtp.Packet, time.Time, error) {
	select {
	case a := <-q:
		return a.Packet, a.At, nil
	default:
	}
	select {
	case a := <-q:
		return a.Packet, a.At, nil
	case <-ctx.Done():
		return nil, time.Time{}, ctx.Err()
	case <-done:
		select {
		case a := <-q:
			return a.Packet, a.At, nil
		default:
			return nil, time.Time{}, closed
		}
	}
}
