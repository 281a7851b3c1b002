package whip

import (
	"context"
	"fmt"
	"log/slog"
	"net"
	"sync/atomic"

	"github.com/pion/ice/v4"
	"github.com/pion/interceptor"
	"github.com/pion/logging"
	"github.com/pion/rtcp"
	"github.com/pion/rtp"
	"github.com/pion/webrtc/v4"

	"stopgap/stream/ingest"
)

// vp8Codec is the only video codec either side registers: VP8 at 90 kHz (RFC 7741) with generic NACK and
// PLI feedback (RFC 4585). No RTX, no audio.
var vp8Feedback = []webrtc.RTCPFeedback{{Type: "nack"}, {Type: "nack", Parameter: "pli"}}

const vp8PayloadType = 96

func newMediaEngine() (*webrtc.MediaEngine, error) {
	m := &webrtc.MediaEngine{}
	err := m.RegisterCodec(webrtc.RTPCodecParameters{
		RTPCodecCapability: webrtc.RTPCodecCapability{
			MimeType: webrtc.MimeTypeVP8, ClockRate: ingest.VideoClockRateHz, RTCPFeedback: vp8Feedback,
		},
		PayloadType: vp8PayloadType,
	}, webrtc.RTPCodecTypeVideo)
	if err != nil {
		return nil, fmt.Errorf("whip: register VP8: %w", err)
	}
	return m, nil
}

// newSettingEngine applies Network and routes the stack's logs to log.
func newSettingEngine(n Network, log *slog.Logger) webrtc.SettingEngine {
	var se webrtc.SettingEngine
	se.LoggerFactory = slogFactory{log}
	se.SetICEMulticastDNSMode(ice.MulticastDNSModeDisabled)
	se.SetICETimeouts(DisconnectedAfter, ConsentExpiry-DisconnectedAfter, ConsentCheckInterval)
	if n.LoopbackOnly {
		se.SetIncludeLoopbackCandidate(true)
		se.SetNetworkTypes([]webrtc.NetworkType{webrtc.NetworkTypeUDP4})
		se.SetIPFilter(func(ip net.IP) bool { return ip.IsLoopback() })
	}
	if n.IncludeLoopback && !n.LoopbackOnly {
		se.SetIncludeLoopbackCandidate(true)
	}
	if len(n.Interfaces) > 0 && !n.LoopbackOnly {
		se.SetInterfaceFilter(n.keepInterface)
	}
	if n.UDPMux != nil {
		se.SetICEUDPMux(n.UDPMux)
	}
	if len(n.NAT1To1IPs) > 0 {
		se.SetNAT1To1IPs(n.NAT1To1IPs, webrtc.ICECandidateTypeHost)
	}
	return se
}

// rtcpCounter is an interceptor that counts the RTCP feedback a PeerConnection writes: NACK packets, the
// sequence numbers they request, and PLIs. It must be added to the registry before the NACK generator so
// that the generator's writer is wrapped by it (interceptor.Chain binds writers in registration order).
type rtcpCounter struct {
	interceptor.NoOp
	nackPackets, nackedSeqs, plis atomic.Uint64
}

// NewInterceptor implements interceptor.Factory; one counter serves one PeerConnection.
func (c *rtcpCounter) NewInterceptor(string) (interceptor.Interceptor, error) { return c, nil }

// BindRTCPWriter implements interceptor.Interceptor.
func (c *rtcpCounter) BindRTCPWriter(w interceptor.RTCPWriter) interceptor.RTCPWriter {
	return interceptor.RTCPWriterFunc(func(pkts []rtcp.Packet, attr interceptor.Attributes) (int, error) {
		for _, p := range pkts {
			switch p := p.(type) {
			case *rtcp.TransportLayerNack:
				c.nackPackets.Add(1)
				for _, pair := range p.Nacks {
					c.nackedSeqs.Add(uint64(len(pair.PacketList())))
				}
			case *rtcp.PictureLossIndication:
				c.plis.Add(1)
			}
		}
		return w.Write(pkts, attr)
	})
}

// wireFilter is an interceptor on the publisher's outgoing RTP, closest to the wire: packets it drops were
// already recorded by the NACK responder, so a NACK can recover them like a packet lost on a real link.
type wireFilter struct {
	interceptor.NoOp
	keep    func(h *rtp.Header, payload []byte) bool
	dropped atomic.Uint64
}

// NewInterceptor implements interceptor.Factory.
func (f *wireFilter) NewInterceptor(string) (interceptor.Interceptor, error) { return f, nil }

// BindLocalStream implements interceptor.Interceptor.
func (f *wireFilter) BindLocalStream(_ *interceptor.StreamInfo, w interceptor.RTPWriter) interceptor.RTPWriter {
	return interceptor.RTPWriterFunc(func(h *rtp.Header, payload []byte, attr interceptor.Attributes) (int, error) {
		if !f.keep(h, payload) {
			f.dropped.Add(1)
			return h.MarshalSize() + len(payload), nil
		}
		return w.Write(h, payload, attr)
	})
}

// slogFactory adapts the WebRTC stack's leveled logging to log/slog. Trace, debug and info go to Debug
// (the stack's info messages are per-state-change chatter), warnings and errors keep their level.
type slogFactory struct{ log *slog.Logger }

func (f slogFactory) NewLogger(scope string) logging.LeveledLogger {
	return slogLogger{f.log.With("pion", scope)}
}

type slogLogger struct{ l *slog.Logger }

func (s slogLogger) logf(lv slog.Level, format string, args ...any) {
	if !s.l.Enabled(context.Background(), lv) {
		return
	}
	s.l.Log(context.Background(), lv, fmt.Sprintf(format, args...))
}

func (s slogLogger) Trace(msg string)                  { s.logf(slog.LevelDebug, "%s", msg) }
func (s slogLogger) Tracef(format string, args ...any) { s.logf(slog.LevelDebug, format, args...) }
func (s slogLogger) Debug(msg string)                  { s.logf(slog.LevelDebug, "%s", msg) }
func (s slogLogger) Debugf(format string, args ...any) { s.logf(slog.LevelDebug, format, args...) }
func (s slogLogger) Info(msg string)                   { s.logf(slog.LevelDebug, "%s", msg) }
func (s slogLogger) Infof(format string, args ...any)  { s.logf(slog.LevelDebug, format, args...) }
func (s slogLogger) Warn(msg string)                   { s.logf(slog.LevelWarn, "%s", msg) }
func (s slogLogger) Warnf(format string, args ...any)  { s.logf(slog.LevelWarn, format, args...) }
func (s slogLogger) Error(msg string)                  { s.logf(slog.LevelError, "%s", msg) }
func (s slogLogger) Errorf(format string, args ...any) { s.logf(slog.LevelError, format, args...) }
