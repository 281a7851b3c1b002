package rtpstats

import (
	"math"
	"testing"
	"time"
)

// TestJitterWorkedValues checks the RFC 3550 A.8 estimator against values
// worked by hand from its formula J += (|D| - J)/16, D = (R_i - R_j) - (S_i - S_j)
// in 90 kHz units:
//
//	packet 1: S=0,    R=0 ms        -> no estimate yet, J = 0
//	packet 2: S=3000, R=40 ms=3600  -> D = 600, J = 600/16 = 37.5
//	packet 3: S=6000, R=66.667 ms=6000 -> D = -600, J = 37.5 + (600-37.5)/16 = 72.65625
func TestJitterWorkedValues(t *testing.T) {
	t0 := time.Unix(1000, 0)
	var s Receiver
	s.Add(1, 0, 10, t0)
	if s.jitter != 0 {
		t.Fatalf("jitter after one packet %v, want 0", s.jitter)
	}
	s.Add(2, 3000, 10, t0.Add(40*time.Millisecond))
	if math.Abs(s.jitter-37.5) > 1e-9 {
		t.Fatalf("jitter %v, want 37.5", s.jitter)
	}
	s.Add(3, 6000, 10, t0.Add(time.Second/15)) // 66.666667 ms = 6000 ticks
	if math.Abs(s.jitter-72.65625) > 1e-3 {
		t.Fatalf("jitter %v, want 72.65625", s.jitter)
	}
}

func TestLossAndWrap(t *testing.T) {
	tests := []struct {
		name         string
		seqs         []uint16
		lost         int64
		extMax       uint32
		fractionLost uint8
	}{
		{"in order", []uint16{10, 11, 12}, 0, 12, 0},
		// 5 expected, 4 received: fraction 1/5 as 8-bit fixed point = 256/5 = 51 (RFC 3550 A.3).
		{"one lost", []uint16{1, 2, 4, 5}, 1, 5, 51},
		{"wrap is not loss", []uint16{65534, 65535, 0, 1}, 0, 65536 + 1, 0},
		{"reordered", []uint16{1, 3, 2, 4}, 0, 4, 0},
		{"duplicate makes loss negative", []uint16{1, 2, 2, 3}, -1, 3, 0},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var s Receiver
			at := time.Unix(0, 0)
			for i, q := range tc.seqs {
				s.Add(q, uint32(i*3000), 100, at.Add(time.Duration(i)*33*time.Millisecond))
			}
			if s.Lost() != tc.lost || s.ExtendedMax() != tc.extMax {
				t.Fatalf("lost %d extMax %d, want %d and %d", s.Lost(), s.ExtendedMax(), tc.lost, tc.extMax)
			}
			if f := s.FractionLost(); f != tc.fractionLost {
				t.Fatalf("fraction lost %d, want %d", f, tc.fractionLost)
			}
			if f := s.FractionLost(); f != 0 {
				t.Fatalf("fraction lost of an empty interval %d, want 0", f)
			}
		})
	}
}

func TestCumulativeLost24(t *testing.T) {
	tests := []struct {
		lost int64
		want uint32
	}{
		{0, 0}, {5, 5}, {-1, 0xffffff}, {1 << 30, 0x7fffff}, {-(1 << 30), 0x800000},
	}
	for _, tc := range tests {
		var s Receiver
		s.started = true
		s.baseSeq = 0
		s.maxSeq = 0
		s.received = uint64(1 - tc.lost) // expected is 1
		if tc.lost > 1 {
			s.received = 0
			s.cycles = uint32(tc.lost - 1)
		}
		if got := s.CumulativeLost24(); got != tc.want {
			t.Errorf("lost %d -> %#x, want %#x", s.Lost(), got, tc.want)
		}
	}
}
