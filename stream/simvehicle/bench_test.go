package simvehicle

import (
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/internal/lossmodel"
)

// BenchmarkLinkKeep measures the wire filter's per-packet cost (it runs on
// the publisher's sending goroutine).
func BenchmarkLinkKeep(b *testing.B) {
	clk := newVirtualClock()
	l, err := NewLink(LinkConfig{Loss: lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.05, BurstMs: 40},
		Outages: []Outage{{At: time.Hour, Duration: time.Second}}}, clk)
	if err != nil {
		b.Fatal(err)
	}
	l.SetEpoch(clk.Now())
	h := &rtp.Header{}
	b.ReportAllocs()
	for b.Loop() {
		clk.Advance(300 * time.Microsecond)
		l.Keep(h, nil)
	}
}

// BenchmarkLinkSendRTP measures putting a 1200-octet packet into the delay
// line and taking it out again.
func BenchmarkLinkSendRTP(b *testing.B) {
	l, err := NewLink(LinkConfig{Loss: lossmodel.Config{Model: lossmodel.None, JitterMs: 5}}, newVirtualClock())
	if err != nil {
		b.Fatal(err)
	}
	pkt := &rtp.Packet{Header: rtp.Header{Version: 2}, Payload: make([]byte, 1200)}
	b.ReportAllocs()
	for b.Loop() {
		l.SendRTP(pkt)
		l.free <- <-l.queue
	}
}
