package console

import (
	"context"
	"errors"
	"fmt"
	"math/rand/v2"
	"strings"
	"sync"
	"time"

	"github.com/pion/rtcp"
	"github.com/pion/webrtc/v4"

	"stopgap/stream/vp8splice"
)

// rtpMTU is the RTP packet size limit for the egress, bytes; pion uses 1200
// for outbound media too, leaving room for SRTP and tunnel overheads.
const rtpMTU = 1200

// maxMetaBuffered is the data channel backlog above which meta messages are
// dropped instead of queued in SCTP, bytes (about 200 messages). Our choice.
const maxMetaBuffered = 64 << 10

var errChannelNotOpen = errors.New("console: meta channel not open")
var errChannelBackedUp = errors.New("console: meta channel backed up")

// session is one viewer's PeerConnection.
type session struct {
	id  string // secret: part of the resource URL; never logged
	num uint64 // public number for logs
	pc  *webrtc.PeerConnection
	dc  *webrtc.DataChannel
	v   *viewer

	sink rtpSink // used only by the viewer's video goroutine

	connectTimer *time.Timer

	mu       sync.Mutex // serialises attach and end
	attached bool       // added to the egress
	ended    bool       // endSession ran
}

// isAttached reports whether the session has been added to the egress.
func (s *session) isAttached() bool {
	s.mu.Lock()
	defer s.mu.Unlock()
	return s.attached
}

func (s *session) sendVideo(frame *sharedBuf, startNs, durNs int64) error {
	return s.sink.writeFrame(frame, startNs, durNs)
}

func (s *session) sendMeta(msg []byte) error {
	if s.dc.ReadyState() != webrtc.DataChannelStateOpen {
		return errChannelNotOpen
	}
	if s.dc.BufferedAmount() > maxMetaBuffered {
		return errChannelBackedUp
	}
	return s.dc.SendText(string(msg))
}

// checkOffer parses the offer and requires a video section that can receive
// VP8 and an SCTP application section for the "meta" channel.
func checkOffer(sdpText string) error {
	parsed, err := (&webrtc.SessionDescription{Type: webrtc.SDPTypeOffer, SDP: sdpText}).Unmarshal()
	if err != nil {
		return fmt.Errorf("%w: cannot parse SDP: %v", ErrBadOffer, err)
	}
	var video, vp8, app bool
	for _, md := range parsed.MediaDescriptions {
		switch md.MediaName.Media {
		case "video":
			dir := "sendrecv"
			hasVP8 := false
			for _, a := range md.Attributes {
				switch a.Key {
				case "sendonly", "inactive", "recvonly", "sendrecv":
					dir = a.Key
				case "rtpmap":
					if _, enc, ok := strings.Cut(a.Value, " "); ok && strings.HasPrefix(strings.ToUpper(enc), "VP8/90000") {
						hasVP8 = true
					}
				}
			}
			if dir == "recvonly" || dir == "sendrecv" {
				video = true
				vp8 = vp8 || hasVP8
			}
		case "application":
			app = true
		}
	}
	switch {
	case !video:
		return fmt.Errorf("%w: no video section the viewer can receive on; add a recvonly video transceiver", ErrBadOffer)
	case !vp8:
		return fmt.Errorf("%w: the video section does not offer VP8/90000", ErrBadOffer)
	case !app:
		return fmt.Errorf("%w: no application (SCTP) section; create the negotiated data channel \"meta\" (id 0) before the offer", ErrBadOffer)
	}
	return nil
}

// newSession reserves a slot, answers offer and returns the session with the
// answer SDP. The slot is released on error.
func (c *Console) newSession(ctx context.Context, offer string) (*session, string, error) {
	if err := checkOffer(offer); err != nil {
		return nil, "", err
	}
	id, err := newSessionID()
	if err != nil {
		return nil, "", err
	}
	s := &session{id: id, num: c.nextNum.Add(1)}
	c.mu.Lock()
	switch {
	case c.closed:
		c.mu.Unlock()
		return nil, "", ErrClosed
	case len(c.sessions) >= c.cfg.MaxViewers:
		c.mu.Unlock()
		return nil, "", fmt.Errorf("%w: %d sessions exist (limit %d); close one or retry later", ErrTooManyViewers, len(c.sessions), c.cfg.MaxViewers)
	}
	c.sessions[id] = s
	c.mu.Unlock()

	answer, err := c.setupSession(ctx, s, offer)
	if err != nil {
		c.endSession(s, "setup failed")
		c.mu.Lock()
		closed := c.closed
		c.mu.Unlock()
		if closed { // the failure came from Close tearing the session down
			err = fmt.Errorf("%w (during setup: %v)", ErrClosed, err)
		}
		return nil, "", err
	}
	return s, answer, nil
}

func (c *Console) setupSession(ctx context.Context, s *session, offer string) (string, error) {
	pc, err := c.api.NewPeerConnection(webrtc.Configuration{})
	if err != nil {
		return "", fmt.Errorf("console: new peer connection: %w", err)
	}
	s.mu.Lock()
	if s.ended { // Close ran meanwhile
		s.mu.Unlock()
		pc.Close()
		return "", ErrClosed
	}
	s.pc = pc
	s.mu.Unlock()
	track, err := webrtc.NewTrackLocalStaticRTP(vp8Codec, "video", "stopgap")
	if err != nil {
		return "", fmt.Errorf("console: new track: %w", err)
	}
	sender, err := pc.AddTrack(track)
	if err != nil {
		return "", fmt.Errorf("console: add track: %w", err)
	}
	negotiated, id, unordered, noRetransmit := true, uint16(0), false, uint16(0)
	s.dc, err = pc.CreateDataChannel("meta", &webrtc.DataChannelInit{
		Negotiated: &negotiated, ID: &id, Ordered: &unordered, MaxRetransmits: &noRetransmit,
	})
	if err != nil {
		return "", fmt.Errorf("console: meta channel: %w", err)
	}
	// SSRC and payload type are rewritten per binding by the track; the
	// first sequence number and picture ID are random (RFC 3550 section
	// 5.1).
	s.sink = rtpSink{
		splicer: vp8splice.Splicer{MTU: rtpMTU, FirstSeq: uint16(rand.Uint32()), FirstPictureID: uint16(rand.Uint32()) & 0x7fff},
		out:     track,
		viewer:  s.num,
		trace:   &c.sent,
	}
	s.v = newViewer(s.num, s, c.cfg.VideoQueueFrames, c.cfg.MetaQueue)

	pc.OnConnectionStateChange(func(st webrtc.PeerConnectionState) {
		switch st {
		case webrtc.PeerConnectionStateConnected:
			c.attach(s)
		case webrtc.PeerConnectionStateFailed, webrtc.PeerConnectionStateClosed:
			go c.endSession(s, "connection "+st.String())
		}
	})
	go c.readRTCP(sender)

	if err := pc.SetRemoteDescription(webrtc.SessionDescription{Type: webrtc.SDPTypeOffer, SDP: offer}); err != nil {
		return "", fmt.Errorf("%w: %v", ErrBadOffer, err)
	}
	answer, err := pc.CreateAnswer(nil)
	if err != nil {
		return "", fmt.Errorf("%w: cannot answer: %v", ErrBadOffer, err)
	}
	gathered := webrtc.GatheringCompletePromise(pc)
	if err := pc.SetLocalDescription(answer); err != nil {
		return "", fmt.Errorf("console: set local description: %w", err)
	}
	timer := time.NewTimer(c.cfg.GatherTimeout)
	defer timer.Stop()
	select {
	case <-gathered:
	case <-timer.C:
		return "", fmt.Errorf("console: ICE gathering took longer than %v", c.cfg.GatherTimeout)
	case <-ctx.Done():
		return "", fmt.Errorf("console: offer request ended: %w", ctx.Err())
	}
	answerSDP := pc.LocalDescription().SDP
	s.mu.Lock()
	defer s.mu.Unlock()
	if s.ended {
		return "", ErrClosed
	}
	s.connectTimer = time.AfterFunc(c.cfg.ConnectTimeout, func() {
		if !s.isAttached() {
			c.endSession(s, "not connected within "+c.cfg.ConnectTimeout.String())
		}
	})
	return answerSDP, nil
}

// readRTCP reads the sender's RTCP (needed for the NACK responder) and turns
// PLI and FIR into keyframe requests. It ends when the sender closes.
func (c *Console) readRTCP(sender *webrtc.RTPSender) {
	for {
		pkts, _, err := sender.ReadRTCP()
		if err != nil {
			return
		}
		for _, p := range pkts {
			switch p.(type) {
			case *rtcp.PictureLossIndication, *rtcp.FullIntraRequest:
				c.eg.request(1 << uint(KeyframeViewerRequest))
			}
		}
	}
}

// attach starts sending to a session once its connection is up.
func (c *Console) attach(s *session) {
	s.mu.Lock()
	if s.ended || s.attached {
		s.mu.Unlock()
		return
	}
	if s.connectTimer != nil {
		s.connectTimer.Stop()
	}
	if !c.eg.add(s.v) {
		s.mu.Unlock()
		go c.endSession(s, "console closed")
		return
	}
	s.attached = true
	s.mu.Unlock()
	n := c.eg.count()
	c.log.Info("console: viewer connected", "viewer", s.num, "viewers", n)
	if c.cfg.OnViewersChanged != nil {
		c.cfg.OnViewersChanged(n)
	}
}

// endSession closes s once and frees its slot.
func (c *Console) endSession(s *session, why string) {
	s.mu.Lock()
	if s.ended {
		s.mu.Unlock()
		return
	}
	s.ended = true
	wasAttached, pc := s.attached, s.pc
	if s.connectTimer != nil {
		s.connectTimer.Stop()
	}
	s.mu.Unlock()
	c.mu.Lock()
	delete(c.sessions, s.id)
	c.mu.Unlock()
	if pc != nil {
		if err := pc.Close(); err != nil {
			c.log.Warn("console: close peer connection", "viewer", s.num, "err", err)
		}
	}
	if wasAttached {
		c.eg.remove(s.v)
		n := c.eg.count()
		c.log.Info("console: viewer left", "viewer", s.num, "why", why, "viewers", n)
		if c.cfg.OnViewersChanged != nil {
			c.cfg.OnViewersChanged(n)
		}
	} else {
		c.log.Info("console: session ended before connecting", "viewer", s.num, "why", why)
	}
}
