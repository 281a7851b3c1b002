package whip

import (
	"net/http"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/pion/interceptor"
	"github.com/pion/rtcp"
	"github.com/pion/sdp/v3"
)

func newTestRepair() *repairState {
	return &repairState{maxPer: 3, minInterval: 5 * time.Millisecond, initialRTT: 50 * time.Millisecond,
		window: 300 * time.Millisecond, maxGap: 256}
}

// TestRepairNACKsAtOnceThenAtRTO feeds recorded sequences: a gap is NACKed on the packet that reveals it,
// repeated only after the retransmission timeout, at most maxPer times, and a retransmission stops it.
func TestRepairNACKsAtOnceThenAtRTO(t *testing.T) {
	t0 := time.Unix(1000, 0)
	ms := func(n int) time.Time { return t0.Add(time.Duration(n) * time.Millisecond) }
	type step struct {
		at    int // ms
		seq   int // -1: call due instead
		wantN []uint16
	}
	tests := []struct {
		name      string
		steps     []step
		repaired  uint64
		gaveUp    uint64
		pendingAt int
	}{
		{
			name: "gap NACKed when seen, repaired before the timeout",
			steps: []step{{0, 10, nil}, {1, 11, nil}, {2, 14, []uint16{12, 13}}, {3, -1, nil},
				{9, 12, nil}, {10, 13, nil}, {200, -1, nil}},
			repaired: 2,
		},
		{
			// No RTT sample: timeout 2 x 50 ms = 100 ms.
			name: "unanswered gap repeated each timeout, given up after maxPer NACKs",
			steps: []step{{0, 65534, nil}, {1, 0, []uint16{65535}}, {99, -1, nil}, {101, -1, []uint16{65535}},
				{150, -1, nil}, {202, -1, []uint16{65535}}, {290, -1, nil}, {303, -1, nil}},
			gaveUp: 1,
		},
		{
			name:  "wrap is not a gap",
			steps: []step{{0, 65534, nil}, {1, 65535, nil}, {2, 0, nil}, {3, 1, nil}, {500, -1, nil}},
		},
		{
			name:  "gap after an outage is not asked for",
			steps: []step{{0, 100, nil}, {1, 101, nil}, {3000, 150, nil}, {3001, -1, nil}},
		},
		{
			name:  "a gap larger than maxGap is not asked for",
			steps: []step{{0, 100, nil}, {1, 400, nil}},
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r := newTestRepair()
			for _, s := range tc.steps {
				var got []uint16
				if s.seq < 0 {
					got = r.due(ms(s.at), nil)
				} else {
					got = r.onPacket(uint16(s.seq), true, ms(s.at), nil)
				}
				if !slices.Equal(got, s.wantN) {
					t.Fatalf("at %d ms (seq %d): NACKed %v, want %v", s.at, s.seq, got, s.wantN)
				}
			}
			if r.stats.Repaired != tc.repaired || r.stats.GaveUp != tc.gaveUp || len(r.pending) != tc.pendingAt {
				t.Errorf("repaired %d gave up %d pending %d, want %d %d %d", r.stats.Repaired, r.stats.GaveUp,
					len(r.pending), tc.repaired, tc.gaveUp, tc.pendingAt)
			}
		})
	}
}

// TestRepairRTTFollowsRetransmissions checks the RFC 6298 smoothing against values worked by hand and
// Karn's rule (a packet NACKed twice gives no sample).
func TestRepairRTTFollowsRetransmissions(t *testing.T) {
	r := newTestRepair()
	t0 := time.Unix(1000, 0)
	ms := func(n float64) time.Time { return t0.Add(time.Duration(n * float64(time.Millisecond))) }
	r.onPacket(1, true, ms(0), nil)
	r.onPacket(3, true, ms(1), nil)  // 2 missing, NACKed at 1 ms
	r.onPacket(2, true, ms(21), nil) // 20 ms round trip: SRTT 20, RTTVAR 10
	if r.srtt != 20*time.Millisecond || r.rttvar != 10*time.Millisecond {
		t.Fatalf("after one sample SRTT %v RTTVAR %v, want 20ms 10ms (RFC 6298 2.2)", r.srtt, r.rttvar)
	}
	r.onPacket(5, true, ms(30), nil) // 4 missing
	r.onPacket(4, true, ms(34), nil) // 4 ms: RTTVAR = 3/4*10 + 1/4*16 = 11.5, SRTT = 7/8*20 + 1/8*4 = 18
	if r.srtt != 18*time.Millisecond || r.rttvar != 11500*time.Microsecond {
		t.Fatalf("after two samples SRTT %v RTTVAR %v, want 18ms 11.5ms (RFC 6298 2.3)", r.srtt, r.rttvar)
	}
	if got, want := r.rto(), 64*time.Millisecond; got != want {
		t.Errorf("timeout %v, want SRTT + 4 RTTVAR = %v", got, want)
	}
	if got, want := r.span(), 192*time.Millisecond; got != want {
		t.Errorf("span %v, want 3 timeouts = %v", got, want)
	}
	// Karn: NACKed twice, then answered: no sample.
	r.onPacket(7, true, ms(40), nil)
	if got := r.due(ms(40+64), nil); !slices.Equal(got, []uint16{6}) {
		t.Fatalf("second NACK %v, want [6]", got)
	}
	r.onPacket(6, true, ms(110), nil)
	if r.stats.RTTSamples != 2 || r.stats.Repaired != 3 {
		t.Errorf("samples %d repaired %d, want 2 and 3", r.stats.RTTSamples, r.stats.Repaired)
	}
}

// TestRepairCancelAfterKeyframeRequest: a keyframe request ends every pending NACK.
func TestRepairCancelAfterKeyframeRequest(t *testing.T) {
	r := newTestRepair()
	t0 := time.Unix(1000, 0)
	r.onPacket(1, true, t0, nil)
	if got := r.onPacket(5, true, t0.Add(time.Millisecond), nil); len(got) != 3 {
		t.Fatalf("NACKed %v, want 3 sequence numbers", got)
	}
	r.cancel()
	if got := r.due(t0.Add(time.Second), nil); len(got) != 0 {
		t.Errorf("NACKed %v after cancel, want none", got)
	}
	if r.stats.Cancelled != 3 || r.stats.GaveUp != 0 {
		t.Errorf("cancelled %d gave up %d, want 3 and 0", r.stats.Cancelled, r.stats.GaveUp)
	}
}

// TestRepairerTimerResends runs the interceptor half on the fake clock: the timer re-sends at the timeout.
func TestRepairerTimerResends(t *testing.T) {
	clk := newFakeClock()
	r := newRepairer(&Config{Clock: clk, MaxNACKsPerPacket: 3, NACKMinInterval: 5 * time.Millisecond,
		RepairWindow: 300 * time.Millisecond, MaxNACKGap: 256})
	var sent [][]uint16
	r.w = rtcpWriterFunc(func(seqs []uint16) { sent = append(sent, seqs) })
	r.onPacket(10, true)
	r.onPacket(12, true)
	clk.Advance(99 * time.Millisecond)
	if len(sent) != 1 {
		t.Fatalf("NACKs before the timeout: %v, want one", sent)
	}
	clk.Advance(1 * time.Millisecond)
	if len(sent) != 2 || !slices.Equal(sent[1], []uint16{11}) {
		t.Fatalf("NACKs after the timeout: %v, want [[11] [11]]", sent)
	}
	r.cancel()
	clk.Advance(time.Second)
	if len(sent) != 2 {
		t.Errorf("NACKs after cancel: %v", sent)
	}
}

// rtcpWriterFunc records the sequence numbers of the NACKs written through it.
type rtcpWriterFunc func(seqs []uint16)

func (f rtcpWriterFunc) Write(pkts []rtcp.Packet, _ interceptor.Attributes) (int, error) {
	for _, p := range pkts {
		if n, ok := p.(*rtcp.TransportLayerNack); ok {
			var seqs []uint16
			for _, pair := range n.Nacks {
				seqs = append(seqs, pair.PacketList()...)
			}
			f(seqs)
		}
	}
	return 0, nil
}

// TestAnswerOffersCongestionFeedback: an offer with the transport-wide sequence number extension and the
// transport-cc feedback (as browsers send) gets both back in the answer, so the sender can estimate its
// bandwidth from our feedback.
func TestAnswerOffersCongestionFeedback(t *testing.T) {
	_, hs := newTestServer(t, Config{})
	offer := strings.Replace(staticOffer, "a=rtcp-fb:96 nack\r\n",
		"a=rtcp-fb:96 nack\r\na=rtcp-fb:96 transport-cc\r\na=extmap:3 "+sdp.TransportCCURI+"\r\n", 1)
	resp, answer := post(t, hs.URL, offer)
	if resp.StatusCode != http.StatusCreated {
		t.Fatalf("status %d: %s", resp.StatusCode, answer)
	}
	for _, want := range []string{"a=rtcp-fb:96 transport-cc", "a=extmap:3 " + sdp.TransportCCURI} {
		if !strings.Contains(answer, want) {
			t.Errorf("answer lacks %q:\n%s", want, answer)
		}
	}
}

// TestRepairTailProbe: when the packet after one without the marker bit (the rest of a frame) does not
// come within tailProbe, it is asked for without waiting for the next frame to show the gap; a probe that
// was right stays asked for, and one answered by the packet itself counts as repaired.
func TestRepairTailProbe(t *testing.T) {
	t0 := time.Unix(1000, 0)
	ms := func(n int) time.Time { return t0.Add(time.Duration(n) * time.Millisecond) }
	t.Run("last packet of a frame lost", func(t *testing.T) {
		r := newTestRepair()
		r.onPacket(10, true, ms(0), nil)
		r.onPacket(11, false, ms(1), nil)
		if got := r.due(ms(10), nil); len(got) != 0 {
			t.Fatalf("probed %v after 9 ms, want nothing yet", got)
		}
		if got := r.due(ms(11), nil); !slices.Equal(got, []uint16{12}) {
			t.Fatalf("probe %v, want [12]", got)
		}
		// The next frame starts at 13: 12 stays pending and is not NACKed twice at once.
		if got := r.onPacket(13, false, ms(34), nil); len(got) != 0 {
			t.Fatalf("NACKed %v on the next frame, want nothing (12 already asked for)", got)
		}
		r.onPacket(12, true, ms(35), nil) // the retransmission
		if r.stats.Repaired != 1 || len(r.pending) != 0 || r.stats.RTTSamples != 0 {
			t.Errorf("repaired %d pending %d samples %d, want 1, 0 and no RTT sample from a probe",
				r.stats.Repaired, len(r.pending), r.stats.RTTSamples)
		}
	})
	t.Run("slow packet", func(t *testing.T) {
		r := newTestRepair()
		r.onPacket(10, false, ms(0), nil)
		r.due(ms(10), nil)
		r.onPacket(11, true, ms(12), nil)
		if r.stats.Repaired != 1 || len(r.pending) != 0 {
			t.Errorf("repaired %d pending %d, want 1 and 0", r.stats.Repaired, len(r.pending))
		}
		if got := r.due(ms(100), nil); len(got) != 0 {
			t.Errorf("NACKed %v after the marker packet, want nothing", got)
		}
	})
}
