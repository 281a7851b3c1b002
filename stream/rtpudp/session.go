package rtpudp

import (
	"context"
	"crypto/rand"
	"encoding/binary"
	"encoding/hex"
	"fmt"
	"log/slog"
	"net"
	"net/netip"
	"sync"
	"time"

	"github.com/pion/rtcp"
	"github.com/pion/rtp"

	"stopgap/stream/ingest"

	"stopgap/stream/rtpstats"
)

// EndReason tells why a session ended.
type EndReason int

// End reasons. The zero value is invalid (the session is still running).
const (
	EndInvalid   EndReason = iota // still running
	EndClosed                     // Close was called
	EndContext                    // the context given to Listen ended
	EndIdle                       // nothing accepted for Config.IdleTimeout
	EndBye                        // the source sent an RTCP BYE for its SSRC
	EndReadError                  // a socket read failed
)

// String returns the reason in lower case words.
func (r EndReason) String() string {
	switch r {
	case EndClosed:
		return "closed"
	case EndContext:
		return "context ended"
	case EndIdle:
		return "idle timeout"
	case EndBye:
		return "rtcp bye"
	case EndReadError:
		return "read error"
	}
	return "invalid"
}

// Counts are a session's counters, by what happened to each datagram.
type Counts struct {
	// RTPPackets counts RTP packets accepted and queued for ReadRTP.
	RTPPackets uint64
	// RTCPPackets counts RTCP compound datagrams parsed; SenderReports the
	// sender reports of the locked SSRC among them; OtherRTCP the RTCP
	// packets ignored (other types, other SSRCs).
	RTCPPackets, SenderReports, OtherRTCP uint64
	// Forbidden counts datagrams (on either socket) from sources not on the
	// allow list.
	Forbidden uint64
	// Malformed counts RTP/RTCP datagrams that failed to parse (too short,
	// version not 2, bad header, bad RTCP).
	Malformed uint64
	// Oversize counts RTP/RTCP datagrams longer than MaxDatagramBytes.
	Oversize uint64
	// WrongSSRC and WrongPayloadType count RTP packets of another stream.
	WrongSSRC, WrongPayloadType uint64
	// RTPQueueFull counts packets dropped because ReadRTP fell behind.
	RTPQueueFull uint64
	// PLIsSent counts RTCP PLIs written; PLIsRateLimited requests refused by
	// MinPLIInterval; ReceiverReports RTCP receiver reports written;
	// SendErrors failed writes of either.
	PLIsSent, PLIsRateLimited, ReceiverReports, SendErrors uint64
	// TelemetryForwarded counts telemetry datagrams queued on the Telemetry
	// channel; TelemetryQueueFull those dropped because it was full;
	// TelemetryOversize those longer than MaxTelemetryBytes.
	TelemetryForwarded, TelemetryQueueFull, TelemetryOversize uint64
}

// The relay reads every ingest through one interface.
var _ ingest.Session = (*Session)(nil)

// Session is one RTP/UDP ingest session; it implements ingest.Session.
// All methods are safe for concurrent use.
type Session struct {
	cfg     Config
	allow   []source
	log     *slog.Logger
	id      string
	ownSSRC uint32 // SSRC of our RTCP (PLI, RR)

	rtpConn, telConn *net.UDPConn

	rtpq    chan ingest.Arrival
	telq    chan ingest.TelemetryBytes
	done    chan struct{}
	started chan struct{}
	wg      sync.WaitGroup

	mu           sync.Mutex
	ended        EndReason
	locked       bool
	ssrc         uint32
	peer         netip.AddrPort
	havePeer     bool
	rx           rtpstats.Receiver
	sr           ingest.SenderReport
	hasSR        bool
	pendingSR    ingest.SenderReport // latest SR seen before the SSRC was locked
	hasPending   bool
	lastActivity time.Time
	lastPLI      time.Time
	lastRR       time.Time
	cnt          Counts
}

// Listen binds the RTP/RTCP socket (and the telemetry socket if
// cfg.TelemetryAddr is set) and starts the session's readers. The session
// ends when ctx ends, on Close, on an RTCP BYE, or after cfg.IdleTimeout
// without traffic once traffic started. Close it to release the sockets.
func Listen(ctx context.Context, cfg Config) (*Session, error) {
	s, err := newSession(cfg)
	if err != nil {
		return nil, err
	}
	haveAllow := len(s.allow) > 0
	ua, err := resolveListen(ctx, "RTP address", s.cfg.RTPAddr, haveAllow)
	if err != nil {
		return nil, err
	}
	var ta *net.UDPAddr
	if s.cfg.TelemetryAddr != "" {
		if ta, err = resolveListen(ctx, "telemetry address", s.cfg.TelemetryAddr, haveAllow); err != nil {
			return nil, err
		}
	}
	if s.rtpConn, err = net.ListenUDP("udp", ua); err != nil {
		return nil, fmt.Errorf("rtpudp: listen for RTP on %s: %w", s.cfg.RTPAddr, err)
	}
	if ta != nil {
		if s.telConn, err = net.ListenUDP("udp", ta); err != nil {
			s.rtpConn.Close()
			return nil, fmt.Errorf("rtpudp: listen for telemetry on %s: %w", s.cfg.TelemetryAddr, err)
		}
	}
	s.log = s.cfg.Logger.With("session", s.id[:8])
	s.log.Info("rtp/udp ingest listening", "rtp", s.rtpConn.LocalAddr().String(),
		"telemetry", addrString(s.telConn), "allowed_sources", len(s.allow))
	s.wg.Add(2)
	go s.readRTPLoop()
	go s.housekeeping(ctx)
	if s.telConn != nil {
		s.wg.Add(1)
		go s.readTelemetryLoop()
	}
	return s, nil
}

// newSession builds a session without sockets (Listen adds them; the fuzz
// target uses it bare).
func newSession(cfg Config) (*Session, error) {
	cfg, srcs, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	var rb [12]byte
	if _, err := rand.Read(rb[:]); err != nil {
		return nil, fmt.Errorf("rtpudp: session id: %w", err)
	}
	s := &Session{
		cfg: cfg, allow: srcs, log: cfg.Logger,
		id:      hex.EncodeToString(rb[:8]),
		ownSSRC: binary.BigEndian.Uint32(rb[8:]),
		rtpq:    make(chan ingest.Arrival, cfg.RTPQueue),
		telq:    make(chan ingest.TelemetryBytes, cfg.TelemetryQueue),
		done:    make(chan struct{}),
		started: make(chan struct{}),
	}
	return s, nil
}

func addrString(c *net.UDPConn) string {
	if c == nil {
		return ""
	}
	return c.LocalAddr().String()
}

// ID returns a random hexadecimal session id.
func (s *Session) ID() string { return s.id }

// RTPAddr returns the local address of the RTP/RTCP socket (nil without one).
func (s *Session) RTPAddr() net.Addr {
	if s.rtpConn == nil {
		return nil
	}
	return s.rtpConn.LocalAddr()
}

// TelemetryAddr returns the local address of the telemetry socket, or nil.
func (s *Session) TelemetryAddr() net.Addr {
	if s.telConn == nil {
		return nil
	}
	return s.telConn.LocalAddr()
}

// Started is closed when the first RTP packet was accepted.
func (s *Session) Started() <-chan struct{} { return s.started }

// Done is closed when the session has ended; EndReason then says why.
func (s *Session) Done() <-chan struct{} { return s.done }

// EndReason returns why the session ended, or EndInvalid while it runs.
func (s *Session) EndReason() EndReason {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.ended
}

// Close ends the session, closes its sockets and waits for its goroutines.
// It always returns nil.
func (s *Session) Close() error {
	s.end(EndClosed)
	s.wg.Wait()
	return nil
}

// end ends the session once. It does not wait for goroutines, so they may
// call it.
func (s *Session) end(r EndReason) {
	s.mu.Lock()
	if s.ended != EndInvalid {
		s.mu.Unlock()
		return
	}
	s.ended = r
	s.mu.Unlock()
	close(s.done)
	if s.rtpConn != nil {
		s.rtpConn.Close()
	}
	if s.telConn != nil {
		s.telConn.Close() // readTelemetryLoop closes telq on its way out
	} else {
		close(s.telq)
	}
	s.log.Info("rtp/udp ingest session ended", "reason", r.String())
}

// ReadRTP returns the next accepted RTP packet with its receiver-clock
// arrival time, blocking until one is queued, ctx ends, or the session ends
// (packets still queued are returned first, then ErrSessionClosed). The
// packet and its payload belong to the caller. Packets come in arrival
// order; reordering, gaps and duplicates are left to the depacketiser.
func (s *Session) ReadRTP(ctx context.Context) (*rtp.Packet, time.Time, error) {
	return ingest.ReadQueued(ctx, s.rtpq, s.done, ErrSessionClosed)
}

// Telemetry returns the channel of raw telemetry datagrams with their
// arrival times (decode them with telemetry.Decode). It is closed after the
// session ends; without a telemetry socket it only closes. When it is full,
// new datagrams are dropped and counted.
func (s *Session) Telemetry() <-chan ingest.TelemetryBytes { return s.telq }

// RequestKeyframe sends an RTCP Picture Loss Indication (RFC 4585 section
// 6.3.1) for the locked SSRC to the source's address. It returns ErrNoSource
// before the source is known, ErrKeyframeRateLimited within MinPLIInterval of
// the previous PLI (counted), and ErrSessionClosed after the end.
func (s *Session) RequestKeyframe() error {
	s.mu.Lock()
	if s.ended != EndInvalid {
		s.mu.Unlock()
		return ErrSessionClosed
	}
	if !s.locked || !s.havePeer {
		s.mu.Unlock()
		return ErrNoSource
	}
	now := s.cfg.Now()
	if !s.lastPLI.IsZero() && now.Sub(s.lastPLI) < MinPLIInterval {
		s.cnt.PLIsRateLimited++
		s.mu.Unlock()
		return ErrKeyframeRateLimited
	}
	s.lastPLI = now
	pli := &rtcp.PictureLossIndication{SenderSSRC: s.ownSSRC, MediaSSRC: s.ssrc}
	to := s.peer
	s.mu.Unlock()
	b, err := pli.Marshal()
	if err == nil {
		err = s.write(b, to)
	}
	s.mu.Lock()
	if err != nil {
		s.cnt.SendErrors++
	} else {
		s.cnt.PLIsSent++
	}
	s.mu.Unlock()
	if err != nil {
		return fmt.Errorf("rtpudp: send PLI to %s: %w", to, err)
	}
	return nil
}

// write sends one RTCP datagram from the RTP socket (so the source sees our
// feedback come from the port it sends to).
func (s *Session) write(b []byte, to netip.AddrPort) error {
	if s.rtpConn == nil {
		return nil // bare session (fuzzing): nothing to send on
	}
	_, err := s.rtpConn.WriteToUDPAddrPort(b, to)
	return err
}

// SenderReport returns the latest RTCP sender report of the locked SSRC
// (NTP/RTP timestamp pair, RFC 3550 section 6.4.1, with its arrival time);
// ok is false until one arrived.
func (s *Session) SenderReport() (ingest.SenderReport, bool) {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.sr, s.hasSR
}

// Counts returns a snapshot of the session's counters.
func (s *Session) Counts() Counts {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.cnt
}

// Stats returns the link statistics the relay shows. Fields this transport
// cannot fill stay zero: no NACKs are sent (there is no retransmission on
// plain RTP here), no RTT is measured (a receiver learns RTT only from XR
// DLRR, which is not implemented), and OtherDataChannels has no meaning.
// ReadErrors counts malformed and oversize datagrams; PacketsDropped packets
// dropped for a full queue; TelemetryDropped telemetry datagrams dropped for
// a full queue or their size.
func (s *Session) Stats() ingest.Stats {
	s.mu.Lock()
	defer s.mu.Unlock()
	return ingest.Stats{
		PacketsReceived:   s.rx.Received(),
		BytesReceived:     s.rx.Bytes(),
		PaddingPackets:    s.rx.Padding(),
		PacketsLost:       s.rx.Lost(),
		HighestSeq:        s.rx.ExtendedMax(),
		JitterRTP:         s.rx.JitterRTP(),
		Jitter:            time.Duration(s.rx.JitterRTP() / ingest.VideoClockRateHz * float64(time.Second)),
		PacketsDropped:    s.cnt.RTPQueueFull,
		ReadErrors:        s.cnt.Malformed + s.cnt.Oversize,
		PLIsSent:          s.cnt.PLIsSent,
		PLIsSuppressed:    s.cnt.PLIsRateLimited,
		SenderReports:     s.cnt.SenderReports,
		TelemetryMessages: s.cnt.TelemetryForwarded,
		TelemetryDropped:  s.cnt.TelemetryQueueFull + s.cnt.TelemetryOversize,
	}
}

// readRTPLoop reads the RTP/RTCP socket until it is closed. The buffer is one
// octet longer than MaxDatagramBytes so oversize datagrams are recognised.
func (s *Session) readRTPLoop() {
	defer s.wg.Done()
	buf := make([]byte, s.cfg.MaxDatagramBytes+1)
	for {
		n, from, err := s.rtpConn.ReadFromUDPAddrPort(buf)
		if err != nil {
			if s.EndReason() == EndInvalid {
				s.log.Warn("rtp socket read failed", "err", err)
				s.end(EndReadError)
			}
			return
		}
		s.handleDatagram(buf[:n], from, s.cfg.Now())
	}
}

// handleDatagram classifies one datagram from the RTP/RTCP socket and
// handles it. b is only read during the call (the caller reuses it).
func (s *Session) handleDatagram(b []byte, from netip.AddrPort, now time.Time) {
	if !allowed(s.allow, from) {
		s.count(func(c *Counts) { c.Forbidden++ })
		return
	}
	if len(b) > s.cfg.MaxDatagramBytes {
		s.count(func(c *Counts) { c.Oversize++ })
		return
	}
	// RFC 5761 section 4: version 2, and the second octet without the marker
	// bit in 64..95 means RTCP (packet types 192..223).
	if len(b) < 2 || b[0]>>6 != 2 {
		s.count(func(c *Counts) { c.Malformed++ })
		return
	}
	if pt := b[1] & 0x7f; pt >= 64 && pt <= 95 {
		s.handleRTCP(b, from, now)
		return
	}
	s.handleRTP(b, from, now)
}

func (s *Session) count(f func(*Counts)) {
	s.mu.Lock()
	f(&s.cnt)
	s.mu.Unlock()
}

// handleRTP parses, filters, accounts and queues one RTP packet.
func (s *Session) handleRTP(b []byte, from netip.AddrPort, now time.Time) {
	own := make([]byte, len(b)) // the queued packet owns its bytes
	copy(own, b)
	pkt := &rtp.Packet{}
	if err := pkt.Unmarshal(own); err != nil {
		s.count(func(c *Counts) { c.Malformed++ })
		return
	}
	s.mu.Lock()
	if pkt.PayloadType != s.cfg.PayloadType {
		s.cnt.WrongPayloadType++
		s.mu.Unlock()
		return
	}
	if !s.locked {
		if s.cfg.SSRC != 0 && pkt.SSRC != s.cfg.SSRC {
			s.cnt.WrongSSRC++
			s.mu.Unlock()
			return
		}
		s.locked, s.ssrc = true, pkt.SSRC
		if s.hasPending && s.pendingSR.SSRC == pkt.SSRC && !s.hasSR {
			s.sr, s.hasSR = s.pendingSR, true // a report that came before the first packet
			s.cnt.SenderReports++
		}
		s.log.Info("rtp source locked", "ssrc", pkt.SSRC, "from", from.String())
	} else if pkt.SSRC != s.ssrc {
		s.cnt.WrongSSRC++
		s.mu.Unlock()
		return
	}
	first := s.rx.Received() == 0
	s.rx.Add(pkt.SequenceNumber, pkt.Timestamp, len(pkt.Payload), now)
	s.peer, s.havePeer = from, true
	s.lastActivity = now
	select {
	case s.rtpq <- ingest.Arrival{Packet: pkt, At: now}:
		s.cnt.RTPPackets++
	default:
		s.cnt.RTPQueueFull++
	}
	s.mu.Unlock()
	if first {
		close(s.started)
	}
}

// handleRTCP parses one RTCP compound datagram and keeps what concerns the
// locked stream: sender reports and BYE.
func (s *Session) handleRTCP(b []byte, from netip.AddrPort, now time.Time) {
	pkts, err := rtcp.Unmarshal(b)
	if err != nil {
		s.count(func(c *Counts) { c.Malformed++ })
		return
	}
	bye := false
	s.mu.Lock()
	s.cnt.RTCPPackets++
	want, known := s.ssrc, s.locked
	if !known && s.cfg.SSRC != 0 {
		want, known = s.cfg.SSRC, true
	}
	for _, p := range pkts {
		switch p := p.(type) {
		case *rtcp.SenderReport:
			sr := ingest.SenderReport{SSRC: p.SSRC, NTPTime: p.NTPTime, RTPTime: p.RTPTime,
				PacketCount: p.PacketCount, OctetCount: p.OctetCount, Arrival: now}
			if !known {
				// Kept until the first RTP packet tells which SSRC to lock onto.
				s.pendingSR, s.hasPending = sr, true
				s.cnt.OtherRTCP++
				continue
			}
			if p.SSRC != want {
				s.cnt.OtherRTCP++
				continue
			}
			s.sr, s.hasSR = sr, true
			s.cnt.SenderReports++
			s.lastActivity = now
			if !s.havePeer || !s.locked {
				s.peer, s.havePeer = from, true
			}
		case *rtcp.Goodbye:
			for _, ss := range p.Sources {
				if s.locked && ss == s.ssrc {
					bye = true
				}
			}
			if !bye {
				s.cnt.OtherRTCP++
			}
		default:
			s.cnt.OtherRTCP++
		}
	}
	s.mu.Unlock()
	if bye {
		s.end(EndBye)
	}
}

// readTelemetryLoop forwards telemetry datagrams until the socket closes,
// then closes the Telemetry channel (it is its only sender).
func (s *Session) readTelemetryLoop() {
	defer s.wg.Done()
	defer close(s.telq)
	buf := make([]byte, s.cfg.MaxTelemetryBytes+1)
	for {
		n, from, err := s.telConn.ReadFromUDPAddrPort(buf)
		if err != nil {
			if s.EndReason() == EndInvalid {
				s.log.Warn("telemetry socket read failed", "err", err)
				s.end(EndReadError)
			}
			return
		}
		s.handleTelemetry(buf[:n], from, s.cfg.Now())
	}
}

// handleTelemetry queues a copy of one telemetry datagram.
func (s *Session) handleTelemetry(b []byte, from netip.AddrPort, now time.Time) {
	if !allowed(s.allow, from) {
		s.count(func(c *Counts) { c.Forbidden++ })
		return
	}
	if len(b) > s.cfg.MaxTelemetryBytes {
		s.count(func(c *Counts) { c.TelemetryOversize++ })
		return
	}
	own := make([]byte, len(b))
	copy(own, b)
	s.mu.Lock()
	defer s.mu.Unlock()
	select {
	case s.telq <- ingest.TelemetryBytes{Data: own, Arrival: now}:
		s.cnt.TelemetryForwarded++
	default:
		s.cnt.TelemetryQueueFull++
	}
}

// housekeeping ends the session on ctx or idleness and sends receiver
// reports. It polls every 50 ms of real time and judges with cfg.Now.
func (s *Session) housekeeping(ctx context.Context) {
	defer s.wg.Done()
	t := time.NewTicker(50 * time.Millisecond)
	defer t.Stop()
	for {
		select {
		case <-s.done:
			return
		case <-ctx.Done():
			s.end(EndContext)
			return
		case <-t.C:
		}
		now := s.cfg.Now()
		s.mu.Lock()
		idle := s.cfg.IdleTimeout > 0 && !s.lastActivity.IsZero() && now.Sub(s.lastActivity) >= s.cfg.IdleTimeout
		var rr []byte
		var to netip.AddrPort
		if s.cfg.ReportInterval > 0 && s.locked && s.havePeer && (s.lastRR.IsZero() || now.Sub(s.lastRR) >= s.cfg.ReportInterval) {
			s.lastRR = now
			rr, to = s.receiverReportLocked(now), s.peer
		}
		s.mu.Unlock()
		if idle {
			s.end(EndIdle)
			return
		}
		if rr != nil {
			err := s.write(rr, to)
			s.count(func(c *Counts) {
				if err != nil {
					c.SendErrors++
				} else {
					c.ReceiverReports++
				}
			})
		}
	}
}

// receiverReportLocked builds an RTCP RR (RFC 3550 section 6.4.2) for the
// locked SSRC; s.mu is held. It starts a new loss interval.
func (s *Session) receiverReportLocked(now time.Time) []byte {
	rep := rtcp.ReceptionReport{
		SSRC:               s.ssrc,
		FractionLost:       s.rx.FractionLost(),
		TotalLost:          s.rx.CumulativeLost24(),
		LastSequenceNumber: s.rx.ExtendedMax(),
		Jitter:             uint32(s.rx.JitterRTP()),
	}
	if s.hasSR {
		// LSR: middle 32 bits of the SR's NTP timestamp; DLSR: delay since
		// its arrival in units of 1/65536 s (RFC 3550 section 6.4.1).
		rep.LastSenderReport = uint32(s.sr.NTPTime >> 16)
		if d := now.Sub(s.sr.Arrival); d > 0 {
			rep.Delay = uint32(d.Seconds() * 65536)
		}
	}
	b, err := (&rtcp.ReceiverReport{SSRC: s.ownSSRC, Reports: []rtcp.ReceptionReport{rep}}).Marshal()
	if err != nil {
		return nil
	}
	return b
}
