package relay

import (
	"bufio"
	"context"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
	"testing"

	"stopgap/bench"
	"stopgap/predictor"
	"stopgap/stream/console"
	"stopgap/stream/recording"
)

// readTicks returns the state column of ticks.csv by tick.
func readTicks(t *testing.T, dir string) []string {
	t.Helper()
	f, err := os.Open(filepath.Join(dir, TicksFile))
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	sc := bufio.NewScanner(f)
	var states []string
	for n := 0; sc.Scan(); n++ {
		if n == 0 {
			if sc.Text()+"\n" != ticksHeader {
				t.Fatalf("ticks.csv header %q", sc.Text())
			}
			continue
		}
		fields := strings.Split(sc.Text(), ",")
		if len(fields) != 5 || fields[0] != itoa(len(states)) {
			t.Fatalf("ticks.csv line %d: %q", n+1, sc.Text())
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
		if f.CaptureUs != captureUs(k) {
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
