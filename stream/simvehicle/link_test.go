package simvehicle

import (
	"context"
	"errors"
	"math"
	"sync"
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/internal/lossmodel"
)

func TestParseOutage(t *testing.T) {
	tests := []struct {
		in      string
		want    Outage
		wantErr bool
	}{
		{"2s+500ms", Outage{At: 2 * time.Second, Duration: 500 * time.Millisecond}, false},
		{" 3s + 1.5s @ 8s ", Outage{At: 3 * time.Second, Duration: 1500 * time.Millisecond, Every: 8 * time.Second}, false},
		{"0s+1ms", Outage{Duration: time.Millisecond}, false},
		{"2s", Outage{}, true},
		{"2s+0s", Outage{}, true},
		{"-1s+1s", Outage{}, true},
		{"1s+2s@2s", Outage{}, true},
		{"x+1s", Outage{}, true},
		{"1s+y", Outage{}, true},
		{"1s+1s@z", Outage{}, true},
	}
	for _, tc := range tests {
		t.Run(tc.in, func(t *testing.T) {
			got, err := ParseOutage(tc.in)
			if (err != nil) != tc.wantErr {
				t.Fatalf("err = %v, want error %v", err, tc.wantErr)
			}
			if err != nil {
				if !errors.Is(err, ErrConfig) {
					t.Errorf("error %v does not wrap ErrConfig", err)
				}
				return
			}
			if got != tc.want {
				t.Errorf("got %+v, want %+v", got, tc.want)
			}
			back, err := ParseOutage(got.String())
			if err != nil || back != got {
				t.Errorf("round trip via %q: %+v, %v", got.String(), back, err)
			}
		})
	}
}

func FuzzParseOutage(f *testing.F) {
	for _, s := range []string{"2s+500ms", "3s+1.5s@8s", "", "+", "@", "1h+1ns@2h", "9223372036s+1s"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		o, err := ParseOutage(s)
		if err != nil {
			return
		}
		if o.At < 0 || o.Duration <= 0 || (o.Every != 0 && o.Every <= o.Duration) {
			t.Fatalf("accepted invalid outage %+v from %q", o, s)
		}
		back, err := ParseOutage(o.String())
		if err != nil || back != o {
			t.Fatalf("round trip of %q: %+v -> %q -> %+v, %v", s, o, o.String(), back, err)
		}
	})
}

func TestOutageCovers(t *testing.T) {
	o := Outage{At: 2 * time.Second, Duration: 500 * time.Millisecond, Every: 10 * time.Second}
	for _, tc := range []struct {
		el   time.Duration
		want bool
	}{
		{0, false}, {1999 * time.Millisecond, false}, {2 * time.Second, true}, {2499 * time.Millisecond, true},
		{2500 * time.Millisecond, false}, {12 * time.Second, true}, {12600 * time.Millisecond, false},
	} {
		if got := o.covers(tc.el); got != tc.want {
			t.Errorf("covers(%v) = %v, want %v", tc.el, got, tc.want)
		}
	}
}

// runs measures the loss rate and the mean length of runs of consecutive
// lost packets for packets spaced dt apart.
func runs(t *testing.T, cfg lossmodel.Config, n int, dt time.Duration) (lossRate, meanBurstPackets float64) {
	t.Helper()
	clk := newVirtualClock()
	l, err := NewLink(LinkConfig{Loss: cfg}, clk)
	if err != nil {
		t.Fatal(err)
	}
	lost, bursts, inBurst := 0, 0, false
	for range n {
		clk.Advance(dt)
		if !l.Keep(nil, nil) {
			lost++
			if !inBurst {
				bursts++
			}
			inBurst = true
		} else {
			inBurst = false
		}
	}
	st := l.Stats()
	if st.PacketsWire != uint64(n) || st.PacketsLost != uint64(lost) {
		t.Errorf("stats %+v, want %d on the wire and %d lost", st, n, lost)
	}
	return float64(lost) / float64(n), float64(lost) / float64(bursts)
}

// TestGilbertElliott checks the per-packet chain against its closed form.
// Simple Gilbert (k = 0, h = 1): the stationary loss rate is pi_B = LossRate,
// and a Bad run sampled every dt lasts 1/(1 - P(Bad|Bad)) packets with
// P(Bad|Bad) = pi_B + (1-pi_B) exp(-dt/((1-pi_B) B)) (two-state Markov chain,
// derived in the Link documentation). For B = 50 ms, dt = 1 ms, pi_B = 0.1:
// exp(-1/45) = 0.978023, P = 0.980221, mean run 50.56 packets. For dt = 5 ms:
// exp(-5/45) = 0.894839, P = 0.905355, mean 10.57 packets = 52.8 ms.
func TestGilbertElliott(t *testing.T) {
	tests := []struct {
		name       string
		dt         time.Duration
		wantBurstP float64
	}{
		{"1ms", time.Millisecond, 50.56},
		{"5ms", 5 * time.Millisecond, 10.57},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			cfg := lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.1, BurstMs: 50, Seed: 7}
			rate, burst := runs(t, cfg, 400_000, tc.dt)
			if math.Abs(rate-0.1) > 0.02 {
				t.Errorf("loss rate %.4f, want 0.1 +- 0.02", rate)
			}
			if math.Abs(burst-tc.wantBurstP)/tc.wantBurstP > 0.12 {
				t.Errorf("mean burst %.2f packets, want %.2f +- 12%%", burst, tc.wantBurstP)
			}
			t.Logf("dt %v: loss rate %.4f, mean burst %.2f packets (closed form %.2f)", tc.dt, rate, burst, tc.wantBurstP)
		})
	}
	t.Run("none", func(t *testing.T) {
		rate, _ := runs(t, lossmodel.Config{}, 1000, time.Millisecond)
		if rate != 0 {
			t.Errorf("perfect link lost %.3f", rate)
		}
	})
	t.Run("same seed same losses", func(t *testing.T) {
		cfg := lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.2, BurstMs: 20, Seed: 3}
		a, _ := runs(t, cfg, 5000, time.Millisecond)
		b, _ := runs(t, cfg, 5000, time.Millisecond)
		if a != b {
			t.Errorf("two runs with one seed differ: %v vs %v", a, b)
		}
	})
}

func TestNewLinkRejects(t *testing.T) {
	for name, cfg := range map[string]LinkConfig{
		"loss rate":  {Loss: lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 1.5, BurstMs: 10}},
		"no burst":   {Loss: lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.1}},
		"outage":     {Outages: []Outage{{At: time.Second}}},
		"queue":      {QueuePackets: -1},
		"negative d": {Loss: lossmodel.Config{Model: lossmodel.None, ExtraDelayMs: -1}},
	} {
		t.Run(name, func(t *testing.T) {
			if _, err := NewLink(cfg, nil); !errors.Is(err, ErrConfig) {
				t.Errorf("NewLink: %v, want ErrConfig", err)
			}
		})
	}
}

// recordingSink records what leaves the delay line and when.
type recordingSink struct {
	mu    sync.Mutex
	clk   Clock
	seqs  []uint16
	times []time.Time
	tel   []string
}

func (s *recordingSink) WriteRTP(p *rtp.Packet) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.seqs = append(s.seqs, p.SequenceNumber)
	s.times = append(s.times, s.clk.Now())
	return nil
}

func (s *recordingSink) SendTelemetry(b []byte) error {
	s.mu.Lock()
	defer s.mu.Unlock()
	s.tel = append(s.tel, string(b))
	return nil
}

func TestDelayLine(t *testing.T) {
	clk := newVirtualClock()
	l, err := NewLink(LinkConfig{
		Loss:         lossmodel.Config{Model: lossmodel.None, ExtraDelayMs: 40, JitterMs: 30, Seed: 1},
		Outages:      []Outage{{At: 100 * time.Millisecond, Duration: 50 * time.Millisecond}},
		QueuePackets: 64,
	}, clk)
	if err != nil {
		t.Fatal(err)
	}
	start := clk.Now()
	l.SetEpoch(start)
	sent := make([]time.Time, 0, 70)
	payload := []byte{0x10, 1, 2, 3}
	for i := range 70 {
		ok := l.SendRTP(&rtp.Packet{Header: rtp.Header{Version: 2, SequenceNumber: uint16(i)}, Payload: payload})
		if ok != (i < 64) {
			t.Fatalf("packet %d accepted = %v with a 64-slot queue", i, ok)
		}
		if ok {
			sent = append(sent, clk.Now())
		}
		clk.Advance(500 * time.Microsecond) // 70 sends in 35 ms: none due before Run starts
	}
	payload[1] = 99 // the link copied the payload
	if st := l.Stats(); st.PacketsQueueDropped != 6 || st.PacketsIn != 70 {
		t.Errorf("stats %+v, want 6 of 70 dropped at the full queue", st)
	}
	sink := &recordingSink{clk: clk}
	ctx, cancel := context.WithCancel(context.Background())
	done := make(chan error, 1)
	go func() { done <- l.Run(ctx, sink) }()
	deadline := time.Now().Add(5 * time.Second)
	for {
		sink.mu.Lock()
		n := len(sink.seqs)
		sink.mu.Unlock()
		if n == 64 || time.Now().After(deadline) {
			break
		}
		time.Sleep(time.Millisecond)
	}
	cancel()
	<-done
	if len(sink.seqs) != 64 {
		t.Fatalf("released %d packets, want 64", len(sink.seqs))
	}
	for i, s := range sink.seqs {
		if int(s) != i {
			t.Fatalf("packet %d released as %d: the delay line reordered", i, s)
		}
		d := sink.times[i].Sub(sent[i])
		if d < 40*time.Millisecond {
			t.Errorf("packet %d delayed %v, want >= 40 ms", i, d)
		}
		// FIFO: release_i = max_{j<=i}(sent_j + 40 ms + U_j 30 ms) < sent_i + 70 ms.
		if d >= 70*time.Millisecond {
			t.Errorf("packet %d delayed %v, too long", i, d)
		}
	}
	// outages at the wire
	clk2 := newVirtualClock()
	l2, _ := NewLink(LinkConfig{Outages: []Outage{{At: 100 * time.Millisecond, Duration: 50 * time.Millisecond}}}, clk2)
	if !l2.Keep(nil, nil) {
		t.Error("dropped before the epoch was set")
	}
	l2.SetEpoch(clk2.Now())
	kept := 0
	for range 200 {
		if l2.Keep(nil, nil) {
			kept++
		}
		clk2.Advance(time.Millisecond)
	}
	if kept != 150 || l2.Stats().PacketsOutage != 50 {
		t.Errorf("kept %d of 200 over a 50 ms outage at 1 packet/ms (stats %+v)", kept, l2.Stats())
	}
}

func TestRangeLUT(t *testing.T) {
	// Worked values of Y' = 16 + 219 Y/255 and C' = 128 + 224 (C-128)/255 (BT.601 limited range).
	lut := newRangeLUT()
	for _, c := range []struct{ in, y, c byte }{{0, 16, 16}, {128, 126, 128}, {255, 235, 240}} {
		if lut.y[c.in] != c.y || lut.c[c.in] != c.c {
			t.Errorf("full %d -> Y %d C %d, want %d %d", c.in, lut.y[c.in], lut.c[c.in], c.y, c.c)
		}
	}
}

func TestOutageNow(t *testing.T) {
	clk := newVirtualClock()
	l, err := NewLink(LinkConfig{}, clk)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := l.OutageNow(time.Second); !errors.Is(err, ErrConfig) {
		t.Errorf("OutageNow before the epoch: %v, want ErrConfig", err)
	}
	l.SetEpoch(clk.Now())
	clk.Advance(3 * time.Second)
	o, err := l.OutageNow(200 * time.Millisecond)
	if err != nil || o.At != 3*time.Second {
		t.Fatalf("OutageNow: %+v, %v", o, err)
	}
	if l.Keep(nil, nil) {
		t.Error("kept a packet at the start of the outage")
	}
	clk.Advance(200 * time.Millisecond)
	if !l.Keep(nil, nil) {
		t.Error("dropped a packet after the outage")
	}
	if _, err := l.OutageNow(0); !errors.Is(err, ErrConfig) {
		t.Errorf("OutageNow(0): %v, want ErrConfig", err)
	}
}
