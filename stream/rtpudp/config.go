package rtpudp

import (
	"context"
	"fmt"
	"log/slog"
	"net"
	"net/netip"
	"strings"
	"time"
)

// Defaults for zero Config fields.
const (
	// DefaultPayloadType is the RTP payload type expected for VP8 (the first
	// dynamic type, RFC 3551 section 6; VP8 has no static type).
	DefaultPayloadType = 96
	// DefaultRTPQueue is the number of parsed RTP packets held for ReadRTP:
	// about 1.5 s of 2 Mbit/s video in 1200-octet packets.
	DefaultRTPQueue = 512
	// DefaultTelemetryQueue is the number of telemetry datagrams held for the
	// Telemetry channel.
	DefaultTelemetryQueue = 256
	// DefaultMaxDatagramBytes is the largest RTP/RTCP datagram accepted; the
	// Ethernet MTU (common practice: RTP senders keep packets under the path
	// MTU to avoid IP fragmentation).
	DefaultMaxDatagramBytes = 1500
	// DefaultMaxTelemetryBytes is the largest telemetry datagram forwarded
	// (telemetry.MaxMessageBytes, 1024, from that package).
	DefaultMaxTelemetryBytes = 1024
	// DefaultIdleTimeout ends a session when nothing was accepted for this
	// long after its first packet.
	DefaultIdleTimeout = 5 * time.Second
	// DefaultReportInterval is the spacing of RTCP receiver reports. RFC 3550
	// section 6.2 suggests a 5 s minimum for large sessions; a point-to-point
	// link may report more often (RFC 4585 section 3.4 allows reduced
	// minimum intervals), and one second is what the brief asked for.
	DefaultReportInterval = time.Second
	// MinPLIInterval is the shortest spacing of two PLIs sent by
	// RequestKeyframe.
	MinPLIInterval = 100 * time.Millisecond
)

// Config configures Listen. The zero value is not enough: RTPAddr is
// required.
type Config struct {
	// RTPAddr is the UDP address to receive RTP and RTCP on (host:port, e.g.
	// "127.0.0.1:5004"; port 0 picks a free port, see Session.RTPAddr).
	RTPAddr string
	// TelemetryAddr, if not empty, is a UDP address to receive telemetry
	// datagrams on (one message per datagram).
	TelemetryAddr string
	// AllowedSources lists the sources admitted on both sockets: an IP
	// ("192.0.2.7") admits any port of that host, an IP:port
	// ("192.0.2.7:5004", "[2001:db8::7]:5004") only that port. Datagrams from
	// other sources are dropped and counted. Empty admits everyone, which
	// Listen allows only on loopback addresses (ErrNeedAllowList). Give a
	// bare IP if the camera sends telemetry from another port than video.
	AllowedSources []string
	// PayloadType is the RTP payload type of the VP8 stream (0 means
	// DefaultPayloadType). Values 64..95 collide with RTCP (RFC 5761) and are
	// refused.
	PayloadType uint8
	// SSRC is the expected RTP synchronisation source; 0 locks onto the
	// first SSRC seen.
	SSRC uint32
	// RTPQueue and TelemetryQueue bound the queues (0 means DefaultRTPQueue,
	// DefaultTelemetryQueue).
	RTPQueue, TelemetryQueue int
	// MaxDatagramBytes is the largest RTP/RTCP datagram accepted (0 means
	// DefaultMaxDatagramBytes); MaxTelemetryBytes the largest telemetry
	// datagram (0 means DefaultMaxTelemetryBytes). Longer ones are dropped
	// and counted.
	MaxDatagramBytes, MaxTelemetryBytes int
	// IdleTimeout ends the session when nothing was accepted for this long
	// after the first packet (0 means DefaultIdleTimeout; negative never).
	IdleTimeout time.Duration
	// ReportInterval is the spacing of RTCP receiver reports sent to the
	// source (0 means DefaultReportInterval; negative sends none).
	ReportInterval time.Duration
	// Logger receives structured logs (nil means slog.Default()).
	Logger *slog.Logger
	// Now is the receiver clock for arrival times, jitter and rate limits
	// (nil means time.Now).
	Now func() time.Time
}

// source is one parsed AllowedSources entry; port 0 means any port.
type source struct {
	ip   netip.Addr
	port uint16
}

// parseSources parses AllowedSources entries.
func parseSources(list []string) ([]source, error) {
	out := make([]source, 0, len(list))
	for _, s := range list {
		s = strings.TrimSpace(s)
		if s == "" {
			continue
		}
		if ap, err := netip.ParseAddrPort(s); err == nil {
			if ap.Port() == 0 {
				return nil, fmt.Errorf("%w: allowed source %q: port 0; give a bare IP to admit any port", ErrBadConfig, s)
			}
			out = append(out, source{ip: ap.Addr().Unmap(), port: ap.Port()})
			continue
		}
		ip, err := netip.ParseAddr(strings.Trim(s, "[]"))
		if err != nil {
			return nil, fmt.Errorf("%w: allowed source %q is neither an IP nor an IP:port (host names are not resolved)", ErrBadConfig, s)
		}
		out = append(out, source{ip: ip.Unmap().WithZone("")})
	}
	return out, nil
}

// allowed reports whether from is admitted by list (an empty list admits all).
func allowed(list []source, from netip.AddrPort) bool {
	if len(list) == 0 {
		return true
	}
	ip := from.Addr().Unmap().WithZone("")
	for _, s := range list {
		if s.ip == ip && (s.port == 0 || s.port == from.Port()) {
			return true
		}
	}
	return false
}

// withDefaults validates cfg and fills zero fields.
func (cfg Config) withDefaults() (Config, []source, error) {
	if cfg.RTPAddr == "" {
		return cfg, nil, fmt.Errorf("%w: RTPAddr is required (e.g. 127.0.0.1:5004)", ErrBadConfig)
	}
	if cfg.PayloadType == 0 {
		cfg.PayloadType = DefaultPayloadType
	}
	if cfg.PayloadType > 127 || (cfg.PayloadType >= 64 && cfg.PayloadType <= 95) {
		return cfg, nil, fmt.Errorf("%w: payload type %d: must be 0..127 and outside 64..95, which RTCP uses (RFC 5761)", ErrBadConfig, cfg.PayloadType)
	}
	if cfg.RTPQueue < 0 || cfg.TelemetryQueue < 0 || cfg.MaxDatagramBytes < 0 || cfg.MaxTelemetryBytes < 0 {
		return cfg, nil, fmt.Errorf("%w: queue and datagram sizes must not be negative", ErrBadConfig)
	}
	if cfg.RTPQueue == 0 {
		cfg.RTPQueue = DefaultRTPQueue
	}
	if cfg.TelemetryQueue == 0 {
		cfg.TelemetryQueue = DefaultTelemetryQueue
	}
	if cfg.MaxDatagramBytes == 0 {
		cfg.MaxDatagramBytes = DefaultMaxDatagramBytes
	}
	if cfg.MaxDatagramBytes < 12 || cfg.MaxDatagramBytes > 65507 {
		return cfg, nil, fmt.Errorf("%w: MaxDatagramBytes %d: must be 12..65507", ErrBadConfig, cfg.MaxDatagramBytes)
	}
	if cfg.MaxTelemetryBytes == 0 {
		cfg.MaxTelemetryBytes = DefaultMaxTelemetryBytes
	}
	if cfg.MaxTelemetryBytes > 65507 {
		return cfg, nil, fmt.Errorf("%w: MaxTelemetryBytes %d: at most 65507", ErrBadConfig, cfg.MaxTelemetryBytes)
	}
	if cfg.IdleTimeout == 0 {
		cfg.IdleTimeout = DefaultIdleTimeout
	}
	if cfg.ReportInterval == 0 {
		cfg.ReportInterval = DefaultReportInterval
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.Default()
	}
	if cfg.Now == nil {
		cfg.Now = time.Now
	}
	srcs, err := parseSources(cfg.AllowedSources)
	if err != nil {
		return cfg, nil, err
	}
	return cfg, srcs, nil
}

// resolveListen resolves addr and enforces the allow-list rule for
// non-loopback addresses. what names the setting in errors.
func resolveListen(ctx context.Context, what, addr string, haveAllow bool) (*net.UDPAddr, error) {
	host, port, err := net.SplitHostPort(addr)
	if err != nil {
		return nil, fmt.Errorf("%w: %s %q: %w", ErrBadConfig, what, addr, err)
	}
	var ip netip.Addr
	if host != "" {
		if host == "localhost" {
			host = "127.0.0.1"
		}
		ips, err := net.DefaultResolver.LookupNetIP(ctx, "ip", host)
		if err != nil || len(ips) == 0 {
			return nil, fmt.Errorf("%w: %s %q: cannot resolve host: %v", ErrBadConfig, what, addr, err)
		}
		ip = ips[0].Unmap()
	}
	if !haveAllow && (!ip.IsValid() || !ip.IsLoopback()) {
		return nil, fmt.Errorf("%s %s: %w", what, addr, ErrNeedAllowList)
	}
	ua, err := net.ResolveUDPAddr("udp", net.JoinHostPort(ip.String(), port))
	if !ip.IsValid() {
		ua, err = net.ResolveUDPAddr("udp", ":"+port)
	}
	if err != nil {
		return nil, fmt.Errorf("%w: %s %q: %w", ErrBadConfig, what, addr, err)
	}
	return ua, nil
}
