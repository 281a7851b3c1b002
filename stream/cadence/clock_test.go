package cadence

import (
	"errors"
	"fmt"
	"strings"
	"testing"

	"stopgap/filter"
	"stopgap/internal/display"
)

// logHandler records the Clock's instructions as text, in order.
type logHandler struct{ log []string }

func (h *logHandler) Telemetry(s filter.Sample, arrivalUs int64) {
	h.log = append(h.log, fmt.Sprintf("tel %d@%d", s.TimeUs, arrivalUs))
}

func (h *logHandler) Missing(t Tick) {
	h.log = append(h.log, fmt.Sprintf("miss %d d=%d cut=%g", t.K, t.DeadlineUs, t.Policy.CutoffConfidence))
}

func (h *logHandler) take() string {
	s := strings.Join(h.log, "; ")
	h.log = h.log[:0]
	return s
}

const testPeriod = 100_000 // 10 fps keeps the numbers readable

func newTestClock(t *testing.T, cfg ClockConfig) *Clock {
	t.Helper()
	if cfg.PeriodUs == 0 {
		cfg.PeriodUs = testPeriod
	}
	c, err := NewClock(cfg)
	if err != nil {
		t.Fatal(err)
	}
	return c
}

// TestClockLiveRule: a frame ready exactly at its deadline is LIVE, one
// microsecond later it is late and its tick was filled at the deadline.
func TestClockLiveRule(t *testing.T) {
	var h logHandler
	c := newTestClock(t, ClockConfig{AllowanceUs: 20_000, FixedLatency: true, LatencyUs: 50_000, Policy: display.DefaultPolicy()})
	if v := c.Frame(&h, 0, 50_000); !v.Live || v.Tick.K != 0 || v.Tick.DeadlineUs != 70_000 {
		t.Fatalf("frame 0: %+v", v)
	}
	if v := c.Frame(&h, 100_000, 170_000); !v.Live || v.Tick.K != 1 {
		t.Errorf("frame 1 ready at its deadline: %+v, want LIVE", v)
	}
	if v := c.Frame(&h, 200_000, 270_001); v.Live || v.Tick.K != 2 || v.ArrivalUs != 270_001 {
		t.Errorf("frame 2 ready 1 µs after its deadline: %+v, want late", v)
	}
	if got, want := h.take(), "miss 2 d=270000 cut=0.5"; got != want {
		t.Errorf("instructions %q, want %q", got, want)
	}
	// A frame that skips ticks fills them first.
	if v := c.Frame(&h, 500_000, 550_000); !v.Live || v.Tick.K != 5 {
		t.Errorf("frame 5: %+v", v)
	}
	if got, want := h.take(), "miss 3 d=370000 cut=0.5; miss 4 d=470000 cut=0.5"; got != want {
		t.Errorf("instructions %q, want %q", got, want)
	}
}

// TestClockLateFrameArrival: a frame ready by its deadline that reaches the
// clock after its tick was filled is recorded as arriving just after the
// last filled deadline; frames are ready in the order they are handed in.
func TestClockLateFrameArrival(t *testing.T) {
	var h logHandler
	// The default age cap: the picture held at tick 3 is 300 ms old,
	// within it, so the outage rule (slot.go) does not apply.
	c := newTestClock(t, ClockConfig{FixedLatency: true, LatencyUs: 50_000, Policy: display.DefaultPolicy()})
	c.Frame(&h, 0, 50_000)
	c.Advance(&h, 350_001) // the display loop filled ticks 1..3
	v := c.Frame(&h, 100_000, 140_000)
	if v.Live || v.ArrivalUs != 350_001 {
		t.Errorf("frame 1 after ticks 1..3 were filled: %+v, want late at 350001", v)
	}
	// The receiver clock read earlier for the next frame: it was not
	// ready before the one handed in before it.
	if v := c.Frame(&h, 400_000, 300_000); !v.Live || v.ArrivalUs != 350_001 {
		t.Errorf("frame 4 stamped before frame 1: %+v, want ready at 350001 and LIVE", v)
	}
}

// TestClockLatencyMedian: the running median of ready - capture, frozen
// after LatencyFrames frames; a very late first frame skews only the first
// deadlines.
func TestClockLatencyMedian(t *testing.T) {
	var h logHandler
	c := newTestClock(t, ClockConfig{AllowanceUs: 20_000})
	lat := func(i int) int64 {
		if i == 0 {
			return 120_000
		}
		return 50_000 + int64(i%3)*1_000
	}
	for i := 0; i < LatencyFrames+5; i++ {
		capture := int64(i) * testPeriod
		v := c.Frame(&h, capture, capture+lat(i))
		got, final := c.Latency()
		switch {
		case i == 0 && got != 120_000:
			t.Errorf("after frame 0: latency %d, want 120000", got)
		case i == 1 && got != 120_000:
			t.Errorf("after frame 1: latency %d, want the upper median 120000", got)
		case i >= LatencyFrames-1 && (got != 51_000 || !final):
			t.Errorf("after frame %d: latency %d final %v, want 51000 frozen", i, got, final)
		case i < LatencyFrames-1 && final:
			t.Errorf("after frame %d: frozen too early", i)
		}
		if v.Tick.DeadlineUs != capture+got+20_000 {
			t.Errorf("frame %d: deadline %d, want capture + %d + allowance", i, v.Tick.DeadlineUs, got)
		}
	}
	// Frozen: a slow frame no longer moves it.
	capture := int64(LatencyFrames+5) * testPeriod
	c.Frame(&h, capture, capture+400_000)
	if got, _ := c.Latency(); got != 51_000 {
		t.Errorf("after a slow frame: latency %d, want 51000", got)
	}
}

// TestClockCutoffOncePerTick: the cutoff is read exactly once per decided
// tick, LIVE or missing; a value outside [0, 1] is refused and counted, and
// the previous cutoff is used.
func TestClockCutoffOncePerTick(t *testing.T) {
	var h logHandler
	reads := map[int]int{}
	values := map[int]float64{0: 0.4, 1: 0.6, 2: 1.5, 3: 0.2}
	c := newTestClock(t, ClockConfig{FixedLatency: true, LatencyUs: 50_000, Policy: display.DefaultPolicy(),
		Cutoff: func(k int) float64 { reads[k]++; return values[k] }})
	c.Frame(&h, 0, 50_000)
	c.Advance(&h, 350_001)
	if got, want := h.take(), "miss 1 d=150000 cut=0.6; miss 2 d=250000 cut=0.6; miss 3 d=350000 cut=0.2"; got != want {
		t.Errorf("instructions %q, want %q", got, want)
	}
	for k := 0; k <= 3; k++ {
		if reads[k] != 1 {
			t.Errorf("tick %d: cutoff read %d times, want once", k, reads[k])
		}
	}
	if n := c.Stats().CutoffsRefused; n != 1 {
		t.Errorf("%d cutoffs refused, want 1", n)
	}
}

// TestClockTelemetryGating: a sample reaches the handler before the first
// tick whose deadline it arrived by; one that arrives after that tick was
// filled is moved just past it; one later than the history window after it
// was taken is dropped (on the vehicle clock, latency frozen).
func TestClockTelemetryGating(t *testing.T) {
	var h logHandler
	c := newTestClock(t, ClockConfig{FixedLatency: true, LatencyUs: 80_000, HistoryUs: 2_000_000, VehicleClock: true})
	c.Telemetry(&h, filter.Sample{TimeUs: -10}, 70_000) // before the first frame: at once
	if got := h.take(); got != "tel -10@70000" {
		t.Errorf("before the first frame: %q", got)
	}
	c.Frame(&h, 0, 80_000)
	c.Telemetry(&h, filter.Sample{TimeUs: 50_000}, 130_000)
	c.Telemetry(&h, filter.Sample{TimeUs: 100_000}, 181_000)
	if got := h.take(); got != "" {
		t.Errorf("samples given before their tick: %q", got)
	}
	c.Advance(&h, 180_001) // tick 1 (deadline 180000) filled
	if got, want := h.take(), "tel 50000@130000; miss 1 d=180000 cut=0"; got != want {
		t.Errorf("instructions %q, want %q", got, want)
	}
	c.Telemetry(&h, filter.Sample{TimeUs: 90_000}, 175_000) // reached the clock after tick 1 was filled
	c.Advance(&h, 280_001)
	if got, want := h.take(), "tel 100000@181000; tel 90000@180001; miss 2 d=280000 cut=0"; got != want {
		t.Errorf("instructions %q, want %q", got, want)
	}
	tests := []struct {
		name              string
		timeUs, arrivalUs int64
		kept              bool
	}{
		{"exactly the window late", 1_000_000, 3_080_000, true},
		{"one microsecond more", 1_000_000, 3_080_001, false},
		{"after a 3 s outage behind a reliable channel", 1_000_000, 5_880_000, false},
		{"early (clock offset above the nominal latency)", 1_000_000, 1_000_000, true},
	}
	for _, tc := range tests {
		if got := c.Telemetry(&h, filter.Sample{TimeUs: tc.timeUs}, tc.arrivalUs); got != tc.kept {
			t.Errorf("%s: kept %v, want %v", tc.name, got, tc.kept)
		}
	}
	if n := c.Stats().TelemetryDropped; n != 2 {
		t.Errorf("%d samples dropped, want 2", n)
	}
}

// TestClockFrameAt: a driver that knows the ticks (a replay of a recording)
// starts at its first arrived frame; earlier ticks are filled when it comes,
// with the deadline the rule gives them.
func TestClockFrameAt(t *testing.T) {
	var h logHandler
	c := newTestClock(t, ClockConfig{FixedLatency: true, LatencyUs: 50_000})
	if v := c.FrameAt(&h, 2, 200_000, 250_000); !v.Live || v.Tick.K != 2 || v.Tick.TargetUs != 200_000 {
		t.Fatalf("frame 2: %+v", v)
	}
	if got, want := h.take(), "miss 0 d=50000 cut=0; miss 1 d=150000 cut=0"; got != want {
		t.Errorf("instructions %q, want %q", got, want)
	}
	c.FillThrough(&h, 4)
	if got, want := h.take(), "miss 3 d=350000 cut=0; miss 4 d=450000 cut=0"; got != want {
		t.Errorf("instructions %q, want %q", got, want)
	}
}

// TestClockRecordedSchedule: a recorded schedule replaces the rule's
// targets and deadlines where it has them.
func TestClockRecordedSchedule(t *testing.T) {
	var h logHandler
	dl := []int64{60_000, 175_000}
	c := newTestClock(t, ClockConfig{FixedLatency: true, LatencyUs: 50_000, Schedule: func(k int) (int64, int64, bool) {
		if k < len(dl) {
			return int64(k)*testPeriod + 7, dl[k], true
		}
		return 0, 0, false
	}})
	c.FrameAt(&h, 0, 0, 50_000)
	if v := c.FrameAt(&h, 1, 100_000, 172_000); !v.Live || v.Tick.DeadlineUs != 175_000 || v.Tick.TargetUs != 100_007 {
		t.Errorf("frame 1: %+v, want LIVE by the recorded deadline 175000", v)
	}
	if d := c.DeadlineUs(2); d != 250_000 {
		t.Errorf("tick 2 past the recording: deadline %d, want the rule's 250000", d)
	}
}

func TestNewClockRejects(t *testing.T) {
	for _, cfg := range []ClockConfig{
		{},
		{PeriodUs: testPeriod, AllowanceUs: -1},
		{PeriodUs: testPeriod, HistoryUs: -1},
		{PeriodUs: testPeriod, Policy: display.Policy{CutoffConfidence: 2}},
	} {
		if _, err := NewClock(cfg); err == nil {
			t.Errorf("NewClock(%+v) accepted", cfg)
		} else if cfg.PeriodUs != 0 && cfg.Policy.CutoffConfidence == 0 && !errors.Is(err, ErrBadClock) {
			t.Errorf("NewClock(%+v): %v, want ErrBadClock", cfg, err)
		}
	}
}

// BenchmarkClockTick is the clock's own cost per tick: one LIVE frame and
// one missing tick with a telemetry sample each.
func BenchmarkClockTick(b *testing.B) {
	var h nopHandler
	c, err := NewClock(ClockConfig{PeriodUs: 1e6 / 30, AllowanceUs: 20_000, HistoryUs: 2_000_000, VehicleClock: true,
		Cutoff: func(int) float64 { return 0.5 }})
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	for i := 0; i < b.N; i++ {
		capture := int64(2*i) * 33_333
		c.Telemetry(&h, filter.Sample{TimeUs: capture}, capture+50_000)
		c.Frame(&h, capture, capture+50_000)
		c.Telemetry(&h, filter.Sample{TimeUs: capture + 33_333}, capture+83_000)
		c.Advance(&h, capture+33_333+80_000)
	}
}

type nopHandler struct{}

func (nopHandler) Telemetry(filter.Sample, int64) {}
func (nopHandler) Missing(Tick)                   {}
