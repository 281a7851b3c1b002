package relay

import (
	"bufio"
	"context"
	"encoding/csv"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"stopgap/bench"
	"stopgap/predictor"
	"stopgap/stream/cadence"
	"stopgap/stream/console"
	"stopgap/stream/recording"
)

// readTicks returns the state column of the relay's shown.csv by tick.
func readTicks(t *testing.T, dir string) []string {
	t.Helper()
	f, err := os.Open(filepath.Join(dir, ShownFile))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	var states []string
	for n := 0; sc.Scan(); n++ {
		if n == 0 {
			if sc.Text()+"\n" != ticksHeader {
				t.Fatalf("shown.csv header %q", sc.Text())
			}
			continue
		}
		fields := strings.Split(sc.Text(), ",")
		if len(fields) != 5 || fields[0] != itoa(len(states)) {
			t.Fatalf("shown.csv line %d: %q", n+1, sc.Text())
		}
		states = append(states, fields[1])
	}
	return states
}

func itoa(i int) string { return strconv.Itoa(i) }

// TestOutage feeds 40 frames with frames 15-20 lost on the link: every tick
// of the outage must be PREDICTED or STALE (never an unlabelled repeat), a
// keyframe request must go out when the loss is detected, and LIVE must
// resume at the keyframe that answers it.
func TestOutage(t *testing.T) {
	const frames, outFrom, outTo = 40, 15, 20 // outage: frames [outFrom, outTo]
	clock := &fakeClock{}
	dir := filepath.Join(t.TempDir(), "rec")
	r := testRelay(t, clock, dir)
	v := newFakeVehicle(t, clock, frames, func(i int) bool { return i >= outFrom && i <= outTo })
	runSession(t, r, v)

	// Frame 21, the first after the outage, completes the loss: the
	// assembler reports it there, the relay asks for a keyframe at once,
	// and frame 21 (an inter frame without its references) is not shown.
	v.mu.Lock()
	keyReqs, keyframes := slices.Clone(v.keyReqs), slices.Clone(v.keyframes)
	v.mu.Unlock()
	if len(keyReqs) == 0 || keyReqs[0] != outTo+1 {
		t.Fatalf("keyframe requests at frames %v, want the first at frame %d", keyReqs, outTo+1)
	}
	if !slices.Contains(keyframes, outTo+2) {
		t.Fatalf("vehicle keyframes %v, want one at frame %d (answer to the request)", keyframes, outTo+2)
	}

	states := readTicks(t, dir)
	t.Logf("ticks: %v", states)
	if len(states) != frames {
		t.Fatalf("%d ticks recorded, want %d: %v", len(states), frames, states)
	}
	predicted := 0
	for k, s := range states {
		gap := k >= outFrom && k <= outTo+1
		switch {
		case gap && s != "PREDICTED" && s != "STALE":
			t.Errorf("tick %d in the outage is %s, want PREDICTED or STALE", k, s)
		case !gap && s != "LIVE":
			t.Errorf("tick %d outside the outage is %s, want LIVE", k, s)
		}
		if s == "PREDICTED" {
			predicted++
		}
	}
	if predicted == 0 {
		t.Errorf("no PREDICTED tick in a 233 ms outage at steady speed with telemetry: %v", states)
	}
	st := r.Stats()
	if st.TicksLive != frames-(outTo+2-outFrom) || st.TicksPredicted+st.TicksStale != outTo+2-outFrom {
		t.Errorf("stats %+v", st)
	}
	if st.KeyframeRequests == 0 || st.Losses == 0 {
		t.Errorf("stats: keyframe requests %d, losses %d", st.KeyframeRequests, st.Losses)
	}

	rec, err := recording.Open(dir)
	if err != nil {
		t.Fatalf("recording.Open: %v", err)
	}
	if len(rec.Frames) != frames {
		t.Fatalf("recording has %d frames, want %d", len(rec.Frames), frames)
	}
	for k, f := range rec.Frames {
		missing := k >= outFrom && k <= outTo+1
		if (f.File == "") != missing {
			t.Errorf("frame %d file %q, missing=%v", k, f.File, missing)
		}
		// A frame that never arrived is recorded at its tick's time on the
		// display grid (stream/cadence), an estimate within 1 us here.
		if d := f.CaptureUs - captureUs(k); d != 0 && (!missing || d < -1 || d > 1) {
			t.Errorf("frame %d capture %d, want %d", k, f.CaptureUs, captureUs(k))
		}
	}
	if len(rec.Telemetry) == 0 || !rec.Telemetry[0].HasArrival {
		t.Errorf("telemetry not recorded with arrivals: %d rows", len(rec.Telemetry))
	}

	// The offline replay of the recording, with the recorded arrivals, must
	// make the same tick decisions the relay made live.
	sum, err := bench.Replay(context.Background(), bench.ReplayConfig{
		Drive: dir, Out: filepath.Join(t.TempDir(), "report"), ArrivalsFile: filepath.Join(dir, recording.ArrivalsFile),
		Policy: predictor.DefaultPolicy(), Examples: -1, Logger: quietLogger(),
	})
	if err != nil {
		t.Fatalf("replay: %v", err)
	}
	if sum.TicksTotal != frames || sum.PredictedTicks != int(st.TicksPredicted) || sum.StaleTicks != int(st.TicksStale) {
		t.Errorf("replay: total %d predicted %d stale %d; relay: predicted %d stale %d",
			sum.TicksTotal, sum.PredictedTicks, sum.StaleTicks, st.TicksPredicted, st.TicksStale)
	}
	recordingBelongsToTicks(t, dir, nil)
	replayAgreesPerTick(t, dir, predictor.DefaultCutoffConfidence)
}

// TestRecordingMatchesReplay records sessions with losses and late frames
// around the start of the session and around the switch from the
// arrival-anchored timeline to the vehicle clock (first RTCP sender report),
// and checks that every recorded row's image, arrival and deadline belong to
// the tick of the same index and that the offline replay of the recording
// shows the same state as the relay on every tick.
func TestRecordingMatchesReplay(t *testing.T) {
	const frames = 40
	in := func(lo, hi int) func(int) bool { return func(i int) bool { return i >= lo && i <= hi } }
	tests := []struct {
		name   string
		srFrom int              // first frame delivered after the first sender report
		drop   func(i int) bool // frames lost on the link
		lateUs map[int]int64    // extra link delay per frame
	}{
		{name: "report from the start, gap", srFrom: 0, drop: in(15, 20)},
		{name: "report from the start, first frame lost", srFrom: 0, drop: in(0, 0)},
		{name: "report from the start, late frames near the start", srFrom: 0, lateUs: map[int]int64{4: 30_000, 5: 30_000}},
		{name: "report late, clean", srFrom: 6},
		{name: "report late, gap at the switch", srFrom: 6, drop: in(6, 8)},
		{name: "report late, gap before the switch", srFrom: 8, drop: in(4, 6)},
		{name: "report late, gaps after the switch", srFrom: 4, drop: func(i int) bool { return (i >= 12 && i <= 14) || i == 25 }},
		{name: "report late, first frame lost", srFrom: 3, drop: in(0, 0)},
		{name: "report late, late frames at the switch", srFrom: 5, drop: in(10, 10), lateUs: map[int]int64{5: 30_000, 6: 30_000}},
		{name: "report late, first vehicle-clock frame very late", srFrom: 5, lateUs: map[int]int64{5: 70_000}},
		{name: "report from the start, first frame very late", srFrom: 0, lateUs: map[int]int64{0: 70_000}},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			clock := &fakeClock{}
			dir := filepath.Join(t.TempDir(), "rec")
			r := testRelay(t, clock, dir)
			v := newFakeVehicle(t, clock, frames, tc.drop)
			v.srFrom = tc.srFrom
			v.extraUs = func(i int) int64 { return tc.lateUs[i] }
			runSession(t, r, v)
			if os.Getenv("DEBUGREC") != "" {
				for _, f := range []string{"frames.csv", "arrivals.csv", ShownFile} {
					b, _ := os.ReadFile(filepath.Join(dir, f))
					t.Logf("%s:\n%s", f, b)
				}
			}
			recordingBelongsToTicks(t, dir, v.extraUs)
			replayAgreesPerTick(t, dir, predictor.DefaultCutoffConfidence)
		})
	}
}

// recordingBelongsToTicks checks that every row of the recording in dir
// belongs to one display tick of the fake vehicle's frames: the row's
// capture time is that frame's, its deadline is the capture time plus the
// link latency and the allowance, and its arrival, if any, is that frame's
// arrival on the fake link (the arrival of its first packet plus at most a
// few packets).
func recordingBelongsToTicks(t *testing.T, dir string, extraUs func(int) int64) {
	t.Helper()
	rec, err := recording.Open(dir)
	if err != nil {
		t.Fatalf("recording.Open: %v", err)
	}
	if len(rec.Frames) == 0 || len(rec.Arrivals) != len(rec.Frames) {
		t.Fatalf("recording: %d frames, %d arrivals", len(rec.Frames), len(rec.Arrivals))
	}
	if n := len(readTicks(t, dir)); n != len(rec.Frames) {
		t.Fatalf("shown.csv has %d rows, frames.csv %d", n, len(rec.Frames))
	}
	period := 1e6 / testFPS
	first := int(math.Round(float64(rec.Frames[0].CaptureUs-testVehicleT0Us) / period))
	lo, hi := int64(math.MaxInt64), int64(math.MinInt64) // latencies seen so far
	prevArrivalUs := int64(-1)
	for r, f := range rec.Frames {
		i := first + r // the vehicle frame this row stands for
		a := rec.Arrivals[r]
		// Capture times of frames and nominal ticks agree to the µs
		// (RTP 90 kHz and the NTP conversion round separately).
		if d := f.CaptureUs - captureUs(i); d < -1 || d > 1 {
			t.Errorf("row %d: t_capture_us %d, want frame %d's %d", r, f.CaptureUs, i, captureUs(i))
		}
		// The latency estimate is the median of ready - capture (first
		// packet plus a few packets, see fakeVehicle), running until it
		// is frozen after cadence.LatencyFrames frames: near the link's
		// latency, or, while a very late frame is among the few so far,
		// within the latencies seen.
		if a.Arrived {
			lo, hi = min(lo, a.ArrivalUs-f.CaptureUs), max(hi, a.ArrivalUs-f.CaptureUs)
		}
		lat := a.DeadlineUs - f.CaptureUs - DefaultAllowanceMs*1000
		nominal := lat-testLatencyUs >= -1 && lat-testLatencyUs < 5_000
		early := r < cadence.LatencyFrames && lat >= lo-1 && lat <= hi+1
		if !a.HasDeadline || !nominal && !early {
			t.Errorf("row %d: t_deadline_us %d is capture + %d µs", r, a.DeadlineUs, a.DeadlineUs-f.CaptureUs)
		}
		if a.Arrived == f.NoImage {
			t.Errorf("row %d: arrived %v but image %q", r, a.Arrived, f.File)
		}
		if !a.Arrived {
			continue
		}
		want := captureUs(i) + testLatencyUs
		if extraUs != nil {
			want += extraUs(i)
		}
		// Frames are ready in decoding order: a frame whose packets came
		// before a late one's is ready with it (cadence.Clock).
		if d := a.ArrivalUs - want; d < 0 || d >= 5_000 && a.ArrivalUs != prevArrivalUs {
			t.Errorf("row %d: t_arrival_us %d is %d µs after frame %d's first packet", r, a.ArrivalUs, d, i)
		}
		prevArrivalUs = a.ArrivalUs
	}
}

// replayAgreesPerTick replays the recording in dir with its recorded
// arrivals (bench.Replay) and compares the state of every tick in the
// replay's ticks.csv with what the relay recorded in its shown.csv.
func replayAgreesPerTick(t *testing.T, dir string, cutoff float64) {
	t.Helper()
	pol := predictor.DefaultPolicy()
	pol.CutoffConfidence = cutoff
	out := filepath.Join(t.TempDir(), "report")
	if _, err := bench.Replay(context.Background(), bench.ReplayConfig{
		Drive: dir, Out: out, ArrivalsFile: filepath.Join(dir, recording.ArrivalsFile),
		Policy: pol, Examples: -1, Logger: quietLogger(),
	}); err != nil {
		t.Fatalf("replay: %v", err)
	}
	live := readTicks(t, dir)
	f, err := os.Open(filepath.Join(out, bench.TicksFile))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatalf("replay ticks.csv: %v", err)
	}
	if len(rows) == 0 || len(rows[0]) < 3 || rows[0][0] != "tick" || rows[0][2] != "state" {
		t.Fatalf("replay ticks.csv header %v", rows)
	}
	replayed := make([]string, 0, len(rows)-1)
	for n, row := range rows[1:] {
		if row[0] != itoa(n) {
			t.Fatalf("replay ticks.csv line %d: tick %q", n+2, row[0])
		}
		replayed = append(replayed, row[2])
	}
	if len(replayed) != len(live) {
		t.Errorf("replay has %d ticks, the relay recorded %d", len(replayed), len(live))
	}
	var diff []string
	for k := range min(len(live), len(replayed)) {
		if live[k] != replayed[k] {
			diff = append(diff, itoa(k)+":"+live[k]+"/"+replayed[k])
		}
	}
	if len(diff) > 0 {
		t.Errorf("replay disagrees with the relay on %d of %d ticks (tick:relay/replay): %v\nrelay:  %v\nreplay: %v",
			len(diff), len(live), diff, live, replayed)
	}
}

// replayMatches replays the recording in dir with its recorded arrivals and
// checks that the replay makes the relay's tick decisions.
func replayMatches(t *testing.T, dir string, st Stats, cutoff float64) {
	t.Helper()
	pol := predictor.DefaultPolicy()
	pol.CutoffConfidence = cutoff
	sum, err := bench.Replay(context.Background(), bench.ReplayConfig{
		Drive: dir, Out: filepath.Join(t.TempDir(), "report"), ArrivalsFile: filepath.Join(dir, recording.ArrivalsFile),
		Policy: pol, Examples: -1, Logger: quietLogger(),
	})
	if err != nil {
		t.Fatalf("replay: %v", err)
	}
	if sum.PredictedTicks != int(st.TicksPredicted) || sum.StaleTicks != int(st.TicksStale) ||
		sum.TicksTotal != int(st.TicksLive+st.TicksPredicted+st.TicksStale) {
		t.Errorf("replay: total %d predicted %d stale %d; relay: live %d predicted %d stale %d",
			sum.TicksTotal, sum.PredictedTicks, sum.StaleTicks, st.TicksLive, st.TicksPredicted, st.TicksStale)
	}
}

// TestCutoffFromConsole sets the operator's cutoff to 1: no gap can be
// predicted with full confidence, so every outage tick is STALE.
func TestCutoffFromConsole(t *testing.T) {
	clock := &fakeClock{}
	dir := filepath.Join(t.TempDir(), "rec")
	r := testRelay(t, clock, dir)
	one := 1.0
	if _, err := r.Console().SetCutoff(console.CutoffRequest{Cutoff: &one}); err != nil {
		t.Fatal(err)
	}
	v := newFakeVehicle(t, clock, 30, func(i int) bool { return i >= 10 && i <= 12 })
	runSession(t, r, v)
	states := readTicks(t, dir)
	for k := 10; k <= 13; k++ {
		if states[k] != "STALE" {
			t.Errorf("tick %d is %s at cutoff 1, want STALE", k, states[k])
		}
	}
	st := r.Stats()
	if st.TicksPredicted != 0 || st.TicksStale != 4 {
		t.Errorf("stats %+v", st)
	}
	replayMatches(t, dir, st, 1)
}

// TestLateFrames delays frames 20-22 by 30 ms: past their deadlines (latency
// 50 ms + allowance 20 ms), so their ticks are filled, and each late frame
// becomes the held frame without being shown. No keyframe is requested.
func TestLateFrames(t *testing.T) {
	clock := &fakeClock{}
	dir := filepath.Join(t.TempDir(), "rec")
	r := testRelay(t, clock, dir)
	v := newFakeVehicle(t, clock, 35, nil)
	v.extraUs = func(i int) int64 {
		if i >= 20 && i <= 22 {
			return 30_000
		}
		return 0
	}
	runSession(t, r, v)
	states := readTicks(t, dir)
	t.Logf("ticks: %v", states)
	for k, s := range states {
		late := k >= 20 && k <= 22
		if late == (s == "LIVE") {
			t.Errorf("tick %d is %s (late frame: %v)", k, s, late)
		}
	}
	st := r.Stats()
	if st.LateFrames != 3 || st.KeyframeRequests != 0 || st.Losses != 0 {
		t.Errorf("stats %+v", st)
	}
	rec, err := recording.Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	for _, a := range rec.Arrivals {
		if !a.Arrived {
			t.Errorf("frame %d recorded as never arrived", a.Index)
		}
	}
	replayMatches(t, dir, st, predictor.DefaultCutoffConfidence)
}

// TestNoSenderReport: without RTCP sender reports capture times are anchored
// to the first arrival; the schedule works the same, but nothing is recorded
// (the recording needs vehicle-clock times).
func TestNoSenderReport(t *testing.T) {
	clock := &fakeClock{}
	dir := filepath.Join(t.TempDir(), "rec")
	r := testRelay(t, clock, dir)
	v := newFakeVehicle(t, clock, 30, func(i int) bool { return i == 10 })
	v.noSR = true
	runSession(t, r, v)
	st := r.Stats()
	// Tick 10 lost, tick 11 an inter frame without references.
	if st.TicksLive != 28 || st.TicksPredicted+st.TicksStale != 2 {
		t.Errorf("stats %+v", st)
	}
	if got := readTicks(t, dir); len(got) != 0 {
		t.Errorf("recorded %d ticks without vehicle clock", len(got))
	}
}

// TestOverdueTicksNotDrawn: a tick filled more than a period after its
// deadline (a display loop behind on a busy machine: its successor is due
// too) is decided and counted but not drawn, NOT_SHOWN; one filled less than
// a period late is drawn. So is a tick filled while a newer real frame
// already waits in the display loop's queue (counted apart). With
// DrawOverdue every tick is drawn.
func TestOverdueTicksNotDrawn(t *testing.T) {
	periodUs := int64(math.Floor(1e6 / testFPS)) // 33333 µs at 30 fps
	now := time.Unix(1_000, 0)
	cases := []struct {
		name        string
		lateUs      int64
		waiting     bool // a decoded frame waits in the queue
		drawOverdue bool
		drawn       bool
	}{
		{"in time", 0, false, false, true},
		{"half a period late", periodUs / 2, false, false, true},
		{"just under a period late", periodUs - 1, false, false, true},
		{"just over a period late", periodUs + 1, false, false, false},
		{"three periods late", 3 * periodUs, false, false, false},
		{"three periods late, DrawOverdue", 3 * periodUs, false, true, true},
		{"in time, a newer frame waiting", 0, true, false, false},
		{"in time, a newer frame waiting, DrawOverdue", 0, true, true, true},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			r, p, done := pipelineOnFakeVehicle(t, Config{FPS: testFPS, Camera: testCamera(),
				Now: func() time.Time { return now }, DrawOverdue: c.drawOverdue})
			defer done()
			if c.waiting {
				p.frames <- frameEvent{pic: <-p.free, captureUs: 40_000, readyUs: now.UnixMicro()}
				defer func() { p.free <- (<-p.frames).pic }()
			}
			// No frame yet: a drawn tick is NO_PICTURE.
			p.Missing(cadence.Tick{K: 0, TargetUs: 0, DeadlineUs: now.UnixMicro() - c.lateUs, Policy: predictor.DefaultPolicy()})
			st := r.Stats()
			if drawn := st.TicksNoPicture == 1; drawn != c.drawn || st.TicksNoPicture+st.TicksNotShown != 1 {
				t.Errorf("%d µs late: stats %+v, want drawn %v", c.lateUs, st, c.drawn)
			}
			overrun := !c.drawn && !c.waiting
			if want := map[bool]uint64{true: 1, false: 0}[overrun]; st.Overruns != want {
				t.Errorf("%d overruns, want %d", st.Overruns, want)
			}
			waited := !c.drawn && c.waiting
			if got, want := r.met.framesWaiting.Load(), map[bool]uint64{true: 1, false: 0}[waited]; got != want {
				t.Errorf("%d ticks not drawn for a waiting frame, want %d", got, want)
			}
		})
	}
}
