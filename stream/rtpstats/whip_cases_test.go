package rtpstats

import (
	"math"
	"testing"
	"time"
)

func TestRxStatsLoss(t *testing.T) {
	tests := []struct {
		name     string
		seqs     []uint16
		wantLost int64
		wantMax  uint32
	}{
		{"in order", []uint16{10, 11, 12, 13}, 0, 13},
		{"one gap", []uint16{10, 11, 13, 14}, 1, 14},
		// Wrap is not loss: 65534, 65535, 0, 1 are four consecutive packets; extended max = 65536 + 1.
		{"wrap without loss", []uint16{65534, 65535, 0, 1}, 0, 65537},
		{"loss across wrap", []uint16{65534, 0, 1}, 1, 65537},
		// Reordered packet arrives late: still counted, does not move max.
		{"reordered", []uint16{5, 7, 6, 8}, 0, 8},
		// Duplicates make loss negative (RFC 3550 6.4.1 allows this).
		{"duplicate", []uint16{5, 6, 6, 7}, -1, 7},
		// A late packet from before the wrap must not count a second cycle. 65534 precedes the first
		// packet (the base), so it is received but not expected: loss -1, as A.3 computes it.
		{"late across wrap", []uint16{65535, 0, 65534, 1}, -1, 65537},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var s Receiver
			for _, q := range tc.seqs {
				s.Add(q, 0, 100, time.Unix(0, 0))
			}
			if got := s.Lost(); got != tc.wantLost {
				t.Errorf("lost = %d, want %d", got, tc.wantLost)
			}
			if got := s.ExtendedMax(); got != tc.wantMax {
				t.Errorf("extendedMax = %d, want %d", got, tc.wantMax)
			}
		})
	}
}

// TestRxStatsJitter uses the recursion of RFC 3550 A.8 with hand-computed values at 90 kHz.
// Frames every 3000 ticks (33.3 ms); arrivals deviate from the nominal schedule by 0, +1 ms, 0, -1 ms.
// |D| per step = 90, 90, 90 ticks (1 ms = 90 ticks). J1 = 90/16 = 5.625; J2 = 5.625 + (90-5.625)/16 = 10.8984375;
// J3 = 10.8984375 + (90-10.8984375)/16 = 15.842285...
func TestRxStatsJitter(t *testing.T) {
	s := Receiver{ClockRateHz: 90000}
	t0 := time.Unix(1000, 0)
	dev := []time.Duration{0, time.Millisecond, 0, -time.Millisecond}
	for i, d := range dev {
		ts := uint32(0xFFFFF000) + uint32(i*3000) // crosses the 32-bit wrap on the second packet
		// Nominal arrival follows the tick schedule exactly (3000 ticks = 33 333 333.3 ns, truncated to ns).
		arr := t0.Add(time.Duration(float64(i)*3000/90000*1e9) + d)
		s.Add(uint16(i), ts, 1000, arr)
	}
	want := 15.842285156
	if math.Abs(s.jitter-want) > 1e-3 {
		t.Fatalf("jitter = %.6f ticks, want %.6f", s.jitter, want)
	}
	s2 := Receiver{ClockRateHz: 90000}
	for i := 0; i < 10; i++ {
		s2.Add(uint16(i), uint32(i*3000), 1000, t0.Add(time.Duration(float64(i)*3000/90000*1e9)))
	}
	if s2.jitter > 0.01 {
		t.Errorf("perfectly paced stream: jitter = %.4f ticks, want about 0", s2.jitter)
	}
}

func TestRxStatsPaddingAndBytes(t *testing.T) {
	var s Receiver
	s.Add(1, 0, 1200, time.Time{})
	s.Add(2, 0, 0, time.Time{})
	if s.bytes != 1200 || s.padding != 1 || s.received != 2 {
		t.Fatalf("bytes=%d padding=%d received=%d", s.bytes, s.padding, s.received)
	}
}
