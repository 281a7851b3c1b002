package relay

import (
	"path/filepath"
	"testing"

	"stopgap/predictor"
	"stopgap/stream/recording"
)

// TestCaptureJitter drives the display clock's capture-jitter rule
// (stream/cadence/slot.go; its unit cases are in stream/cadence) through a
// live session and its recording. Frame 10 is captured (and stamped) 18 ms
// late, more than half a period, so its nearest tick is 11; it is still in
// time for tick 10 (allowance 20 ms) and is shown there, and frame 11 on
// its own tick. Frame 20 is stamped 22 ms late: too late for tick 20, so
// tick 20 is filled; frame 21 then finds its tick taken. It is shown on
// tick 22, and the frames after it one tick on, until the sender skips
// frame 30: frame 31 is on its own tick again. Only tick 20 is not LIVE
// (without the rule, ticks 10, 11, 20 and 30 were not, frames 11 and 21
// being held unseen), and the replay of the recording agrees tick for tick.
func TestCaptureJitter(t *testing.T) {
	const frames = 40
	clock := &fakeClock{}
	dir := filepath.Join(t.TempDir(), "rec")
	r := testRelay(t, clock, dir)
	v := newFakeVehicle(t, clock, frames, nil)
	v.skip = func(i int) bool { return i == 30 }
	v.lateCaptureUs = func(i int) int64 {
		switch i {
		case 10:
			return 18_000
		case 20:
			return 22_000
		}
		return 0
	}
	runSession(t, r, v)
	states := readTicks(t, dir)
	t.Logf("ticks: %v", states)
	if len(states) != frames {
		t.Fatalf("%d ticks, want %d", len(states), frames)
	}
	for k, s := range states {
		if (k == 20) == (s == "LIVE") {
			t.Errorf("tick %d is %s", k, s)
		}
	}
	st := r.Stats()
	if st.FramesMovedOn != 10 || st.LateFrames != 0 {
		t.Errorf("frames moved on %d (want 10: frames 10 and 21-29), late %d (want 0)", st.FramesMovedOn, st.LateFrames)
	}
	rec, err := recording.Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	// Each row holds the frame shown on that tick, at its real capture time.
	for k, f := range rec.Frames {
		want := int64(-1)
		switch {
		case k == 10:
			want = captureUs(10) + 18_000
		case k < 20 || k >= 31:
			want = captureUs(k)
		case k == 21:
			want = captureUs(20) + 22_000
		case k >= 22 && k <= 30:
			want = captureUs(k - 1)
		}
		if want >= 0 && (f.NoImage || f.CaptureUs < want-1 || f.CaptureUs > want+1) {
			t.Errorf("row %d: capture %d (image %v), want %d", k, f.CaptureUs, !f.NoImage, want)
		}
	}
	replayMatches(t, dir, st, predictor.DefaultCutoffConfidence)
	replayAgreesPerTick(t, dir, predictor.DefaultCutoffConfidence)
}
