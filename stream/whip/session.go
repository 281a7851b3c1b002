package whip

import (
	"context"
	"errors"
	"io"
	"log/slog"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/pion/rtcp"
	"github.com/pion/rtp"
	"github.com/pion/webrtc/v4"

	"stopgap/stream/ingest"
	"stopgap/stream/rtpstats"
)

// The relay reads every ingest through one interface.
var _ ingest.Session = (*Session)(nil)

// Session is one vehicle's ingest session: one VP8 video track and one telemetry data channel.
// All methods are safe for concurrent use.
type Session struct {
	id      string
	remote  string // the POST's remote address (host:port)
	host    string // its host part: at most one half-open session per host
	srv     *Server
	pc      *webrtc.PeerConnection
	counter *rtcpCounter
	repair  *repairer
	clock   Clock
	log     *slog.Logger
	cfg     *Config

	rtpq chan ingest.Arrival
	telq chan ingest.TelemetryBytes
	done chan struct{}

	connected  atomic.Bool
	rtpDropped atomic.Uint64

	mu           sync.Mutex
	ended        EndReason
	iceTimer     Stopper
	hasTrack     bool
	ssrc         uint32
	lastPLI      time.Time
	plisRefused  uint64
	sr           ingest.SenderReport
	srCount      uint64
	hasSR        bool
	rx           rtpstats.Receiver
	readErrors   uint64
	telMessages  uint64
	telDropped   uint64
	otherChannel uint64
	telOrdered   bool
	telReliable  bool
}

// ID returns the session's resource identifier: 32 hex digits from crypto/rand (128 bits), the last path
// segment of its Location URL. Logs show only its first 8 digits.
func (s *Session) ID() string { return s.id }

// RemoteAddr returns the HTTP remote address the offer came from.
func (s *Session) RemoteAddr() string { return s.remote }

// Done is closed when the session has ended; EndReason then says why.
func (s *Session) Done() <-chan struct{} { return s.done }

// EndReason returns why the session ended, or EndInvalid while it is running.
func (s *Session) EndReason() EndReason {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.ended
}

// ReadRTP returns the next RTP packet of the video track with its receiver-clock arrival time, blocking
// until one is queued, ctx ends, or the session ends (then packets still queued are returned first, after
// which it returns ErrSessionClosed). The packet and its payload belong to the caller.
//
// Packets are queued by the session's reader goroutine, which never blocks the WebRTC stack: when the queue
// (Config.RTPQueue) is full, the newly arrived packet is dropped and counted in ingest.Stats.PacketsDropped;
// queued packets are never evicted. Order is arrival order: late retransmissions and reordered packets
// come out as they arrived, so the consumer must reorder by sequence number (with wrap) itself.
func (s *Session) ReadRTP(ctx context.Context) (*rtp.Packet, time.Time, error) {
	return ingest.ReadQueued(ctx, s.rtpq, s.done, ErrSessionClosed)
}

// Telemetry returns the channel of telemetry messages from the data channel labelled TelemetryLabel. It is
// closed when the session ends. When it is full (Config.TelemetryQueue), new messages are dropped and
// counted; the data channel is never blocked.
func (s *Session) Telemetry() <-chan ingest.TelemetryBytes { return s.telq }

// RequestKeyframe sends an RTCP Picture Loss Indication (RFC 4585 section 6.3.1) for the video track's SSRC
// now. It returns ErrNoTrack before the first video packet, ErrKeyframeRateLimited if the previous PLI was
// sent less than Config.MinKeyframeInterval ago (the request is dropped and counted), and ErrSessionClosed
// after the end.
func (s *Session) RequestKeyframe() error {
	s.mu.Lock()
	if s.ended != EndInvalid {
		s.mu.Unlock()
		return ErrSessionClosed
	}
	if !s.hasTrack {
		s.mu.Unlock()
		return ErrNoTrack
	}
	now := s.clock.Now()
	if !s.lastPLI.IsZero() && now.Sub(s.lastPLI) < s.cfg.MinKeyframeInterval {
		s.plisRefused++
		s.mu.Unlock()
		return ErrKeyframeRateLimited
	}
	s.lastPLI = now
	ssrc := s.ssrc
	s.mu.Unlock()
	// The keyframe replaces every packet before it: asking for them too only loads the link.
	s.repair.cancel()
	return s.pc.WriteRTCP([]rtcp.Packet{&rtcp.PictureLossIndication{MediaSSRC: ssrc}})
}

// RepairSpan returns how long after a packet was seen missing it may still arrive as the answer to a NACK:
// MaxNACKsPerPacket retransmission timeouts at the round trip measured now, at most RepairWindow. A
// depacketiser waits that long for a missing packet (rtpvp8.AssemblerConfig.RepairWait) before it gives
// the frame up and asks for a keyframe. Cheap: call it as often as needed.
func (s *Session) RepairSpan() time.Duration { return s.repair.span() }

// SenderReport returns the latest RTCP sender report for the video stream (NTP <-> RTP timestamp mapping,
// RFC 3550 section 6.4.1); ok is false until one arrived. Use ingest.SenderReport.SenderTimeUs with
// ingest.VideoClockRateHz to map a packet's RTP timestamp to the vehicle's wall clock.
//
// With a pion sender (Publish), the report pairs the sender's clock with the timestamp of the latest packet
// advanced by the time since that timestamp was first sent: mapped times are therefore send times of the
// first packet of each frame, i.e. capture time plus the vehicle's encode and queueing delay.
func (s *Session) SenderReport() (sr ingest.SenderReport, ok bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.sr, s.hasSR
}

// Stats returns the session's counters (see ingest.Stats). It queries the ICE agent for RTT, so call it at
// a human rate (e.g. once per second), not per packet.
func (s *Session) Stats() ingest.Stats {
	s.mu.Lock()
	st := ingest.Stats{
		PacketsReceived:   s.rx.Received(),
		BytesReceived:     s.rx.Bytes(),
		PaddingPackets:    s.rx.Padding(),
		PacketsLost:       s.rx.Lost(),
		HighestSeq:        s.rx.ExtendedMax(),
		JitterRTP:         s.rx.JitterRTP(),
		Jitter:            time.Duration(s.rx.JitterRTP() / ingest.VideoClockRateHz * float64(time.Second)),
		ReadErrors:        s.readErrors,
		PLIsSuppressed:    s.plisRefused,
		SenderReports:     s.srCount,
		TelemetryMessages: s.telMessages,
		TelemetryDropped:  s.telDropped,
		OtherDataChannels: s.otherChannel,
		TelemetryOrdered:  s.telOrdered,
		TelemetryReliable: s.telReliable,
	}
	s.mu.Unlock()
	st.PacketsDropped = s.rtpDropped.Load()
	st.NACKPackets = s.counter.nackPackets.Load()
	st.NACKedPackets = s.counter.nackedSeqs.Load()
	st.PLIsSent = s.counter.plis.Load()
	if p, ok := selectedPairStats(s.pc); ok && p.CurrentRoundTripTime > 0 {
		st.RTT = time.Duration(p.CurrentRoundTripTime * float64(time.Second))
		st.HasRTT = true
	}
	if st.HasRTT {
		s.repair.setICERTT(st.RTT)
	}
	st.Repair = s.repair.stats()
	return st
}

// Close ends the session from the relay side (EndClosed) and releases its WebRTC resources. The vehicle's
// later DELETE gets 404. Close is idempotent.
func (s *Session) Close() error {
	s.end(EndClosed)
	return nil
}

// end ends the session once: records the reason, closes Done and the telemetry channel, unregisters it from
// the server and closes the PeerConnection.
func (s *Session) end(reason EndReason) { s.endIf(reason, false) }

// endIf is end, skipped when onlyUnconnected is set and the session has connected; the check and the
// decision to end happen under one lock, so a connect racing the ICE timeout is never torn down.
func (s *Session) endIf(reason EndReason, onlyUnconnected bool) {
	s.mu.Lock()
	if s.ended != EndInvalid || (onlyUnconnected && s.connected.Load()) {
		s.mu.Unlock()
		return
	}
	s.ended = reason
	if s.iceTimer != nil {
		s.iceTimer.Stop()
	}
	close(s.telq)
	s.mu.Unlock()
	close(s.done)
	s.srv.unregister(s, reason)
	if err := s.pc.Close(); err != nil {
		s.log.Debug("close peer connection", "err", err)
	}
	s.log.Info("whip session ended", "reason", reason.String())
}

// onConnectionState reacts to PeerConnection state changes; it runs on the stack's callback goroutine, so
// anything that closes the PeerConnection is moved to its own goroutine.
func (s *Session) onConnectionState(st webrtc.PeerConnectionState) {
	s.log.Debug("peer connection state", "state", st.String())
	switch st {
	case webrtc.PeerConnectionStateConnected:
		s.mu.Lock()
		if s.ended != EndInvalid || s.connected.Load() {
			s.mu.Unlock()
			return
		}
		s.connected.Store(true)
		if s.iceTimer != nil {
			s.iceTimer.Stop()
		}
		s.mu.Unlock()
		s.log.Info("whip session connected")
		if cb := s.cfg.OnSession; cb != nil {
			go cb(s)
		}
	case webrtc.PeerConnectionStateFailed, webrtc.PeerConnectionStateClosed:
		go s.end(EndFailed)
	}
}

// onICETimeout drops a session that did not connect within Config.ICETimeout.
func (s *Session) onICETimeout() {
	if !s.connected.Load() {
		s.log.Info("whip session did not connect in time", "timeout", s.cfg.ICETimeout)
	}
	s.endIf(EndICETimeout, true)
}

// onTrack runs the read loops of the video track. Only the first VP8 video track is used; the offer check
// admits exactly one video m-line.
func (s *Session) onTrack(track *webrtc.TrackRemote, recv *webrtc.RTPReceiver) {
	if track.Kind() != webrtc.RTPCodecTypeVideo || !strings.EqualFold(track.Codec().MimeType, webrtc.MimeTypeVP8) {
		s.log.Warn("ignoring track", "kind", track.Kind().String(), "codec", track.Codec().MimeType)
		return
	}
	s.mu.Lock()
	if s.hasTrack {
		s.mu.Unlock()
		s.log.Warn("ignoring second video track", "ssrc", uint32(track.SSRC()))
		return
	}
	s.hasTrack = true
	s.ssrc = uint32(track.SSRC())
	s.rx.ClockRateHz = float64(track.Codec().ClockRate)
	s.mu.Unlock()
	go s.readRTCP(recv)
	s.readRTP(track)
}

// maxConsecutiveReadErrors ends the read loop if the track keeps failing without io.EOF.
const maxConsecutiveReadErrors = 1000

func (s *Session) readRTP(track *webrtc.TrackRemote) {
	fails := 0
	for {
		pkt, _, err := track.ReadRTP()
		if err != nil {
			if errors.Is(err, io.EOF) || s.isDone() {
				return
			}
			s.mu.Lock()
			s.readErrors++
			s.mu.Unlock()
			if fails++; fails >= maxConsecutiveReadErrors {
				s.log.Warn("video track keeps failing; stop reading", "err", err)
				return
			}
			continue
		}
		fails = 0
		now := s.clock.Now()
		s.mu.Lock()
		s.rx.Add(pkt.SequenceNumber, pkt.Timestamp, len(pkt.Payload), now)
		s.mu.Unlock()
		select {
		case s.rtpq <- ingest.Arrival{Packet: pkt, At: now}:
		default:
			s.rtpDropped.Add(1)
		}
	}
}

// readRTCP drains incoming RTCP for the video receiver. Reading is required for the interceptors to see
// sender reports (the receiver-report interceptor needs them for LSR/DLSR); sender reports for the video
// SSRC are also kept for SenderReport.
func (s *Session) readRTCP(recv *webrtc.RTPReceiver) {
	fails := 0
	for {
		pkts, _, err := recv.ReadRTCP()
		if err != nil {
			// Undecodable RTCP is skipped; a reader that only fails is abandoned.
			if errors.Is(err, io.EOF) || s.isDone() || fails >= maxConsecutiveReadErrors {
				return
			}
			fails++
			continue
		}
		fails = 0
		now := s.clock.Now()
		for _, p := range pkts {
			sr, ok := p.(*rtcp.SenderReport)
			if !ok {
				continue
			}
			s.mu.Lock()
			if sr.SSRC == s.ssrc {
				s.sr = ingest.SenderReport{SSRC: sr.SSRC, NTPTime: sr.NTPTime, RTPTime: sr.RTPTime,
					PacketCount: sr.PacketCount, OctetCount: sr.OctetCount, Arrival: now}
				s.hasSR = true
				s.srCount++
			}
			s.mu.Unlock()
		}
	}
}

// onDataChannel accepts the telemetry channel and closes any other.
func (s *Session) onDataChannel(dc *webrtc.DataChannel) {
	if dc.Label() != TelemetryLabel {
		s.mu.Lock()
		s.otherChannel++
		s.mu.Unlock()
		s.log.Warn("closing data channel with unexpected label", "label", dc.Label())
		go dc.Close()
		return
	}
	ordered := dc.Ordered()
	reliable := dc.MaxRetransmits() == nil && dc.MaxPacketLifeTime() == nil
	if ordered || reliable {
		s.log.Warn("telemetry data channel is ordered or reliable: after a loss its messages wait behind each other and arrive late; open it with {ordered: false, maxRetransmits: 0}",
			"ordered", ordered, "reliable", reliable)
	}
	s.mu.Lock()
	s.telOrdered, s.telReliable = ordered, reliable
	s.mu.Unlock()
	dc.OnMessage(func(msg webrtc.DataChannelMessage) {
		now := s.clock.Now()
		s.mu.Lock()
		defer s.mu.Unlock()
		if s.ended != EndInvalid {
			return
		}
		if len(msg.Data) > s.cfg.MaxTelemetryBytes {
			s.telDropped++
			return
		}
		// msg.Data is a fresh copy made by the stack for each message, so it can be handed on.
		select {
		case s.telq <- ingest.TelemetryBytes{Data: msg.Data, Arrival: now}:
			s.telMessages++
		default:
			s.telDropped++
		}
	})
}

func (s *Session) isDone() bool {
	select {
	case <-s.done:
		return true
	default:
		return false
	}
}

// selectedPairStats returns the statistics of the ICE candidate pair the session sends on. It asks the ICE
// transport rather than PeerConnection.GetStats, which reads a field that a close started inside pion (the
// peer's SCTP abort) writes without a lock: the race detector caught it in TestOtherDataChannelClosed.
func selectedPairStats(pc *webrtc.PeerConnection) (webrtc.ICECandidatePairStats, bool) {
	sctp := pc.SCTP()
	if sctp == nil {
		return webrtc.ICECandidatePairStats{}, false
	}
	dtls := sctp.Transport()
	if dtls == nil {
		return webrtc.ICECandidatePairStats{}, false
	}
	ice := dtls.ICETransport()
	if ice == nil {
		return webrtc.ICECandidatePairStats{}, false
	}
	return ice.GetSelectedCandidatePairStats()
}
