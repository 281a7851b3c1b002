package whip

import (
	"testing"
	"time"

	"github.com/pion/interceptor"
	"github.com/pion/interceptor/pkg/twcc"
	"github.com/pion/rtcp"
	"github.com/pion/rtp"
	"github.com/pion/sdp/v3"
)

// feedbackWriter passes the transport-wide feedback packets written through it to a channel.
type feedbackWriter chan *rtcp.TransportLayerCC

func (w feedbackWriter) Write(pkts []rtcp.Packet, _ interceptor.Attributes) (int, error) {
	for _, p := range pkts {
		if cc, ok := p.(*rtcp.TransportLayerCC); ok {
			w <- cc
		}
	}
	return 0, nil
}

// TestFeedbackAtOnceAfterSilence drives pion's feedback generator with resumeFeedback as its ticker: feedback
// comes every FeedbackInterval while packets flow, and a packet after FeedbackResumeSilence without one is
// reported at once (its own sequence number in the feedback, so the generator recorded it first), while a
// packet after a short pause waits for the interval.
func TestFeedbackAtOnceAfterSilence(t *testing.T) {
	clk := newFakeClock()
	fb := newResumeFeedback(clk)
	gen, err := twcc.NewSenderInterceptor(twcc.SendInterval(FeedbackInterval), twcc.SendTicker(fb.ticker))
	if err != nil {
		t.Fatal(err)
	}
	g, err := gen.NewInterceptor("")
	if err != nil {
		t.Fatal(err)
	}
	chain := interceptor.NewChain([]interceptor.Interceptor{g, fb})
	defer chain.Close()
	out := make(feedbackWriter, 16)
	chain.BindRTCPWriter(out)
	const extID = 5
	info := &interceptor.StreamInfo{SSRC: 7,
		RTPHeaderExtensions: []interceptor.RTPHeaderExtension{{URI: sdp.TransportCCURI, ID: extID}}}
	next := make(chan []byte, 1)
	reader := chain.BindRemoteStream(info, interceptor.RTPReaderFunc(
		func(b []byte, a interceptor.Attributes) (int, interceptor.Attributes, error) {
			return copy(b, <-next), a, nil
		}))
	buf := make([]byte, 1500)
	send := func(seq uint16) {
		t.Helper()
		ext, err := (&rtp.TransportCCExtension{TransportSequence: seq}).Marshal()
		if err != nil {
			t.Fatal(err)
		}
		h := rtp.Header{Version: 2, PayloadType: 96, SequenceNumber: seq, SSRC: 7}
		if err := h.SetExtension(extID, ext); err != nil {
			t.Fatal(err)
		}
		raw, err := (&rtp.Packet{Header: h, Payload: []byte{0x10, 0, 0}}).Marshal()
		if err != nil {
			t.Fatal(err)
		}
		next <- raw
		if _, _, err := reader.Read(buf, nil); err != nil {
			t.Fatal(err)
		}
	}
	// expect waits for one feedback packet that reports seq as the newest.
	expect := func(what string, seq uint16) {
		t.Helper()
		select {
		case cc := <-out:
			if last := cc.BaseSequenceNumber + cc.PacketStatusCount - 1; last != seq {
				t.Errorf("%s: feedback reports up to %d, want %d", what, last, seq)
			}
		case <-time.After(2 * time.Second):
			t.Fatalf("%s: no feedback", what)
		}
	}
	none := func(what string) {
		t.Helper()
		select {
		case cc := <-out:
			t.Errorf("%s: unexpected feedback %v", what, cc)
		case <-time.After(50 * time.Millisecond):
		}
	}
	send(1)
	// The generator starts its ticker on its first packet, on its own goroutine.
	deadline := time.Now().Add(2 * time.Second)
	for {
		fb.mu.Lock()
		started := fb.timer != nil
		fb.mu.Unlock()
		if started {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("the generator never started its ticker")
		}
		time.Sleep(time.Millisecond)
	}
	none("before the first interval")
	clk.Advance(FeedbackInterval / 2)
	send(2) // half an interval after the last packet: waits for the interval
	none("after a short pause")
	clk.Advance(FeedbackInterval / 2)
	expect("first interval", 2)

	clk.Advance(FeedbackInterval / 10)
	send(3)
	none("after a short pause")
	clk.Advance(FeedbackInterval * 9 / 10)
	expect("second interval", 3)

	clk.Advance(FeedbackResumeSilence + 20*time.Millisecond)
	none("silence") // nothing new to report
	send(4)
	expect("first packet after a silence", 4)
	if got := fb.resumed(); got != 1 {
		t.Errorf("resumed %d, want 1", got)
	}
	send(5)
	none("the next packet")
	clk.Advance(FeedbackInterval)
	expect("the interval restarted at the resumption", 5)
}
