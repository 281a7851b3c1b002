package console

import (
	"fmt"
	"log/slog"
	"math"
	"net"
	"net/netip"
	"time"

	"github.com/pion/webrtc/v4"
)

// Defaults used for zero fields of Config. The timing values are our own
// choices for a console on a LAN or loopback, not taken from a standard,
// except where noted.
const (
	// DefaultAddr is the documented listen address: loopback only. The lead's
	// command decides where to listen (and adds TLS); the Console only uses
	// Addr to decide which ICE candidates to offer.
	DefaultAddr = "127.0.0.1:8088"
	// DefaultCutoff is the cutoff of the built-in "default" profile when
	// Config.Profiles is empty (clamped into Limits). Our choice.
	DefaultCutoff = 0.5
	// DefaultMaxViewers caps concurrent viewer sessions, half-open included.
	DefaultMaxViewers = 4
	// DefaultVideoQueueFrames is the per-viewer video queue length in frames.
	DefaultVideoQueueFrames = 8
	// DefaultMetaQueue is the per-viewer meta queue length in messages.
	DefaultMetaQueue = 32
	// DefaultConnectTimeout closes a session whose ICE/DTLS has not connected
	// in time (half-open sessions hold resources; RFC 9725 names POST flooding).
	DefaultConnectTimeout = 10 * time.Second
	// DefaultGatherTimeout bounds the wait for ICE gathering before answering.
	DefaultGatherTimeout = 3 * time.Second
	// DefaultKeyframeRetry is how often a keyframe request is repeated while a
	// viewer still waits for one: 200 ms (common practice, see RELAY-NOTES).
	DefaultKeyframeRetry = 200 * time.Millisecond

	// MinTokenLen is the shortest accepted bearer token, in characters.
	MinTokenLen = 16
	// MaxProfiles caps the number of operator profiles.
	MaxProfiles = 16
	// MaxProfileNameLen caps the length of a profile name in bytes.
	MaxProfileNameLen = 32

	// MaxOfferBytes limits the SDP offer body.
	MaxOfferBytes = 64 << 10
	// MaxJSONBytes limits JSON request bodies.
	MaxJSONBytes = 4 << 10
)

// Limits are the administrator's hard limits on the confidence cutoff, both
// inclusive, within [0, 1]. The zero value means no limit beyond [0, 1].
type Limits struct {
	MinCutoff float64 `json:"min_cutoff"`
	MaxCutoff float64 `json:"max_cutoff"`
}

// Contains reports whether MinCutoff <= c <= MaxCutoff (false for NaN).
func (l Limits) Contains(c float64) bool { return c >= l.MinCutoff && c <= l.MaxCutoff }

func (l Limits) orDefault() Limits {
	if l == (Limits{}) {
		return Limits{MinCutoff: 0, MaxCutoff: 1}
	}
	return l
}

func (l Limits) validate() error {
	if math.IsNaN(l.MinCutoff) || math.IsNaN(l.MaxCutoff) ||
		l.MinCutoff < 0 || l.MaxCutoff > 1 || l.MinCutoff > l.MaxCutoff {
		return fmt.Errorf("%w: limits [%v, %v] must satisfy 0 <= MinCutoff <= MaxCutoff <= 1", ErrBadConfig, l.MinCutoff, l.MaxCutoff)
	}
	return nil
}

func (l Limits) clamp(c float64) float64 { return math.Min(math.Max(c, l.MinCutoff), l.MaxCutoff) }

// Profile is a named operator setting: the confidence cutoff at or above
// which predicted frames are shown.
type Profile struct {
	Name   string  `json:"name"`
	Cutoff float64 `json:"cutoff"`
}

// Config configures a Console. The zero value works: loopback, a generated
// token, one "default" profile at DefaultCutoff, limits [0, 1].
type Config struct {
	// Addr is where the caller is expected to serve the handler. It is not
	// listened on here. Default DefaultAddr (127.0.0.1, loopback only). When
	// its host is a loopback address, ICE offers loopback candidates only.
	Addr string

	// Token is the bearer token required on every /api/ request; at least
	// MinTokenLen characters. Empty: New generates one (see Console.Token).
	// It is never logged.
	Token string

	// Limits are the administrator's hard limits for the cutoff.
	Limits Limits
	// Profiles are the operator profiles; every cutoff must be within Limits.
	// Empty: one profile "default" at DefaultCutoff clamped into Limits.
	Profiles []Profile
	// ActiveProfile names the profile in use at start; empty: the first.
	ActiveProfile string
	// ProfilesPath, when set, is a JSON file holding the profiles and the
	// active one. It is read by New if it exists (it then replaces Profiles
	// and ActiveProfile; cutoffs outside Limits are clamped with a warning)
	// and rewritten atomically (temporary file, fsync, rename) on each change.
	ProfilesPath string
	// Store, when set, is the durable home of the profiles shared with other
	// writers (see ProfileStore); it replaces Profiles, ActiveProfile and
	// ProfilesPath. Stored cutoffs outside Limits are clamped with a warning.
	Store ProfileStore
	// LimitsSource names where Limits come from (e.g. the administrator's
	// policy file); refusals quote it. Empty: not named.
	LimitsSource string

	// MaxViewers caps concurrent sessions, half-open ones included. Default
	// DefaultMaxViewers.
	MaxViewers int
	// VideoQueueFrames is the per-viewer video queue length; default
	// DefaultVideoQueueFrames.
	VideoQueueFrames int
	// MetaQueue is the per-viewer meta queue length; default DefaultMetaQueue.
	MetaQueue int
	// ConnectTimeout closes sessions not connected in time; default
	// DefaultConnectTimeout.
	ConnectTimeout time.Duration
	// GatherTimeout bounds ICE gathering before the answer; default
	// DefaultGatherTimeout.
	GatherTimeout time.Duration
	// KeyframeRetry repeats a keyframe request while a viewer waits; default
	// DefaultKeyframeRetry.
	KeyframeRetry time.Duration

	// KeyframeNeeded is called when the egress encoder should make its next
	// frame a keyframe (a viewer joined, asked with PLI/FIR, or lost a frame
	// to a full queue). It is called from WriteFrame or network goroutines,
	// never with a lock of this package held; it must not block (typically it
	// sets a flag the encoder reads). Calls are not coalesced. Nil: ignored.
	KeyframeNeeded func(reason KeyframeReason)
	// OnCutoffChange is called after the operator changed profile or cutoff,
	// with the new values. It must not block. Nil: ignored.
	OnCutoffChange func(profile string, cutoff float64)
	// OnViewersChanged is called with the number of connected viewers when a
	// viewer connects or leaves. It must not block. Nil: ignored.
	OnViewersChanged func(connected int)

	// ConfigureICE, when set, is called on the SettingEngine after this
	// package's defaults (ICE candidates restricted to loopback when Addr is
	// loopback, mDNS off so nothing is multicast, ICE timeouts 3 s / 8 s), so
	// the caller can set port ranges, NAT 1:1 addresses and the like.
	ConfigureICE func(*webrtc.SettingEngine)

	// Logger receives operational logs (never the token or session ids).
	// Nil: slog.Default().
	Logger *slog.Logger
	// Now is the clock used for keyframe retries. Nil: time.Now.
	Now func() time.Time
}

// withDefaults returns a copy of c with zero fields filled in.
func (c Config) withDefaults() Config {
	if c.Addr == "" {
		c.Addr = DefaultAddr
	}
	c.Limits = c.Limits.orDefault()
	if c.MaxViewers <= 0 {
		c.MaxViewers = DefaultMaxViewers
	}
	if c.VideoQueueFrames <= 0 {
		c.VideoQueueFrames = DefaultVideoQueueFrames
	}
	if c.MetaQueue <= 0 {
		c.MetaQueue = DefaultMetaQueue
	}
	if c.ConnectTimeout <= 0 {
		c.ConnectTimeout = DefaultConnectTimeout
	}
	if c.GatherTimeout <= 0 {
		c.GatherTimeout = DefaultGatherTimeout
	}
	if c.KeyframeRetry <= 0 {
		c.KeyframeRetry = DefaultKeyframeRetry
	}
	if c.Logger == nil {
		c.Logger = slog.Default()
	}
	if c.Now == nil {
		c.Now = time.Now
	}
	return c
}

// addrIsLoopback reports whether the host of addr is a loopback address
// ("localhost" counts).
func addrIsLoopback(addr string) bool {
	host, _, err := net.SplitHostPort(addr)
	if err != nil {
		host = addr
	}
	if host == "localhost" {
		return true
	}
	ip, err := netip.ParseAddr(host)
	return err == nil && ip.IsLoopback()
}
