package whip

import (
	"math/rand/v2"
	"sync"
	"time"

	"github.com/pion/interceptor"
	"github.com/pion/rtcp"

	"stopgap/stream/ingest"
)

// Defaults of the loss repair (negative acknowledgements, RFC 4585 section 6.2.1).
const (
	// DefaultNACKMinInterval is the least spacing between two NACKs of one packet, whatever the measured
	// round trip (our choice: a loopback or LAN round trip is well under a millisecond, and a sender needs a
	// few milliseconds to answer, a browser on a loaded host tens: with 10 ms, a third of the packets
	// missing under 5% loss were given up after three NACKs and cost a keyframe).
	DefaultNACKMinInterval = 20 * time.Millisecond
	// DefaultNACKInitialRTT is the round-trip time assumed before any was measured (our choice: a cellular
	// round trip of the order of 50 ms).
	DefaultNACKInitialRTT = 50 * time.Millisecond
	// DefaultRepairWindow is how long after a gap was seen its packets are asked for at most. Longer than
	// a display deadline's slack plus a frame period at 30 fps (so a late repair still serves as a
	// reference for the next frames), much shorter than an outage.
	DefaultRepairWindow = 300 * time.Millisecond
	// DefaultMaxNACKGap is the largest gap, in packets, that is asked for: a larger jump in sequence
	// numbers is an outage, whose packets the receiver no longer needs (a keyframe is requested instead).
	DefaultMaxNACKGap = 256
)

// tailProbe is how long after a packet without the RTP marker bit the next one may take before it is
// asked for (our choice: several packet spacings of a paced sender at video rates). Without it the loss of
// a frame's last packet is seen only when the next frame starts, a frame period later.
const tailProbe = 10 * time.Millisecond

// maxPendingRepairs bounds the sequence numbers waiting for a retransmission.
const maxPendingRepairs = 1024

// pendingRepair is one missing sequence number.
type pendingRepair struct {
	ext       int64     // extended sequence number
	seen      time.Time // when the gap was seen
	firstNACK time.Time
	lastNACK  time.Time
	count     uint16
	probe     bool // asked for before any later packet showed it missing (see tailProbe)
}

// repairState decides when each missing sequence number is NACKed: at once when the gap is seen, again
// every retransmission timeout (RFC 6298: SRTT + 4 RTTVAR, at least minInterval), at most maxPer times and
// never after window. It is pure (no clock, no I/O) so recorded sequences drive it in tests.
type repairState struct {
	maxPer      uint16
	minInterval time.Duration
	initialRTT  time.Duration
	window      time.Duration
	maxGap      int64

	started  bool
	highest  int64
	lastSeen time.Time
	openTail bool            // the highest packet had no marker bit and its successor was not probed yet
	pending  []pendingRepair // ascending ext

	srtt, rttvar time.Duration
	iceRTT       time.Duration
	stats        ingest.RepairStats
}

// rtt returns the round trip in use.
func (r *repairState) rtt() time.Duration {
	switch {
	case r.stats.RTTSamples > 0:
		return r.srtt
	case r.iceRTT > 0:
		return r.iceRTT
	default:
		return r.initialRTT
	}
}

// rto returns the spacing between two NACKs of one packet.
func (r *repairState) rto() time.Duration {
	d := r.rtt() + 4*r.rttvar
	if r.stats.RTTSamples == 0 {
		d = 2 * r.rtt() // RFC 6298 (2.1) uses 3 s here; a live view cannot wait that long
	}
	return max(d, r.minInterval)
}

// sample adds one round-trip measurement (RFC 6298 section 2.2 and 2.3, alpha 1/8, beta 1/4).
func (r *repairState) sample(d time.Duration) {
	if d <= 0 {
		return
	}
	if r.stats.RTTSamples == 0 {
		r.srtt, r.rttvar = d, d/2
	} else {
		diff := r.srtt - d
		if diff < 0 {
			diff = -diff
		}
		r.rttvar = (3*r.rttvar + diff) / 4
		r.srtt = (7*r.srtt + d) / 8
	}
	r.stats.RTTSamples++
}

// onPacket records the arrival of seq (with its RTP marker bit) at now and appends to dst the sequence
// numbers to NACK at once.
func (r *repairState) onPacket(seq uint16, marker bool, now time.Time, dst []uint16) []uint16 {
	if !r.started {
		r.started, r.highest, r.lastSeen, r.openTail = true, 1<<32+int64(seq), now, !marker
		return dst
	}
	ext := r.highest + int64(int16(seq-uint16(r.highest)))
	silence := now.Sub(r.lastSeen)
	r.lastSeen = now
	if ext <= r.highest {
		r.resolve(ext, now)
		return dst
	}
	gap := ext - r.highest - 1
	first := r.highest + 1
	r.highest = ext
	r.openTail = !marker
	if last := len(r.pending) - 1; last >= 0 && r.pending[last].ext == first && r.pending[last].probe {
		if gap == 0 {
			// The probed packet itself: late, or its NACK was answered.
			r.pending = r.pending[:last]
			r.stats.Repaired++
			return dst
		}
		// The probe was right: first is missing and already asked for
		// (still marked as a probe: its answer gives no round-trip sample,
		// since the packet may merely have been late).
		first++
		gap--
	}
	if gap == 0 {
		return dst
	}
	if gap > r.maxGap || silence > r.window {
		r.stats.SkippedGaps += uint64(gap)
		return dst
	}
	for e := first; e < ext; e++ {
		if len(r.pending) >= maxPendingRepairs {
			r.pending = r.pending[1:]
			r.stats.GaveUp++
		}
		r.pending = append(r.pending, pendingRepair{ext: e, seen: now, firstNACK: now, lastNACK: now, count: 1})
		r.stats.Gaps++
		dst = append(dst, uint16(e))
	}
	return dst
}

// resolve handles a packet at or below the highest: a repair if it was pending.
func (r *repairState) resolve(ext int64, now time.Time) {
	for i := range r.pending {
		if r.pending[i].ext != ext {
			continue
		}
		if p := r.pending[i]; p.count == 1 && !p.probe {
			r.sample(now.Sub(p.firstNACK))
		}
		r.pending = append(r.pending[:i], r.pending[i+1:]...)
		r.stats.Repaired++
		return
	}
}

// due appends to dst the pending sequence numbers whose retransmission timeout passed at now (and counts a
// NACK for each), and drops those that exhausted their NACKs or the window. It also probes for the
// successor of a packet without the marker bit once tailProbe passed without it.
func (r *repairState) due(now time.Time, dst []uint16) []uint16 {
	rto := r.rto()
	if r.openTail && now.Sub(r.lastSeen) >= tailProbe && now.Sub(r.lastSeen) < r.window {
		r.openTail = false
		e := r.highest + 1
		r.pending = append(r.pending, pendingRepair{ext: e, seen: now, firstNACK: now, lastNACK: now, count: 1, probe: true})
		r.stats.Gaps++
		dst = append(dst, uint16(e))
	}
	n := 0
	for _, p := range r.pending {
		if now.Sub(p.seen) >= r.window || (p.count >= r.maxPer && now.Sub(p.lastNACK) >= rto) {
			r.stats.GaveUp++
			continue
		}
		if p.count < r.maxPer && now.Sub(p.lastNACK) >= rto {
			p.count++
			p.lastNACK = now
			dst = append(dst, uint16(p.ext))
		}
		r.pending[n] = p
		n++
	}
	r.pending = r.pending[:n]
	return dst
}

// nextDue returns when due has work next: the earliest retransmission timeout or window end of a pending
// sequence number; ok is false when nothing is pending.
func (r *repairState) nextDue() (at time.Time, ok bool) {
	rto := r.rto()
	if r.openTail {
		at, ok = r.lastSeen.Add(tailProbe), true
	}
	for _, p := range r.pending {
		t := p.lastNACK.Add(rto)
		if end := p.seen.Add(r.window); end.Before(t) {
			t = end
		}
		if !ok || t.Before(at) {
			at, ok = t, true
		}
	}
	return at, ok
}

// span returns how long after a gap is seen its packets are still asked for and answered: maxPer
// timeouts (the last NACK goes out at (maxPer-1) timeouts and its answer is due one timeout later), at most
// the window.
func (r *repairState) span() time.Duration {
	return min(time.Duration(r.maxPer)*r.rto(), r.window)
}

// cancel drops every pending sequence number (a keyframe was requested).
func (r *repairState) cancel() {
	r.stats.Cancelled += uint64(len(r.pending))
	r.pending = r.pending[:0]
}

// repairer is the interceptor that sends NACKs for the video stream: it replaces pion's NACK generator,
// which sends on a fixed 100 ms tick, so a missing packet waited up to 100 ms before it was asked for and
// its retransmission often came after the frame's display deadline. It watches the first remote stream
// that negotiated "nack" and writes RTCP through the writer it is bound to.
type repairer struct {
	interceptor.NoOp
	clock Clock

	mu         sync.Mutex
	st         repairState
	w          interceptor.RTCPWriter
	ssrc       uint32
	bound      bool
	senderSSRC uint32
	timer      Stopper
	timerAt    time.Time
	closed     bool
	buf        []uint16
}

func newRepairer(c *Config) *repairer {
	return &repairer{
		clock:      c.Clock,
		senderSSRC: rand.Uint32(),
		st: repairState{maxPer: c.MaxNACKsPerPacket, minInterval: c.NACKMinInterval, initialRTT: DefaultNACKInitialRTT,
			window: c.RepairWindow, maxGap: int64(c.MaxNACKGap)},
	}
}

// NewInterceptor implements interceptor.Factory; one repairer serves one PeerConnection.
func (r *repairer) NewInterceptor(string) (interceptor.Interceptor, error) { return r, nil }

// BindRTCPWriter implements interceptor.Interceptor.
func (r *repairer) BindRTCPWriter(w interceptor.RTCPWriter) interceptor.RTCPWriter {
	r.mu.Lock()
	r.w = w
	r.mu.Unlock()
	return w
}

// BindRemoteStream implements interceptor.Interceptor.
func (r *repairer) BindRemoteStream(info *interceptor.StreamInfo, reader interceptor.RTPReader) interceptor.RTPReader {
	nack := false
	for _, fb := range info.RTCPFeedback {
		if fb.Type == "nack" && fb.Parameter == "" {
			nack = true
		}
	}
	r.mu.Lock()
	if !nack || r.bound {
		r.mu.Unlock()
		return reader
	}
	r.bound, r.ssrc = true, info.SSRC
	r.mu.Unlock()
	return interceptor.RTPReaderFunc(func(b []byte, a interceptor.Attributes) (int, interceptor.Attributes, error) {
		n, attr, err := reader.Read(b, a)
		if err != nil {
			return n, attr, err
		}
		if attr == nil {
			attr = make(interceptor.Attributes)
		}
		h, err := attr.GetRTPHeader(b[:n])
		if err != nil {
			return n, attr, err
		}
		r.onPacket(h.SequenceNumber, h.Marker)
		return n, attr, nil
	})
}

// Close implements interceptor.Interceptor.
func (r *repairer) Close() error {
	r.mu.Lock()
	r.closed = true
	if r.timer != nil {
		r.timer.Stop()
	}
	r.mu.Unlock()
	return nil
}

func (r *repairer) onPacket(seq uint16, marker bool) {
	now := r.clock.Now()
	r.mu.Lock()
	r.buf = r.st.onPacket(seq, marker, now, r.buf[:0])
	r.sendLocked(now)
}

// sendLocked writes a NACK for r.buf, re-arms the timer and unlocks r.mu.
func (r *repairer) sendLocked(now time.Time) {
	var pkt rtcp.Packet
	if len(r.buf) > 0 && r.w != nil && !r.closed {
		pkt = &rtcp.TransportLayerNack{SenderSSRC: r.senderSSRC, MediaSSRC: r.ssrc,
			Nacks: rtcp.NackPairsFromSequenceNumbers(r.buf)}
	}
	w := r.w
	r.armLocked(now)
	r.mu.Unlock()
	if pkt != nil {
		_, _ = w.Write([]rtcp.Packet{pkt}, interceptor.Attributes{})
	}
}

// armLocked sets the timer to the next time a pending packet is due.
func (r *repairer) armLocked(now time.Time) {
	at, ok := r.st.nextDue()
	if r.closed || !ok {
		return
	}
	if r.timer != nil && !r.timerAt.IsZero() && !r.timerAt.After(at) {
		return // an earlier (or equal) wake-up is pending
	}
	if r.timer != nil {
		r.timer.Stop()
	}
	r.timerAt = at
	r.timer = r.clock.AfterFunc(max(at.Sub(now), 0), r.onTimer)
}

func (r *repairer) onTimer() {
	now := r.clock.Now()
	r.mu.Lock()
	r.timerAt = time.Time{}
	r.timer = nil
	r.buf = r.st.due(now, r.buf[:0])
	r.sendLocked(now)
}

// cancel stops asking for every missing packet (a keyframe was requested).
func (r *repairer) cancel() {
	r.mu.Lock()
	r.st.cancel()
	r.mu.Unlock()
}

// setICERTT gives the ICE round trip, used until a NACK round trip was measured.
func (r *repairer) setICERTT(d time.Duration) {
	r.mu.Lock()
	r.st.iceRTT = d
	r.mu.Unlock()
}

// span returns repairState.span.
func (r *repairer) span() time.Duration {
	r.mu.Lock()
	defer r.mu.Unlock()
	return r.st.span()
}

// stats returns the counters.
func (r *repairer) stats() ingest.RepairStats {
	r.mu.Lock()
	defer r.mu.Unlock()
	s := r.st.stats
	s.RTT = r.st.rtt()
	return s
}
