package cadence

import (
	"fmt"
	"strings"
	"testing"

	"stopgap/internal/display"
)

// slotOp is one step of a capture-jitter scenario: a frame (Frame, or
// FrameAt with tick at when at >= 0) captured at c and ready at r.
type slotOp struct {
	c, r int64
	at   int
}

func fr(c, r int64) slotOp          { return slotOp{c: c, r: r, at: -1} }
func frAt(k int, c, r int64) slotOp { return slotOp{c: c, r: r, at: k} }

// onGrid returns frames 0..n-1 captured on the grid and ready 50 ms later.
func onGrid(n int) []slotOp {
	var ops []slotOp
	for i := range n {
		ops = append(ops, fr(int64(i)*testPeriod, int64(i)*testPeriod+50_000))
	}
	return ops
}

// TestClockCaptureJitter holds the cases of the capture-jitter rule
// (slot.go) as the Clock decides them. Period 100 ms, L = 50 ms, allowance
// 20 ms (so d_k = k*100 ms + 70 ms) unless a case says otherwise. Each case
// runs its setup frames, then its frames, and compares the Clock's
// instructions and verdicts for the latter: "miss K" for a tick filled,
// "live K" / "live K moved" / "late K" per frame.
func TestClockCaptureJitter(t *testing.T) {
	for _, c := range []struct {
		name        string
		allowanceUs int64
		setup, ops  []slotOp
		want        string
	}{
		{name: "own tick open", setup: onGrid(5),
			ops: []slotOp{fr(500_000, 550_000)}, want: "live 5"},
		{name: "sender skipped two, frame early enough for an open tick before its own", allowanceUs: 250_000, setup: onGrid(5),
			ops: []slotOp{fr(700_000, 750_000)}, want: "miss 5; miss 6; live 7"},
		{name: "first frame", ops: []slotOp{fr(0, 50_000)}, want: "live 0"},
		{name: "own tick shown with an older frame: next tick", setup: onGrid(5),
			ops: []slotOp{fr(440_000, 480_000), fr(540_000, 590_000)}, want: "live 5 moved; live 6 moved"},
		{name: "own tick filled, captured after its time: next tick", setup: onGrid(4),
			ops:  []slotOp{fr(410_000, 480_000), fr(500_000, 550_000), fr(600_000, 650_000)},
			want: "miss 4; live 5 moved; live 6 moved; live 7 moved"},
		{name: "the display stays one tick behind until the sender skips a frame", setup: onGrid(4),
			ops:  []slotOp{fr(410_000, 480_000), fr(500_000, 550_000), fr(700_000, 750_000)},
			want: "miss 4; live 5 moved; live 6 moved; live 7"},
		{name: "own tick filled, captured at its time: late", setup: onGrid(4),
			ops: []slotOp{fr(400_000, 480_000), fr(500_000, 550_000)}, want: "miss 4; late 4; live 5"},
		{name: "own tick filled, captured within the margin after its time: late", setup: onGrid(4),
			ops: []slotOp{fr(400_000+JitterMarginUs, 480_000)}, want: "miss 4; late 4"},
		{name: "older than the frame shown on its tick: late", setup: onGrid(4),
			ops: []slotOp{fr(420_000, 460_000), fr(410_000, 465_000)}, want: "live 4; late 4"},
		{name: "two ticks behind, though newer: late", setup: onGrid(5),
			ops: []slotOp{fr(440_000, 480_000), fr(445_000, 490_000)}, want: "live 5 moved; late 4"},
		{name: "nearest to the tick after the open one, captured before its time: open tick", setup: onGrid(5),
			ops: []slotOp{fr(560_000, 565_000), fr(600_000, 650_000)}, want: "live 5 moved; live 6"},
		{name: "nearest to the tick after the open one, captured after its time: own tick", allowanceUs: 100_000, setup: onGrid(5),
			ops: []slotOp{fr(610_000, 640_000)}, want: "miss 5; live 6"},
		{name: "nearest to the tick after the open one, captured at its time: own tick", allowanceUs: 100_000, setup: onGrid(5),
			ops: []slotOp{fr(600_000, 640_000)}, want: "miss 5; live 6"},
		{name: "nearest to the tick after the open one, too late for the open tick: own tick", setup: onGrid(5),
			ops: []slotOp{fr(560_000, 575_000)}, want: "miss 5; live 6"},
		{name: "after an outage past the age cap: the first frame, late, on the open tick", setup: onGrid(5),
			ops:  []slotOp{fr(1_500_000, 1_650_000), fr(1_600_000, 1_690_000)},
			want: "miss 5; miss 6; miss 7; miss 8; miss 9; miss 10; miss 11; miss 12; miss 13; miss 14; miss 15; live 16 resumed; live 17 moved"},
		{name: "after an outage past the age cap, ready more than ResumeMaxLateUs after its deadline: late", setup: onGrid(5),
			ops: []slotOp{fr(1_500_000, 1_570_000+ResumeMaxLateUs+1)}, want: "miss 5; miss 6; miss 7; miss 8; miss 9; miss 10; miss 11; miss 12; miss 13; miss 14; miss 15; miss 16; late 15"},
		{name: "after an outage past the age cap, ready ResumeMaxLateUs after its deadline: open tick", setup: onGrid(5),
			ops: []slotOp{fr(1_500_000, 1_570_000+ResumeMaxLateUs)}, want: "miss 5; miss 6; miss 7; miss 8; miss 9; miss 10; miss 11; miss 12; miss 13; miss 14; miss 15; live 16 resumed"},
		{name: "after an outage as long as the age cap: late", setup: onGrid(5),
			ops: []slotOp{fr(1_000_000, 1_300_000)}, want: "miss 5; miss 6; miss 7; miss 8; miss 9; miss 10; miss 11; miss 12; late 10"},
		{name: "after an outage past the age cap, not newer than the held picture: late", setup: onGrid(5),
			ops: []slotOp{fr(400_000+JitterMarginUs, 1_800_000)}, want: "miss 5; miss 6; miss 7; miss 8; miss 9; miss 10; miss 11; miss 12; miss 13; miss 14; miss 15; miss 16; miss 17; late 4"},
		{name: "after an outage past the age cap, a recording's frame on its row (FrameAt)",
			setup: []slotOp{frAt(0, 0, 50_000), frAt(1, 100_000, 150_000)},
			ops:   []slotOp{frAt(18, 1_500_000, 1_800_000), frAt(19, 1_600_000, 1_810_000)}, want: "miss 2; miss 3; miss 4; miss 5; miss 6; miss 7; miss 8; miss 9; miss 10; miss 11; miss 12; miss 13; miss 14; miss 15; miss 16; miss 17; live 18; live 19"},
		{name: "one tick ahead before any tick was decided (FrameAt)",
			ops: []slotOp{frAt(1, 60_000, 100_000)}, want: "miss 0; live 1"},
		{name: "a modelled link's frame k moves as a live frame would (FrameAt)",
			setup: []slotOp{frAt(0, 0, 50_000), frAt(1, 100_000, 150_000), frAt(2, 200_000, 250_000), frAt(3, 300_000, 350_000)},
			ops:   []slotOp{frAt(4, 410_000, 480_000), frAt(5, 500_000, 550_000)}, want: "miss 4; live 5 moved; live 6 moved"},
		{name: "a recording's moved frames on their rows are not moved again (FrameAt)",
			setup: []slotOp{frAt(0, 0, 50_000), frAt(1, 100_000, 150_000), frAt(2, 200_000, 250_000), frAt(3, 300_000, 350_000)},
			ops:   []slotOp{frAt(5, 410_000, 480_000), frAt(6, 500_000, 550_000)}, want: "miss 4; live 5; live 6"},
	} {
		t.Run(c.name, func(t *testing.T) {
			var h logHandler
			allowance := int64(20_000)
			if c.allowanceUs != 0 {
				allowance = c.allowanceUs
			}
			clk := newTestClock(t, ClockConfig{AllowanceUs: allowance, FixedLatency: true, LatencyUs: 50_000, Policy: display.DefaultPolicy()})
			run := func(ops []slotOp) {
				for _, op := range ops {
					var v Frame
					if op.at >= 0 {
						v = clk.FrameAt(&h, op.at, op.c, op.r)
					} else {
						v = clk.Frame(&h, op.c, op.r)
					}
					switch {
					case !v.Live:
						h.log = append(h.log, fmt.Sprintf("late %d", v.Tick.K))
					case v.Resumed:
						h.log = append(h.log, fmt.Sprintf("live %d resumed", v.Tick.K))
					case v.MovedOn:
						h.log = append(h.log, fmt.Sprintf("live %d moved", v.Tick.K))
					default:
						h.log = append(h.log, fmt.Sprintf("live %d", v.Tick.K))
					}
				}
			}
			run(c.setup)
			h.take()
			run(c.ops)
			var got []string
			for _, s := range h.log {
				if f := strings.Fields(s); f[0] == "miss" {
					s = "miss " + f[1] // deadlines and cutoffs are other tests' business
				}
				got = append(got, s)
			}
			if g := strings.Join(got, "; "); g != c.want {
				t.Errorf("got  %q\nwant %q", g, c.want)
			}
			resumed := uint64(strings.Count(c.want, "resumed"))
			moved := uint64(strings.Count(c.want, "moved")) + resumed
			if st := clk.Stats(); st.MovedOn != moved || st.Resumed != resumed {
				t.Errorf("Stats() MovedOn, Resumed = %d, %d; want %d, %d", st.MovedOn, st.Resumed, moved, resumed)
			}
		})
	}
}
