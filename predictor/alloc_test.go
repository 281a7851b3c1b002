package predictor

import (
	"testing"

	"gocv.io/x/gocv"
)

// TestFillerTicksDoNotAllocate: once warmed up (scratch slices grown to the
// scene), the per-frame paths allocate nothing on the Go heap: a live
// frame, a gap's first PREDICTED tick (with the per-gap estimates: far
// depth, upright structure, movers and their marks) and the next tick of
// the gap, on the street scene of BenchmarkFillerTickVsBare1280x720 at a
// smaller size.
func TestFillerTicksDoNotAllocate(t *testing.T) {
	c := benchCam()
	c.Width, c.Height, c.Fx, c.Fy, c.Cx, c.Cy = 640, 360, c.Fx/2, c.Fy/2, c.Cx/2, c.Cy/2
	f, err := NewFiller(FillerConfig{Camera: c, Policy: DefaultPolicy(), Motion: &fakeMotion{SpeedMps: 12, SigmaPerS: 0.05}})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	prev, last := streetPair(t, c)
	defer prev.Close()
	defer last.Close()
	dst := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer dst.Close()
	gap := int64(0)
	var tk Tick
	newGap := func() {
		gap += 1_000_000
		// A real frame 200 ms before the held one: the movers compare
		// with it (DefaultMoverBaselineMs).
		if _, err = f.Live(prev, gap-166_667, &dst); err == nil {
			_, err = f.Live(prev, gap, &dst)
		}
		if err == nil {
			_, err = f.Live(last, gap+33_333, &dst)
		}
		if err == nil {
			tk, err = f.Missing(gap+133_333, &dst)
		}
	}
	steady := func() { tk, err = f.Missing(gap+166_666, &dst) }
	for range 3 { // warm up (and fill the older frames, MoverHistory)
		newGap()
		steady()
	}
	if err != nil || tk.State != StatePredicted || tk.Movers == 0 || tk.UprightSegments == 0 || f.moversFromUs != gap-166_667 {
		t.Fatalf("warm-up tick %+v %v, movers against %d us: want PREDICTED with upright segments and marks made over the baseline", tk, err, f.moversFromUs)
	}
	if n := testing.AllocsPerRun(3, newGap); n != 0 || err != nil {
		t.Errorf("a new gap (three live frames, first PREDICTED tick): %v allocations (err %v), want 0", n, err)
	}
	if n := testing.AllocsPerRun(5, steady); n != 0 || err != nil {
		t.Errorf("the next tick of a gap: %v allocations (err %v), want 0", n, err)
	}
}
