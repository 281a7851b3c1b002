package whip

import (
	"fmt"
	"log/slog"
	"net"
	"time"

	"github.com/pion/ice/v4"
)

// Clock is the time source of the server and its sessions: arrival timestamps, rate limiting, keyframe
// request spacing and the ICE connect timeout all use it, so tests can run them on a fake clock.
// Timers inside the WebRTC stack itself (ICE keepalives, DTLS retransmits, NACK and RTCP intervals) always
// run on the system clock.
type Clock interface {
	// Now returns the current time on the receiver clock.
	Now() time.Time
	// AfterFunc calls f in its own goroutine after d, unless stopped first (like time.AfterFunc).
	AfterFunc(d time.Duration, f func()) Stopper
}

// Stopper stops a pending AfterFunc call. *time.Timer implements it.
type Stopper interface {
	// Stop prevents the call if it has not started and reports whether it did so.
	Stop() bool
}

// SystemClock is the Clock backed by the time package. Its zero value is ready to use.
type SystemClock struct{}

// Now returns time.Now().
func (SystemClock) Now() time.Time { return time.Now() }

// AfterFunc wraps time.AfterFunc.
func (SystemClock) AfterFunc(d time.Duration, f func()) Stopper { return time.AfterFunc(d, f) }

// Network configures which addresses the WebRTC stack gathers ICE candidates on. The zero value gathers host
// candidates on every non-loopback interface with a random UDP port per session. A deployment behind NAT
// or a firewall typically sets UDPPort (one port to open) and NAT1To1IPs (the public address to announce). Multicast DNS (".local")
// candidates are always disabled: a vehicle on a cellular link cannot resolve them and they only delay ICE.
// No STUN or TURN servers are used (server side: host candidates, plus NAT1To1IPs if set).
type Network struct {
	// LoopbackOnly gathers only 127.0.0.1 candidates over UDP/IPv4: nothing is sent or received beyond the
	// loopback interface. Use it for tests, demos and a vehicle simulator on the same host.
	LoopbackOnly bool
	// IncludeLoopback offers loopback candidates (127.0.0.1, ::1) besides the other interfaces', for a
	// sender on the same host. Off by default: a remote vehicle cannot reach them.
	IncludeLoopback bool
	// Interfaces, if not empty, limits gathering to the network interfaces with these names (e.g. "eth0");
	// loopback still needs IncludeLoopback.
	Interfaces []string
	// UDPPort, if not zero, makes NewServer open this one UDP port on every gathered address and carry the
	// ICE traffic of all sessions on it (pion's UDP mux), so a firewall needs one rule; Server.Close
	// closes it. Zero gives each session random ports. Ignored when UDPMux is set.
	UDPPort int
	// UDPMux, if set, carries the ICE traffic of all sessions on one UDP socket (one port to open in a
	// firewall), e.g. webrtc.NewICEUDPMux(nil, conn) over a net.ListenUDP socket. The caller owns it and
	// closes it after the server.
	UDPMux ice.UDPMux
	// NAT1To1IPs, if set, replaces the host candidate addresses in answers with these public addresses
	// (for a server behind a static 1:1 NAT).
	NAT1To1IPs []string
}

// keepInterface reports whether gathering uses the interface named name.
func (n Network) keepInterface(name string) bool {
	if len(n.Interfaces) == 0 {
		return true
	}
	for _, v := range n.Interfaces {
		if v == name {
			return true
		}
	}
	return false
}

// validate checks the Network fields.
func (n Network) validate() error {
	if n.UDPPort < 0 || n.UDPPort > 65535 {
		return fmt.Errorf("%w: Network.UDPPort %d, want 1..65535 (0 = a random port per session)", ErrBadConfig, n.UDPPort)
	}
	for _, ip := range n.NAT1To1IPs {
		if net.ParseIP(ip) == nil {
			return fmt.Errorf("%w: Network.NAT1To1IPs: %q is not an IP address", ErrBadConfig, ip)
		}
	}
	return nil
}

// Config configures a Server. Zero values select the documented defaults; only Token is required.
type Config struct {
	// Token is the bearer token (RFC 6750) every request but the CORS preflight must present in
	// "Authorization: Bearer <token>". Compared in constant time; never logged. Required.
	Token string

	// MaxSessions bounds the concurrent sessions, including ones still connecting (default 4). Beyond it a
	// POST gets 503 with Retry-After.
	MaxSessions int
	// ICETimeout is how long a session may stay unconnected (ICE and DTLS) after its answer was sent before
	// it is dropped, so POST floods cannot pin resources (RFC 9725 section 7). Default 10 s.
	ICETimeout time.Duration
	// MaxOfferBytes bounds the POST body (default 64 KiB; real offers are 2-6 KiB). Larger bodies get 413.
	MaxOfferBytes int64
	// PostRatePerS and PostBurst configure the per-remote-IP token bucket on POST: a burst of PostBurst
	// requests, refilled at PostRatePerS per second (defaults 1/s and 5). Every POST takes a token before
	// authentication, which also slows token guessing. Exceeding it gets 429 with Retry-After.
	// The remote address is the TCP peer (http.Request.RemoteAddr); proxy headers are not trusted.
	PostRatePerS float64
	PostBurst    int

	// MinKeyframeInterval is the least spacing between two PLIs sent by Session.RequestKeyframe (default
	// 100 ms). RFC 4585 section 3.5.2 lets a point-to-point receiver send feedback without random delay; the
	// spacing keeps a tight retry loop from flooding the sender. Requests inside the interval are refused
	// with ErrKeyframeRateLimited and counted. A re-request every 200 ms while waiting for a keyframe
	// (common practice) fits within the default.
	MinKeyframeInterval time.Duration
	// MaxNACKsPerPacket caps how often one missing packet is NACKed (default 3). The first NACK goes out as
	// soon as the gap is seen; each repeat waits one retransmission timeout (RFC 6298: smoothed round trip
	// plus four deviations, at least NACKMinInterval). After that the packet is given up: on a live link a
	// packet older than a few RTTs is useless, and unbounded NACKs add load exactly when the link is already
	// lossy. A keyframe request (RequestKeyframe) cancels every pending NACK.
	MaxNACKsPerPacket uint16
	// NACKMinInterval is the least spacing of two NACKs of one packet (default DefaultNACKMinInterval).
	NACKMinInterval time.Duration
	// RepairWindow is how long after a gap was seen its packets are still asked for (default
	// DefaultRepairWindow); a gap seen after a silence longer than this (an outage) is not asked for.
	RepairWindow time.Duration
	// MaxNACKGap is the largest sequence number gap asked for, in packets (default DefaultMaxNACKGap).
	MaxNACKGap int
	// ReceiverReportInterval is the RTCP receiver report interval (default 1 s).
	ReceiverReportInterval time.Duration
	// SenderStartKbps is the bitrate, in kbit/s, the answer asks the vehicle's sender to start its
	// congestion control from (StartBitrateParam on the VP8 fmtp line; Chromium-based senders honour
	// it, others ignore it). Default DefaultSenderStartKbps; SenderStartOwn leaves the sender's own
	// start (Chromium's is a few hundred kbit/s). The sender still backs off from it on a weaker link.
	SenderStartKbps int

	// RTPQueue is the capacity, in packets, of each session's RTP queue (default 1024, about 1 s of 8 Mbit/s
	// video). When the consumer falls behind, new packets are dropped and counted; queued ones are kept.
	RTPQueue int
	// TelemetryQueue is the capacity, in messages, of each session's telemetry queue (default 256).
	TelemetryQueue int
	// MaxTelemetryBytes drops (and counts) data channel messages larger than this (default 16 KiB).
	MaxTelemetryBytes int

	// AllowOrigin is the CORS Access-Control-Allow-Origin value (default "*": safe because authentication is
	// a bearer header, never a cookie).
	AllowOrigin string
	// Network configures ICE candidate gathering.
	Network Network

	// OnSession, if set, is called once per session, in its own goroutine, when the session's ICE and DTLS
	// are connected. Half-open sessions never reach it.
	OnSession func(*Session)
	// Logger receives server and session events and the WebRTC stack's messages (default: discard).
	Logger *slog.Logger
	// Clock defaults to SystemClock.
	Clock Clock
}

// Defaults applied by NewServer for zero Config fields.
const (
	DefaultMaxSessions            = 4
	DefaultICETimeout             = 10 * time.Second
	DefaultMaxOfferBytes          = 64 << 10
	DefaultPostRatePerS           = 1.0
	DefaultPostBurst              = 5
	DefaultMinKeyframeInterval    = 100 * time.Millisecond
	DefaultMaxNACKsPerPacket      = 3
	DefaultReceiverReportInterval = time.Second
	DefaultRTPQueue               = 1024
	DefaultTelemetryQueue         = 256
	DefaultMaxTelemetryBytes      = 16 << 10
)

// DefaultSenderStartKbps is the default Config.SenderStartKbps: below the estimate a Chromium sender's
// own start-up probing reached in its first second on a link that carries it (2.65 to 3.95 Mbit/s in 38
// of 40 measured sessions, 1.22 and 1.24 in the others, which then climbed 0.1 Mbit/s a second), and
// above what its encoder sends (1.7 Mbit/s at 640x360). Started there, the estimate stood at 4.5 to 6.6
// Mbit/s after a second in all 40; on a 1 Mbit/s uplink it fell below 1 Mbit/s within about 2 s, as it did from
// the browser's own start (DEVELOPERS.md, acceptance runs of the live path).
const DefaultSenderStartKbps = 2500

// SenderStartOwn as Config.SenderStartKbps leaves the answer without a start bitrate: the sender starts
// from its own.
const SenderStartOwn = -1

// maxSenderStartKbps bounds Config.SenderStartKbps: more than any vehicle uplink this is made for.
const maxSenderStartKbps = 100_000

// ICE consent freshness (RFC 7675) of a connected session: the stack sends a consent check (STUN binding
// request) every ConsentCheckInterval; without any response for DisconnectedAfter the path is reported
// disconnected, and ConsentExpiry after the last response consent has expired and the session ends
// (EndFailed). RFC 7675 section 5.1 sets consent to expire 30 s after the last successful check. A
// vehicle that dies without a DELETE is therefore let go ConsentExpiry (plus up to one check interval)
// after its last packet; a link that comes back before then keeps its session.
const (
	ConsentCheckInterval = 2 * time.Second
	DisconnectedAfter    = 5 * time.Second
	ConsentExpiry        = 30 * time.Second
)

// TelemetryLabel is the label of the data channel carrying telemetry. Channels with other labels are closed
// and counted.
const TelemetryLabel = "telemetry"

// withDefaults validates c and fills zero fields.
func (c Config) withDefaults() (Config, error) {
	if c.Token == "" {
		return c, ErrNoToken
	}
	if c.MaxSessions < 0 || c.ICETimeout < 0 || c.MaxOfferBytes < 0 || c.PostRatePerS < 0 || c.PostBurst < 0 ||
		c.MinKeyframeInterval < 0 || c.ReceiverReportInterval < 0 || c.RTPQueue < 0 || c.TelemetryQueue < 0 ||
		c.MaxTelemetryBytes < 0 || c.NACKMinInterval < 0 || c.RepairWindow < 0 || c.MaxNACKGap < 0 {
		return c, fmt.Errorf("%w: negative value in whip.Config; use 0 for the default", ErrBadConfig)
	}
	if c.SenderStartKbps < SenderStartOwn || c.SenderStartKbps > maxSenderStartKbps {
		return c, fmt.Errorf("%w: SenderStartKbps %d, want 1..%d kbit/s (0 = the default, %d = the sender's own)",
			ErrBadConfig, c.SenderStartKbps, maxSenderStartKbps, SenderStartOwn)
	}
	if err := c.Network.validate(); err != nil {
		return c, err
	}
	def := func(v *int, d int) {
		if *v == 0 {
			*v = d
		}
	}
	def(&c.MaxSessions, DefaultMaxSessions)
	def(&c.PostBurst, DefaultPostBurst)
	def(&c.RTPQueue, DefaultRTPQueue)
	def(&c.TelemetryQueue, DefaultTelemetryQueue)
	def(&c.MaxTelemetryBytes, DefaultMaxTelemetryBytes)
	def(&c.SenderStartKbps, DefaultSenderStartKbps)
	if c.ICETimeout == 0 {
		c.ICETimeout = DefaultICETimeout
	}
	if c.MaxOfferBytes == 0 {
		c.MaxOfferBytes = DefaultMaxOfferBytes
	}
	if c.PostRatePerS == 0 {
		c.PostRatePerS = DefaultPostRatePerS
	}
	if c.MinKeyframeInterval == 0 {
		c.MinKeyframeInterval = DefaultMinKeyframeInterval
	}
	if c.MaxNACKsPerPacket == 0 {
		c.MaxNACKsPerPacket = DefaultMaxNACKsPerPacket
	}
	if c.NACKMinInterval == 0 {
		c.NACKMinInterval = DefaultNACKMinInterval
	}
	if c.RepairWindow == 0 {
		c.RepairWindow = DefaultRepairWindow
	}
	def(&c.MaxNACKGap, DefaultMaxNACKGap)
	if c.ReceiverReportInterval == 0 {
		c.ReceiverReportInterval = DefaultReceiverReportInterval
	}
	if c.AllowOrigin == "" {
		c.AllowOrigin = "*"
	}
	if c.Logger == nil {
		c.Logger = slog.New(slog.DiscardHandler)
	}
	if c.Clock == nil {
		c.Clock = SystemClock{}
	}
	return c, nil
}
