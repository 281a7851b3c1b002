package whip

import (
	"testing"
	"time"
)

func TestOffsetEstimator(t *testing.T) {
	type sample struct{ capUs, arrUs int64 }
	tests := []struct {
		name     string
		window   time.Duration
		samples  []sample
		wantBase int64
	}{
		// Receiver clock 5 s ahead of the sender, path delay 20/35/25 ms: base = 5 s + 20 ms.
		{"minimum of three", 0, []sample{{0, 5_020_000}, {33_000, 5_068_000}, {66_000, 5_091_000}}, 5_020_000},
		// Receiver clock behind the sender: offset -2 s, delays 40 and 30 ms -> base -1.970 s.
		{"negative offset", 0, []sample{{1_000_000, -960_000}, {1_100_000, -870_000}}, -1_970_000},
		// Window 1 s: the 10 ms sample at t=0 expires when the sample arriving at 1.5 s is added.
		{"old minimum expires", time.Second, []sample{{0, 10_000}, {500_000, 550_000}, {1_490_000, 1_530_000}}, 40_000},
		// The newest sample is kept even when everything is older than the window.
		{"single sample", time.Millisecond, []sample{{100, 200}}, 100},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			e := OffsetEstimator{Window: tc.window}
			if _, ok := e.BaseUs(); ok {
				t.Fatal("BaseUs ok before any sample")
			}
			for _, s := range tc.samples {
				e.Add(s.capUs, s.arrUs)
			}
			got, ok := e.BaseUs()
			if !ok || got != tc.wantBase {
				t.Fatalf("BaseUs = %d, %v; want %d", got, ok, tc.wantBase)
			}
			last := tc.samples[len(tc.samples)-1]
			ex, _ := e.ExcessUs(last.capUs, last.arrUs)
			if want := last.arrUs - last.capUs - tc.wantBase; ex != want {
				t.Errorf("ExcessUs = %d, want %d", ex, want)
			}
			rx, _ := e.ToReceiverUs(1_000)
			if rx != 1_000+tc.wantBase {
				t.Errorf("ToReceiverUs(1000) = %d, want %d", rx, 1_000+tc.wantBase)
			}
		})
	}
}

// TestOffsetEstimatorMatchesBruteForce compares the deque against a direct minimum over the window for a
// pseudo-random delay sequence, and checks the backing array stays bounded.
func TestOffsetEstimatorMatchesBruteForce(t *testing.T) {
	const window = 200 * time.Millisecond
	e := OffsetEstimator{Window: window}
	var caps, arrs []int64
	x := uint32(12345)
	for i := 0; i < 5000; i++ {
		x = x*1664525 + 1013904223 // LCG (Numerical Recipes constants), deterministic
		capUs := int64(i) * 10_000
		arrUs := capUs + 3_000_000 + int64(x>>20) // offset 3 s, delay 0..4 ms
		e.Add(capUs, arrUs)
		caps, arrs = append(caps, capUs), append(arrs, arrUs)
		want := int64(1 << 62)
		for j := range arrs {
			if arrs[j] >= arrUs-window.Microseconds() && arrs[j]-caps[j] < want {
				want = arrs[j] - caps[j]
			}
		}
		if got, _ := e.BaseUs(); got != want {
			t.Fatalf("step %d: BaseUs = %d, brute force %d", i, got, want)
		}
	}
	if cap(e.q) > 2*maxOffsetSamples {
		t.Errorf("deque capacity %d grew past bound", cap(e.q))
	}
}

func BenchmarkOffsetEstimatorAdd(b *testing.B) {
	b.ReportAllocs()
	var e OffsetEstimator
	x := uint32(1)
	for i := 0; i < b.N; i++ {
		x = x*1664525 + 1013904223
		c := int64(i) * 33_333
		e.Add(c, c+int64(x>>18))
	}
}
