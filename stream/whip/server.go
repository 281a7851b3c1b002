package whip

import (
	"context"
	"crypto/rand"
	"crypto/sha256"
	"crypto/subtle"
	"encoding/hex"
	"errors"
	"fmt"
	"io"
	"math"
	"mime"
	"net"
	"net/http"
	"net/url"
	"strconv"
	"strings"
	"sync"
	"time"

	"github.com/pion/ice/v4"
	"github.com/pion/interceptor"
	"github.com/pion/interceptor/pkg/report"
	"github.com/pion/interceptor/pkg/twcc"
	"github.com/pion/webrtc/v4"

	"stopgap/stream/ingest"
)

// answerTimeout bounds how long a POST may spend building the answer (candidate gathering included).
const answerTimeout = 5 * time.Second

// maxRateLimitKeys bounds the rate limiter's memory (distinct remote IPs tracked at once).
const maxRateLimitKeys = 4096

// Server is a WHIP endpoint (RFC 9725) for one VP8 video track and one telemetry data channel per session.
// It is an http.Handler: mount it on the endpoint path, e.g. mux.Handle("/whip/", srv), and POST offers to
// "/whip". The handler serves:
//
//   - OPTIONS (any path): CORS preflight, no authentication, 204.
//   - POST on the endpoint: SDP offer in, 201 Created with the SDP answer and Location: <endpoint>/<id>.
//     All ICE candidates are gathered before answering (no trickle).
//   - DELETE on <endpoint>/<id>: ends the session, 200; unknown or ended ids get 404.
//   - PATCH (trickle ICE / ICE restart): 405, not supported; a vehicle that loses connectivity publishes
//     again with a new POST.
//   - anything else: 405 with an Allow header.
//
// Every request but OPTIONS needs "Authorization: Bearer <Config.Token>" (401 otherwise). A session
// resource is "<endpoint>/<id>" where id is 32 hex digits from crypto/rand: a path whose last segment has that
// form is treated as a resource, any other path as the endpoint. Serve it over HTTPS outside loopback: the
// token is a bearer secret.
type Server struct {
	cfg     Config
	limiter *rateLimiter
	tokenH  [sha256.Size]byte

	mu       sync.Mutex
	closed   bool
	sessions map[string]*Session
	pending  int // slots held by POSTs still building their PeerConnection
	// pendingFrom counts those slots per remote host (at most one each).
	pendingFrom map[string]int
	accepted    uint64
	ended       uint64
	rejected    [numRejectReasons]uint64
	ownMux      io.Closer // the UDP mux opened for Network.UDPPort, closed by Close
}

// NewServer validates cfg, applies defaults and returns a Server. It returns ErrNoToken without a token.
func NewServer(cfg Config) (*Server, error) {
	c, err := cfg.withDefaults()
	if err != nil {
		return nil, err
	}
	s := &Server{
		limiter:  newRateLimiter(c.PostRatePerS, c.PostBurst, maxRateLimitKeys),
		tokenH:   sha256.Sum256([]byte(c.Token)),
		sessions: map[string]*Session{},
	}
	if n := c.Network; n.UDPPort != 0 && n.UDPMux == nil {
		opts := []ice.UDPMuxFromPortOption{ice.UDPMuxFromPortWithInterfaceFilter(n.keepInterface),
			ice.UDPMuxFromPortWithLogger(slogFactory{c.Logger}.NewLogger("udpmux"))}
		if n.IncludeLoopback || n.LoopbackOnly {
			opts = append(opts, ice.UDPMuxFromPortWithLoopback())
		}
		if n.LoopbackOnly {
			opts = append(opts, ice.UDPMuxFromPortWithIPFilter(func(ip net.IP) bool { return ip.IsLoopback() }),
				ice.UDPMuxFromPortWithNetworks(ice.NetworkTypeUDP4))
		}
		mux, err := ice.NewMultiUDPMuxFromPort(n.UDPPort, opts...)
		if err != nil {
			return nil, fmt.Errorf("whip: open UDP port %d for ICE (Network.UDPPort): %w; choose a free port", n.UDPPort, err)
		}
		s.ownMux = mux
		c.Network.UDPMux = mux
	}
	s.cfg = c
	return s, nil
}

// ServerStats are the server's counters.
type ServerStats struct {
	// Active is the number of sessions that exist now, connected or still connecting.
	Active int
	// Accepted counts 201 responses; Ended counts sessions that ended for any reason, including offers the
	// WebRTC stack refused after a session had been set up for them.
	Accepted, Ended uint64
	// Rejections counts refused requests and dropped half-open sessions per reason (only non-zero entries).
	Rejections map[RejectReason]uint64
}

// Stats returns a snapshot of the server's counters.
func (s *Server) Stats() ServerStats {
	s.mu.Lock()
	defer s.mu.Unlock()
	st := ServerStats{Active: len(s.sessions), Accepted: s.accepted, Ended: s.ended,
		Rejections: map[RejectReason]uint64{}}
	for r, n := range s.rejected {
		if n > 0 {
			st.Rejections[RejectReason(r)] = n
		}
	}
	return st
}

// Sessions returns the sessions that exist now, connected or not.
func (s *Server) Sessions() []*Session {
	s.mu.Lock()
	defer s.mu.Unlock()
	out := make([]*Session, 0, len(s.sessions))
	for _, ss := range s.sessions {
		out = append(out, ss)
	}
	return out
}

// Close ends every session (EndServerShutdown), closes the UDP port opened for Network.UDPPort, and makes
// later POSTs fail with 503. It does not stop the http.Server the handler is mounted on.
func (s *Server) Close() error {
	s.mu.Lock()
	s.closed = true
	all := make([]*Session, 0, len(s.sessions))
	for _, ss := range s.sessions {
		all = append(all, ss)
	}
	s.mu.Unlock()
	for _, ss := range all {
		ss.end(EndServerShutdown)
	}
	s.mu.Lock()
	mux := s.ownMux
	s.ownMux = nil
	s.mu.Unlock()
	if mux != nil {
		return mux.Close()
	}
	return nil
}

// ServeHTTP implements http.Handler.
func (s *Server) ServeHTTP(w http.ResponseWriter, r *http.Request) {
	h := w.Header()
	h.Set("Access-Control-Allow-Origin", s.cfg.AllowOrigin)
	h.Set("Access-Control-Expose-Headers", "Location, Retry-After, Accept-Post")
	id, isResource := resourceID(r.URL.Path)

	if r.Method == http.MethodOptions {
		h.Set("Access-Control-Allow-Methods", "POST, DELETE, OPTIONS")
		h.Set("Access-Control-Allow-Headers", "Authorization, Content-Type")
		h.Set("Access-Control-Max-Age", "600")
		if !isResource {
			h.Set("Accept-Post", "application/sdp")
		}
		w.WriteHeader(http.StatusNoContent)
		return
	}
	if r.Method == http.MethodPost && !isResource {
		s.handleOffer(w, r)
		return
	}
	if !s.authorized(r) {
		s.reject(w, r, RejectUnauthorized, http.StatusUnauthorized, "missing or wrong bearer token")
		return
	}
	switch {
	case isResource && r.Method == http.MethodDelete:
		s.handleDelete(w, r, id)
	case isResource:
		h.Set("Allow", "DELETE, OPTIONS")
		s.reject(w, r, RejectMethodNotAllowed, http.StatusMethodNotAllowed,
			r.Method+" not supported on a session; trickle ICE and ICE restart (PATCH) are not implemented, "+
				"all candidates are in the answer; to reconnect, DELETE and POST a new offer")
	default:
		h.Set("Allow", "POST, OPTIONS")
		s.reject(w, r, RejectMethodNotAllowed, http.StatusMethodNotAllowed,
			r.Method+" not supported on the endpoint; POST an SDP offer (application/sdp)")
	}
}

// resourceID reports whether the last path segment is a session id (32 lowercase hex digits).
func resourceID(p string) (string, bool) {
	seg := p[strings.LastIndexByte(p, '/')+1:]
	if len(seg) != 32 {
		return "", false
	}
	for _, c := range []byte(seg) {
		if !('0' <= c && c <= '9' || 'a' <= c && c <= 'f') {
			return "", false
		}
	}
	return seg, true
}

// authorized checks "Authorization: Bearer <token>" (RFC 6750 section 2.1; scheme case-insensitive) in
// constant time: both sides are hashed first, so neither the token nor its length leaks through timing.
func (s *Server) authorized(r *http.Request) bool {
	scheme, tok, ok := strings.Cut(r.Header.Get("Authorization"), " ")
	if !ok || !strings.EqualFold(scheme, "Bearer") {
		return false
	}
	got := sha256.Sum256([]byte(strings.TrimSpace(tok)))
	return subtle.ConstantTimeCompare(got[:], s.tokenH[:]) == 1
}

// reject counts the reason, logs it at debug level (floods must not flood the log) and writes a one-line
// plain-text explanation.
func (s *Server) reject(w http.ResponseWriter, r *http.Request, reason RejectReason, status int, msg string) {
	s.count(reason)
	s.cfg.Logger.Debug("whip request rejected", "reason", reason.String(), "method", r.Method,
		"remote", r.RemoteAddr, "status", status)
	if status == http.StatusUnauthorized {
		// RFC 6750 section 3; error="invalid_token" only when a token was presented.
		v := `Bearer realm="whip"`
		if r.Header.Get("Authorization") != "" {
			v += `, error="invalid_token"`
		}
		w.Header().Set("WWW-Authenticate", v)
	}
	http.Error(w, msg, status)
}

func (s *Server) count(reason RejectReason) {
	s.mu.Lock()
	s.rejected[reason]++
	s.mu.Unlock()
}

func retryAfter(w http.ResponseWriter, d time.Duration) {
	w.Header().Set("Retry-After", strconv.Itoa(max(1, int(math.Ceil(d.Seconds())))))
}

func (s *Server) handleOffer(w http.ResponseWriter, r *http.Request) {
	host, _, err := net.SplitHostPort(r.RemoteAddr)
	if err != nil {
		host = r.RemoteAddr
	}
	if ok, wait := s.limiter.allow(host, s.cfg.Clock.Now()); !ok {
		retryAfter(w, wait)
		s.reject(w, r, RejectRateLimited, http.StatusTooManyRequests, "too many offers from this address; retry later")
		return
	}
	if !s.authorized(r) {
		s.reject(w, r, RejectUnauthorized, http.StatusUnauthorized, "missing or wrong bearer token")
		return
	}
	if mt, _, err := mime.ParseMediaType(r.Header.Get("Content-Type")); err != nil || mt != "application/sdp" {
		w.Header().Set("Accept-Post", "application/sdp")
		s.reject(w, r, RejectUnsupportedMediaType, http.StatusUnsupportedMediaType,
			"Content-Type must be application/sdp")
		return
	}
	if r.ContentLength > s.cfg.MaxOfferBytes {
		s.reject(w, r, RejectBodyTooLarge, http.StatusRequestEntityTooLarge,
			fmt.Sprintf("offer larger than %d bytes", s.cfg.MaxOfferBytes))
		return
	}
	body, err := io.ReadAll(http.MaxBytesReader(w, r.Body, s.cfg.MaxOfferBytes))
	if err != nil {
		if _, ok := errors.AsType[*http.MaxBytesError](err); ok {
			s.reject(w, r, RejectBodyTooLarge, http.StatusRequestEntityTooLarge,
				fmt.Sprintf("offer larger than %d bytes", s.cfg.MaxOfferBytes))
			return
		}
		s.reject(w, r, RejectBadOffer, http.StatusBadRequest, "cannot read body: "+err.Error())
		return
	}
	if err := checkOffer(body); err != nil {
		s.reject(w, r, RejectBadOffer, http.StatusBadRequest, err.Error())
		return
	}
	sess, err := s.reserve(r.RemoteAddr, host)
	if errors.Is(err, errOfferInProgress) {
		retryAfter(w, time.Second)
		s.reject(w, r, RejectRateLimited, http.StatusTooManyRequests, err.Error())
		return
	}
	if err != nil {
		retryAfter(w, s.cfg.ICETimeout)
		s.reject(w, r, RejectTooManySessions, http.StatusServiceUnavailable, err.Error())
		return
	}
	ctx, cancel := context.WithTimeout(r.Context(), answerTimeout)
	defer cancel()
	answer, err := sess.negotiate(ctx, body)
	if err != nil {
		sess.end(EndFailed)
		if sess.EndReason() == EndSuperseded { // counted once, when it ended
			http.Error(w, "a newer offer from this address replaced this one while it was being answered",
				http.StatusConflict)
			return
		}
		if errors.Is(err, ErrBadOffer) {
			s.reject(w, r, RejectBadOffer, http.StatusBadRequest, err.Error())
		} else {
			s.reject(w, r, RejectInternal, http.StatusInternalServerError, "cannot answer the offer: "+err.Error())
		}
		return
	}
	s.mu.Lock()
	s.accepted++
	s.mu.Unlock()
	sess.log.Info("whip session created", "remote", r.RemoteAddr)
	w.Header().Set("Location", resourceURL(r, sess.id))
	w.Header().Set("Content-Type", "application/sdp")
	w.WriteHeader(http.StatusCreated)
	_, _ = io.WriteString(w, answer)
}

// resourceURL builds the absolute-path Location of a session from the path the client used (RequestURI, so
// that it stays right under http.StripPrefix).
func resourceURL(r *http.Request, id string) string {
	p := r.URL.Path
	if u, err := url.ParseRequestURI(r.RequestURI); err == nil && u.Path != "" {
		p = u.Path
	}
	return strings.TrimSuffix(p, "/") + "/" + id
}

// newID returns 128 bits from crypto/rand as 32 lowercase hex digits.
func newID() (string, error) {
	var b [16]byte
	if _, err := rand.Read(b[:]); err != nil {
		return "", err
	}
	return hex.EncodeToString(b[:]), nil
}

// errOfferInProgress refuses an offer from an address whose earlier offer is still being answered.
var errOfferInProgress = errors.New("an offer from this address is still being answered; retry later")

// reserve creates a session with its PeerConnection and registers it, or fails when the server is full or
// closed. A slot is held (pending) while the PeerConnection is built, so concurrent POSTs cannot overshoot
// MaxSessions, and only complete sessions are ever visible in the map.
//
// Each remote address (host) holds at most one half-open session: a new offer from an address whose
// earlier session has not connected yet replaces that session (EndSuperseded), and an offer from an
// address whose earlier offer is still being answered (its PeerConnection being built) is refused with
// errOfferInProgress, so concurrent POSTs from one address cannot hold more than one slot either. A vehicle that retries
// loses nothing, since its earlier attempt is dead to it anyway; a flood of offers that never connect
// pins one slot per address instead of all of them, so a real vehicle from another address still gets
// in (see the package documentation on floods).
func (s *Server) reserve(remote, host string) (*Session, error) {
	id, err := newID()
	if err != nil {
		return nil, fmt.Errorf("no session id: %w", err)
	}
	s.mu.Lock()
	if s.closed {
		s.mu.Unlock()
		return nil, ErrServerClosed
	}
	// Again after each one ended: while s.mu was released, another offer
	// from the same address may have registered its own.
	for old := s.halfOpenFrom(host); old != nil; old = s.halfOpenFrom(host) {
		s.mu.Unlock()
		old.endIf(EndSuperseded, true)
		s.mu.Lock()
		if s.closed {
			s.mu.Unlock()
			return nil, ErrServerClosed
		}
	}
	if s.pendingFrom[host] > 0 {
		s.mu.Unlock()
		return nil, errOfferInProgress
	}
	if len(s.sessions)+s.pending >= s.cfg.MaxSessions {
		s.mu.Unlock()
		return nil, fmt.Errorf("server busy: %d sessions (the maximum); retry later", s.cfg.MaxSessions)
	}
	s.pending++
	if s.pendingFrom == nil {
		s.pendingFrom = make(map[string]int)
	}
	s.pendingFrom[host]++
	s.mu.Unlock()

	sess := &Session{
		id: id, remote: remote, host: host, srv: s, clock: s.cfg.Clock, cfg: &s.cfg,
		log:     s.cfg.Logger.With("session", id[:8]),
		counter: &rtcpCounter{},
		repair:  newRepairer(&s.cfg),
		rtpq:    make(chan ingest.Arrival, s.cfg.RTPQueue),
		telq:    make(chan ingest.TelemetryBytes, s.cfg.TelemetryQueue),
		done:    make(chan struct{}),
	}
	pc, err := s.newPeerConnection(sess.counter, sess.repair)
	s.mu.Lock()
	s.pending--
	if s.pendingFrom[host]--; s.pendingFrom[host] <= 0 {
		delete(s.pendingFrom, host)
	}
	if err == nil && s.closed {
		err = ErrServerClosed
	}
	if err != nil {
		s.mu.Unlock()
		if pc != nil {
			_ = pc.Close()
		}
		return nil, err
	}
	sess.pc = pc
	s.sessions[id] = sess
	s.mu.Unlock()

	sess.mu.Lock()
	sess.iceTimer = s.cfg.Clock.AfterFunc(s.cfg.ICETimeout, sess.onICETimeout)
	sess.mu.Unlock()
	pc.OnConnectionStateChange(sess.onConnectionState)
	pc.OnTrack(sess.onTrack)
	pc.OnDataChannel(sess.onDataChannel)
	return sess, nil
}

// newPeerConnection builds a PeerConnection with its own API: a MediaEngine with only VP8 video and the
// interceptors, in this order: the RTCP counter (so it sees the NACKs the repairer writes), the repairer
// (NACKs at once and at the measured round trip, capped per packet), and the RTCP receiver-report
// interceptor, then the transport-wide congestion control feedback and, last, the one that times it
// (resumeFeedback: it must see a packet after the feedback generator has).
func (s *Server) newPeerConnection(counter *rtcpCounter, repair *repairer) (*webrtc.PeerConnection, error) {
	me, err := newMediaEngine()
	if err != nil {
		return nil, err
	}
	reg := &interceptor.Registry{}
	reg.Add(counter)
	reg.Add(repair)
	rr, err := report.NewReceiverInterceptor(report.ReceiverInterval(s.cfg.ReceiverReportInterval))
	if err != nil {
		return nil, fmt.Errorf("whip: receiver reports: %w", err)
	}
	reg.Add(rr)
	// Transport-wide congestion control feedback (draft-holmer-rmcat-transport-wide-cc-extensions-01):
	// the answer offers the transport-cc header extension and feedback, and the interceptor reports
	// every packet's arrival time every FeedbackInterval, and at once for the first packet after a
	// silence (resumeFeedback). It feeds the sender's own bandwidth
	// estimator, which is what a browser uses first; without it the browser starts low and ramps for tens
	// of seconds. Receiver-side estimates (REMB) are the older alternative, and pion has no REMB
	// estimator to generate them. The arrival times it reports are taken when the session's reader
	// gets the packet, not the kernel's receive times: measured a median 0.23 ms later, and the
	// sender's estimate did not react to the rare waits of several ms (DEVELOPERS.md, outage record).
	fb := newResumeFeedback(s.cfg.Clock)
	if err := webrtc.ConfigureTWCCSenderWithOptions(me, reg,
		twcc.SendInterval(FeedbackInterval), twcc.SendTicker(fb.ticker)); err != nil {
		return nil, fmt.Errorf("whip: congestion control feedback: %w", err)
	}
	reg.Add(fb)
	api := webrtc.NewAPI(webrtc.WithMediaEngine(me), webrtc.WithInterceptorRegistry(reg),
		webrtc.WithSettingEngine(newSettingEngine(s.cfg.Network, s.cfg.Logger)))
	pc, err := api.NewPeerConnection(webrtc.Configuration{})
	if err != nil {
		return nil, fmt.Errorf("whip: new peer connection: %w", err)
	}
	return pc, nil
}

// negotiate applies the offer and returns the complete answer (all candidates gathered).
func (sess *Session) negotiate(ctx context.Context, offer []byte) (string, error) {
	pc := sess.pc
	if _, err := pc.AddTransceiverFromKind(webrtc.RTPCodecTypeVideo,
		webrtc.RTPTransceiverInit{Direction: webrtc.RTPTransceiverDirectionRecvonly}); err != nil {
		return "", fmt.Errorf("add video transceiver: %w", err)
	}
	if err := pc.SetRemoteDescription(webrtc.SessionDescription{Type: webrtc.SDPTypeOffer, SDP: string(offer)}); err != nil {
		return "", fmt.Errorf("%w: rejected by the WebRTC stack: %v", ErrBadOffer, err)
	}
	answer, err := pc.CreateAnswer(nil)
	if err != nil {
		return "", fmt.Errorf("%w: cannot answer: %v", ErrBadOffer, err)
	}
	gathered := webrtc.GatheringCompletePromise(pc)
	if err := pc.SetLocalDescription(answer); err != nil {
		return "", fmt.Errorf("set local description: %w", err)
	}
	select {
	case <-gathered:
	case <-ctx.Done():
		return "", fmt.Errorf("gathering ICE candidates: %w", ctx.Err())
	}
	ld := pc.LocalDescription()
	if ld == nil {
		return "", errors.New("no local description after gathering")
	}
	// The start bitrate is for the sender only: the stack refuses a local description that differs from
	// the answer it made, so it goes into the copy that is sent.
	if k := sess.cfg.SenderStartKbps; k > 0 {
		sent, err := withStartBitrate(ld.SDP, k)
		if err != nil {
			return "", fmt.Errorf("set the sender's start bitrate: %w", err)
		}
		return sent, nil
	}
	return ld.SDP, nil
}

func (s *Server) handleDelete(w http.ResponseWriter, r *http.Request, id string) {
	s.mu.Lock()
	sess := s.sessions[id]
	s.mu.Unlock()
	if sess == nil {
		s.reject(w, r, RejectNotFound, http.StatusNotFound, "no such session (ended or never existed)")
		return
	}
	sess.end(EndDeleted)
	w.WriteHeader(http.StatusOK)
}

// halfOpenFrom returns a registered session from host that has not connected, or nil. s.mu is held.
func (s *Server) halfOpenFrom(host string) *Session {
	for _, ss := range s.sessions {
		if ss.host == host && !ss.connected.Load() {
			return ss
		}
	}
	return nil
}

// unregister removes an ended session and counts its end.
func (s *Server) unregister(sess *Session, reason EndReason) {
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.sessions[sess.id] == sess {
		delete(s.sessions, sess.id)
	}
	s.ended++
	switch reason {
	case EndICETimeout:
		s.rejected[RejectICETimeout]++
	case EndSuperseded:
		s.rejected[RejectSuperseded]++
	}
}
