package whip

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"log/slog"
	"net/http"
	"net/url"
	"sync"
	"sync/atomic"
	"time"

	"github.com/pion/interceptor"
	"github.com/pion/interceptor/pkg/nack"
	"github.com/pion/interceptor/pkg/report"
	"github.com/pion/rtcp"
	"github.com/pion/rtp"
	"github.com/pion/webrtc/v4"

	"stopgap/stream/ingest"
)

// PublishConfig configures Publish. The zero value works on a normal network.
type PublishConfig struct {
	// Network configures ICE candidate gathering (LoopbackOnly for tests and the local vehicle simulator).
	Network Network
	// HTTPClient performs the WHIP requests (default: a client with a 10 s timeout).
	HTTPClient *http.Client
	// Logger receives the WebRTC stack's messages (default: discard).
	Logger *slog.Logger
	// Clock stamps keyframe requests (default SystemClock).
	Clock Clock

	// TelemetryReliable makes the telemetry data channel ordered and fully reliable. By default it is
	// unordered without retransmissions: on a live link a late telemetry sample is worth less than the next
	// one, and a lost message must not hold up later ones (common practice for live state updates).
	TelemetryReliable bool
	// SenderReportInterval is the RTCP sender report interval (default 1 s).
	SenderReportInterval time.Duration
	// KeyframeRequestQueue is the capacity of the KeyframeRequests channel (default 4); requests arriving
	// while it is full are dropped (one pending request is as good as several).
	KeyframeRequestQueue int
	// WireFilter, if set, sees every outgoing RTP packet (originals and NACK-triggered retransmissions)
	// just before it goes on the wire, after the NACK responder buffered it; returning false drops it
	// there, as a lossy link would. A link emulator uses it. It runs on the sending goroutine: keep it quick.
	WireFilter func(h *rtp.Header, payload []byte) bool
	// DeleteTimeout bounds the DELETE sent by Close (default 2 s).
	DeleteTimeout time.Duration
}

// PublisherStats are the publisher's counters.
type PublisherStats struct {
	// PacketsWritten counts WriteRTP calls that succeeded.
	PacketsWritten uint64
	// PacketsFiltered counts packets (including retransmissions) dropped by PublishConfig.WireFilter.
	PacketsFiltered uint64
	// KeyframeRequests counts PLI and FIR messages received; KeyframeRequestsDropped those not queued
	// because the channel was full.
	KeyframeRequests, KeyframeRequestsDropped uint64
	// NACKsReceived counts RTCP NACK packets received (the NACK responder answers them).
	NACKsReceived uint64
}

// Publisher is a WHIP client session sending one VP8 track (RTP packets supplied by the caller) and a
// telemetry data channel. Methods are safe for concurrent use.
type Publisher struct {
	pc       *webrtc.PeerConnection
	track    *webrtc.TrackLocalStaticRTP
	dc       *webrtc.DataChannel
	filter   *wireFilter
	resource string
	token    string
	client   *http.Client
	cfg      PublishConfig

	keyframes chan time.Time
	done      chan struct{}
	doneOnce  sync.Once
	closeOnce sync.Once
	closeErr  error

	written, kfReq, kfDropped, nacks atomic.Uint64
}

// Publish connects to the WHIP endpoint at endpoint with the bearer token: it offers one sendonly VP8
// video track and a data channel labelled TelemetryLabel, POSTs the offer with all candidates, applies the
// answer, and waits until ICE, DTLS and the data channel are up or ctx ends. On failure after the server
// created the session, it DELETEs the session before returning. Non-201 answers are returned as *HTTPError.
func Publish(ctx context.Context, endpoint, token string, cfg PublishConfig) (*Publisher, error) {
	base, err := url.Parse(endpoint)
	if err != nil || (base.Scheme != "http" && base.Scheme != "https") {
		return nil, fmt.Errorf("%w: endpoint %q is not an http(s) URL", ErrBadConfig, endpoint)
	}
	if cfg.SenderReportInterval < 0 || cfg.KeyframeRequestQueue < 0 || cfg.DeleteTimeout < 0 {
		return nil, fmt.Errorf("%w: negative value in whip.PublishConfig; use 0 for the default", ErrBadConfig)
	}
	if cfg.HTTPClient == nil {
		cfg.HTTPClient = &http.Client{Timeout: 10 * time.Second}
	}
	if cfg.Logger == nil {
		cfg.Logger = slog.New(slog.DiscardHandler)
	}
	if cfg.Clock == nil {
		cfg.Clock = SystemClock{}
	}
	if cfg.SenderReportInterval == 0 {
		cfg.SenderReportInterval = time.Second
	}
	if cfg.KeyframeRequestQueue == 0 {
		cfg.KeyframeRequestQueue = 4
	}
	if cfg.DeleteTimeout == 0 {
		cfg.DeleteTimeout = 2 * time.Second
	}
	p := &Publisher{token: token, client: cfg.HTTPClient, cfg: cfg,
		keyframes: make(chan time.Time, cfg.KeyframeRequestQueue), done: make(chan struct{})}
	if err := p.setup(); err != nil {
		return nil, err
	}
	if err := p.connect(ctx, base); err != nil {
		_ = p.Close()
		return nil, err
	}
	return p, nil
}

// setup builds the PeerConnection: VP8 only; interceptors, in order, the wire filter (closest to the wire),
// the NACK responder and the sender-report generator.
func (p *Publisher) setup() error {
	me, err := newMediaEngine()
	if err != nil {
		return err
	}
	reg := &interceptor.Registry{}
	if p.cfg.WireFilter != nil {
		p.filter = &wireFilter{keep: p.cfg.WireFilter}
		reg.Add(p.filter)
	}
	resp, err := nack.NewResponderInterceptor()
	if err != nil {
		return fmt.Errorf("whip: NACK responder: %w", err)
	}
	reg.Add(resp)
	sr, err := report.NewSenderInterceptor(report.SenderInterval(p.cfg.SenderReportInterval))
	if err != nil {
		return fmt.Errorf("whip: sender reports: %w", err)
	}
	reg.Add(sr)
	api := webrtc.NewAPI(webrtc.WithMediaEngine(me), webrtc.WithInterceptorRegistry(reg),
		webrtc.WithSettingEngine(newSettingEngine(p.cfg.Network, p.cfg.Logger)))
	if p.pc, err = api.NewPeerConnection(webrtc.Configuration{}); err != nil {
		return fmt.Errorf("whip: new peer connection: %w", err)
	}
	p.track, err = webrtc.NewTrackLocalStaticRTP(webrtc.RTPCodecCapability{
		MimeType: webrtc.MimeTypeVP8, ClockRate: ingest.VideoClockRateHz, RTCPFeedback: vp8Feedback,
	}, "video", "vehicle")
	if err != nil {
		_ = p.pc.Close()
		return fmt.Errorf("whip: new track: %w", err)
	}
	tr, err := p.pc.AddTransceiverFromTrack(p.track,
		webrtc.RTPTransceiverInit{Direction: webrtc.RTPTransceiverDirectionSendonly})
	if err != nil {
		_ = p.pc.Close()
		return fmt.Errorf("whip: add track: %w", err)
	}
	init := &webrtc.DataChannelInit{}
	if !p.cfg.TelemetryReliable {
		ordered, zero := false, uint16(0)
		init.Ordered, init.MaxRetransmits = &ordered, &zero
	}
	if p.dc, err = p.pc.CreateDataChannel(TelemetryLabel, init); err != nil {
		_ = p.pc.Close()
		return fmt.Errorf("whip: data channel: %w", err)
	}
	p.pc.OnConnectionStateChange(func(st webrtc.PeerConnectionState) {
		if st == webrtc.PeerConnectionStateFailed || st == webrtc.PeerConnectionStateClosed {
			p.doneOnce.Do(func() { close(p.done) })
		}
	})
	go p.readRTCP(tr.Sender())
	return nil
}

// connect runs the WHIP exchange and waits for the transport and the data channel.
func (p *Publisher) connect(ctx context.Context, base *url.URL) error {
	connected := make(chan struct{})
	var once sync.Once
	p.pc.OnICEConnectionStateChange(func(st webrtc.ICEConnectionState) {
		if st == webrtc.ICEConnectionStateConnected {
			once.Do(func() { close(connected) })
		}
	})
	opened := make(chan struct{})
	p.dc.OnOpen(func() { close(opened) })

	offer, err := p.pc.CreateOffer(nil)
	if err != nil {
		return fmt.Errorf("whip: create offer: %w", err)
	}
	gathered := webrtc.GatheringCompletePromise(p.pc)
	if err := p.pc.SetLocalDescription(offer); err != nil {
		return fmt.Errorf("whip: set local description: %w", err)
	}
	select {
	case <-gathered:
	case <-ctx.Done():
		return fmt.Errorf("%w: gathering ICE candidates: %w", ErrNotConnected, ctx.Err())
	}
	answer, err := p.post(ctx, base, p.pc.LocalDescription().SDP)
	if err != nil {
		return err
	}
	if err := p.pc.SetRemoteDescription(webrtc.SessionDescription{Type: webrtc.SDPTypeAnswer, SDP: answer}); err != nil {
		return fmt.Errorf("whip: apply answer from %s: %w", base, err)
	}
	for _, ch := range []chan struct{}{connected, opened} {
		select {
		case <-ch:
		case <-p.done:
			return fmt.Errorf("%w: peer connection failed", ErrNotConnected)
		case <-ctx.Done():
			return fmt.Errorf("%w: %w", ErrNotConnected, ctx.Err())
		}
	}
	return nil
}

// maxAnswerBytes bounds the answer body the client accepts.
const maxAnswerBytes = 64 << 10

func (p *Publisher) post(ctx context.Context, base *url.URL, offer string) (string, error) {
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, base.String(), bytes.NewBufferString(offer))
	if err != nil {
		return "", fmt.Errorf("whip: %w", err)
	}
	req.Header.Set("Content-Type", "application/sdp")
	req.Header.Set("Authorization", "Bearer "+p.token)
	resp, err := p.client.Do(req)
	if err != nil {
		return "", fmt.Errorf("whip: POST %s: %w", base, err)
	}
	defer resp.Body.Close()
	body, err := io.ReadAll(io.LimitReader(resp.Body, maxAnswerBytes+1))
	if err != nil {
		return "", fmt.Errorf("whip: read answer from %s: %w", base, err)
	}
	if resp.StatusCode != http.StatusCreated {
		return "", httpError(resp, body)
	}
	loc, err := resp.Location()
	if err != nil {
		return "", fmt.Errorf("whip: 201 from %s without a usable Location header: %w", base, err)
	}
	p.resource = loc.String()
	if len(body) > maxAnswerBytes {
		return "", fmt.Errorf("whip: answer from %s larger than %d bytes", base, maxAnswerBytes)
	}
	return string(body), nil
}

func httpError(resp *http.Response, body []byte) *HTTPError {
	if len(body) > 512 {
		body = body[:512]
	}
	return &HTTPError{Method: resp.Request.Method, URL: resp.Request.URL.String(), StatusCode: resp.StatusCode,
		RetryAfter: resp.Header.Get("Retry-After"), Body: string(bytes.TrimSpace(body))}
}

// readRTCP drains RTCP for the video sender (needed for the NACK responder) and turns PLI and FIR into
// keyframe requests.
func (p *Publisher) readRTCP(sender *webrtc.RTPSender) {
	fails := 0
	for {
		pkts, _, err := sender.ReadRTCP()
		if err != nil {
			if errors.Is(err, io.EOF) || errors.Is(err, io.ErrClosedPipe) || p.closed() ||
				fails >= maxConsecutiveReadErrors {
				return
			}
			fails++
			continue
		}
		fails = 0
		for _, pk := range pkts {
			switch pk.(type) {
			case *rtcp.PictureLossIndication, *rtcp.FullIntraRequest:
				p.kfReq.Add(1)
				select {
				case p.keyframes <- p.cfg.Clock.Now():
				default:
					p.kfDropped.Add(1)
				}
			case *rtcp.TransportLayerNack:
				p.nacks.Add(1)
			}
		}
	}
}

// WriteRTP sends one RTP packet on the video track. SSRC and payload type are replaced by the negotiated
// ones; sequence number, timestamp, marker and payload are the caller's (RFC 7741 packetisation is the
// caller's job). pkt is not modified or retained.
func (p *Publisher) WriteRTP(pkt *rtp.Packet) error {
	if p.closed() {
		return ErrSessionClosed
	}
	if err := p.track.WriteRTP(pkt); err != nil {
		return fmt.Errorf("whip: write RTP: %w", err)
	}
	p.written.Add(1)
	return nil
}

// SendTelemetry sends one telemetry message on the data channel. b is not retained.
func (p *Publisher) SendTelemetry(b []byte) error {
	if p.closed() {
		return ErrSessionClosed
	}
	if err := p.dc.Send(b); err != nil {
		return fmt.Errorf("whip: send telemetry: %w", err)
	}
	return nil
}

// KeyframeRequests delivers the receive time of each PLI or FIR from the server: the sender should encode
// its next frame as a keyframe. The channel is never closed; select on Done as well.
func (p *Publisher) KeyframeRequests() <-chan time.Time { return p.keyframes }

// Done is closed when the PeerConnection failed or was closed.
func (p *Publisher) Done() <-chan struct{} { return p.done }

// ResourceURL returns the session URL from the server's Location header.
func (p *Publisher) ResourceURL() string { return p.resource }

// Stats returns the publisher's counters.
func (p *Publisher) Stats() PublisherStats {
	st := PublisherStats{PacketsWritten: p.written.Load(), KeyframeRequests: p.kfReq.Load(),
		KeyframeRequestsDropped: p.kfDropped.Load(), NACKsReceived: p.nacks.Load()}
	if p.filter != nil {
		st.PacketsFiltered = p.filter.dropped.Load()
	}
	return st
}

func (p *Publisher) closed() bool {
	select {
	case <-p.done:
		return true
	default:
		return false
	}
}

// Close ends the session: DELETE on the resource URL (bounded by PublishConfig.DeleteTimeout) and close
// the PeerConnection. It returns the DELETE's error, if any (*HTTPError for a non-200 answer). Idempotent.
func (p *Publisher) Close() error {
	p.closeOnce.Do(func() {
		if p.resource != "" {
			p.closeErr = p.delete()
		}
		if err := p.pc.Close(); err != nil && p.closeErr == nil {
			p.closeErr = fmt.Errorf("whip: close peer connection: %w", err)
		}
		p.doneOnce.Do(func() { close(p.done) })
	})
	return p.closeErr
}

func (p *Publisher) delete() error {
	ctx, cancel := context.WithTimeout(context.Background(), p.cfg.DeleteTimeout)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodDelete, p.resource, nil)
	if err != nil {
		return fmt.Errorf("whip: %w", err)
	}
	req.Header.Set("Authorization", "Bearer "+p.token)
	resp, err := p.client.Do(req)
	if err != nil {
		return fmt.Errorf("whip: DELETE %s: %w", p.resource, err)
	}
	defer resp.Body.Close()
	body, _ := io.ReadAll(io.LimitReader(resp.Body, 512))
	if resp.StatusCode != http.StatusOK && resp.StatusCode != http.StatusNoContent {
		return httpError(resp, body)
	}
	return nil
}
