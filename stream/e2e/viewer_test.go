package e2e

import (
	"bytes"
	"context"
	"encoding/json"
	"fmt"
	"io"
	"net"
	"net/http"
	"sync"
	"sync/atomic"
	"time"

	"github.com/pion/ice/v4"
	"github.com/pion/rtp"
	"github.com/pion/webrtc/v4"

	"stopgap/stream/console"
)

// metaEvent is one meta message as the viewer received it.
type metaEvent struct {
	at   time.Time
	meta console.Meta
}

// viewer is a Go WebRTC client of the operator console: it receives the
// relay's output video and meta channel on loopback and timestamps both.
type viewer struct {
	pc *webrtc.PeerConnection

	mu        sync.Mutex
	metas     []metaEvent
	frameEnds []time.Time // arrival of each output frame's marker packet
	// endByTS is the first marker packet's arrival per RTP timestamp of
	// the console's stream: a frame's identity, for pairing arrivals with
	// what the console sent (console.SentFrame.RTPTimestamp).
	endByTS map[uint32]time.Time
	keep    bool // keep every video packet received (pkts)
	pkts    []rtp.Packet
	// onPacket, when set, sees every video packet on the track's
	// goroutine, outside mu (the capacity run reassembles and decodes).
	onPacket atomic.Pointer[func(*rtp.Packet)]
}

// dialViewer connects a viewer to the console at base with the console token.
func dialViewer(ctx context.Context, base, token string) (*viewer, error) {
	me := &webrtc.MediaEngine{}
	if err := me.RegisterDefaultCodecs(); err != nil {
		return nil, err
	}
	se := webrtc.SettingEngine{}
	se.SetNetworkTypes([]webrtc.NetworkType{webrtc.NetworkTypeUDP4})
	se.SetIncludeLoopbackCandidate(true)
	se.SetIPFilter(func(ip net.IP) bool { return ip.IsLoopback() })
	se.SetICEMulticastDNSMode(ice.MulticastDNSModeDisabled)
	api := webrtc.NewAPI(webrtc.WithMediaEngine(me), webrtc.WithSettingEngine(se))
	pc, err := api.NewPeerConnection(webrtc.Configuration{})
	if err != nil {
		return nil, err
	}
	v := &viewer{pc: pc, endByTS: map[uint32]time.Time{}}
	if _, err := pc.AddTransceiverFromKind(webrtc.RTPCodecTypeVideo,
		webrtc.RTPTransceiverInit{Direction: webrtc.RTPTransceiverDirectionRecvonly}); err != nil {
		pc.Close()
		return nil, err
	}
	negotiated, id, ordered, zero := true, uint16(0), false, uint16(0)
	dc, err := pc.CreateDataChannel("meta", &webrtc.DataChannelInit{Negotiated: &negotiated, ID: &id, Ordered: &ordered, MaxRetransmits: &zero})
	if err != nil {
		pc.Close()
		return nil, err
	}
	dc.OnMessage(func(m webrtc.DataChannelMessage) {
		at := time.Now()
		var meta console.Meta
		if json.Unmarshal(m.Data, &meta) == nil {
			v.mu.Lock()
			v.metas = append(v.metas, metaEvent{at: at, meta: meta})
			v.mu.Unlock()
		}
	})
	pc.OnTrack(func(tr *webrtc.TrackRemote, _ *webrtc.RTPReceiver) {
		for {
			pkt, _, err := tr.ReadRTP()
			if err != nil {
				return
			}
			if pkt.Marker {
				at := time.Now()
				v.mu.Lock()
				v.frameEnds = append(v.frameEnds, at)
				if _, seen := v.endByTS[pkt.Timestamp]; !seen {
					v.endByTS[pkt.Timestamp] = at
				}
				v.mu.Unlock()
			}
			v.mu.Lock()
			if v.keep {
				v.pkts = append(v.pkts, *pkt.Clone())
			}
			v.mu.Unlock()
			if fn := v.onPacket.Load(); fn != nil {
				(*fn)(pkt)
			}
		}
	})
	offer, err := pc.CreateOffer(nil)
	if err != nil {
		pc.Close()
		return nil, err
	}
	gathered := webrtc.GatheringCompletePromise(pc)
	if err := pc.SetLocalDescription(offer); err != nil {
		pc.Close()
		return nil, err
	}
	select {
	case <-gathered:
	case <-ctx.Done():
		pc.Close()
		return nil, ctx.Err()
	}
	req, err := http.NewRequestWithContext(ctx, http.MethodPost, base+"/api/view", bytes.NewBufferString(pc.LocalDescription().SDP))
	if err != nil {
		pc.Close()
		return nil, err
	}
	req.Header.Set("Content-Type", "application/sdp")
	req.Header.Set("Authorization", "Bearer "+token)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		pc.Close()
		return nil, err
	}
	body, _ := io.ReadAll(io.LimitReader(resp.Body, 1<<20))
	resp.Body.Close()
	if resp.StatusCode != http.StatusCreated {
		pc.Close()
		return nil, fmt.Errorf("view offer: %s: %s", resp.Status, bytes.TrimSpace(body))
	}
	if err := pc.SetRemoteDescription(webrtc.SessionDescription{Type: webrtc.SDPTypeAnswer, SDP: string(body)}); err != nil {
		pc.Close()
		return nil, err
	}
	return v, nil
}

func (v *viewer) Close() error { return v.pc.Close() }

// arrivals returns a copy of endByTS: when the viewer received the last
// packet of the frame with each RTP timestamp.
func (v *viewer) arrivals() map[uint32]time.Time {
	v.mu.Lock()
	defer v.mu.Unlock()
	out := make(map[uint32]time.Time, len(v.endByTS))
	for ts, at := range v.endByTS {
		out[ts] = at
	}
	return out
}

// snapshot returns copies of what the viewer has received.
func (v *viewer) snapshot() ([]metaEvent, []time.Time) {
	v.mu.Lock()
	defer v.mu.Unlock()
	return append([]metaEvent(nil), v.metas...), append([]time.Time(nil), v.frameEnds...)
}
