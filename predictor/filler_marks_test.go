package predictor

import (
	"errors"
	"image"
	"math"
	"slices"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// TestFillerPrepareChangesNothingShown: a gap's first PREDICTED frame is
// the same, byte for byte and with the same marks, whether the per-gap
// estimates were made by Prepare when the held frame arrived or by the
// tick itself.
func TestFillerPrepareChangesNothingShown(t *testing.T) {
	c := benchCam()
	c.Width, c.Height, c.Fx, c.Fy, c.Cx, c.Cy = 640, 360, c.Fx/2, c.Fy/2, c.Cx/2, c.Cy/2
	prev, last := streetPair(t, c)
	defer prev.Close()
	defer last.Close()
	var shown [2]gocv.Mat
	var ticks [2]Tick
	for i, prepare := range []bool{false, true} {
		f, err := NewFiller(FillerConfig{Camera: c, Policy: DefaultPolicy(), Motion: &fakeMotion{SpeedMps: 12, SigmaPerS: 0.05}})
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		shown[i] = gocv.NewMat()
		defer shown[i].Close()
		f.Live(prev, 0, &shown[i])
		f.Live(last, 33_333, &shown[i])
		if prepare {
			f.Prepare()
		}
		if ticks[i], err = f.Missing(133_333, &shown[i]); err != nil {
			t.Fatal(err)
		}
	}
	if ticks[0].State != StatePredicted || ticks[0].Movers == 0 || ticks[0].UprightSegments == 0 {
		t.Fatalf("tick %+v: want PREDICTED with upright segments and marks", ticks[0])
	}
	ticks[0].SynthDuration, ticks[1].SynthDuration = 0, 0
	if ticks[0] != ticks[1] {
		t.Errorf("tick without Prepare %+v, with %+v", ticks[0], ticks[1])
	}
	d := gocv.NewMat()
	defer d.Close()
	gocv.AbsDiff(shown[0], shown[1], &d)
	if n := gocv.CountNonZero(d.Reshape(1, 0)); n != 0 {
		t.Errorf("%d bytes differ between the frames shown without and with Prepare", n)
	}
}

// TestFillerMoversHistory: the movers compare the held frame with the
// oldest real frame at most the baseline older, and a Filler fed every
// frame (Live, as the relay) shows the same marks, byte for byte, as one
// fed only the frames a gap needs (Hold, HoldPrevious and the frame
// MoverFrameWanted picks through HoldOlder, as the replay).
func TestFillerMoversHistory(t *testing.T) {
	c := uprightCam()
	const dtUs, n = 33_333, 9
	base := texturedFrame(t, c.Width, c.Height, 7)
	defer base.Close()
	block := texturedFrame(t, 40, 50, 12)
	defer block.Close()
	frames := make([]gocv.Mat, n)
	for i := range frames {
		frames[i] = base.Clone()
		defer frames[i].Close()
		roi := frames[i].Region(image.Rect(120+2*i, 100, 160+2*i, 150)) // 60 px/s
		block.CopyTo(&roi)
		roi.Close()
	}
	target := int64(n-1)*dtUs + 100_000
	var shown [2]gocv.Mat
	var movers [2][]Mover
	for v := range 2 {
		f, err := NewFiller(FillerConfig{Camera: c, Policy: DefaultPolicy(), Motion: &fakeMotion{SigmaPerS: 0.01}})
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		shown[v] = gocv.NewMat()
		defer shown[v].Close()
		if v == 0 {
			for i, fr := range frames {
				if _, err := f.Live(fr, int64(i)*dtUs, &shown[v]); err != nil {
					t.Fatal(err)
				}
			}
			if got := f.olderUs[:f.olderN]; len(got) != MoverHistory || got[0] != dtUs {
				t.Fatalf("older frames at %v us, want the %d before the frame before last", got, MoverHistory)
			}
		} else {
			if err := f.Hold(frames[n-1], int64(n-1)*dtUs); err != nil {
				t.Fatal(err)
			}
			if err := f.HoldPrevious(frames[n-2], int64(n-2)*dtUs); err != nil {
				t.Fatal(err)
			}
			var us []int64
			for i := range n - 2 {
				us = append(us, int64(i)*dtUs)
			}
			k, ok := f.MoverFrameWanted(int64(n-1)*dtUs, us)
			if !ok || k != 2 {
				t.Fatalf("frame wanted %d (%v), want 2: the oldest at most %g ms before the held one", k, ok, DefaultMoverBaselineMs)
			}
			if err := f.HoldOlder(frames[k], us[k]); err != nil {
				t.Fatal(err)
			}
		}
		tk, err := f.Missing(target, &shown[v])
		if err != nil || tk.State != StatePredicted || tk.Movers != 1 {
			t.Fatalf("feed %d: tick %+v, err %v; want PREDICTED with one mark", v, tk, err)
		}
		movers[v] = append(movers[v], f.movers.Movers...)
		if f.moversFromUs != 2*dtUs {
			t.Errorf("feed %d: movers detected against the frame at %d us, want %d (the oldest at most %g ms older)", v, f.moversFromUs, 2*dtUs, DefaultMoverBaselineMs)
		}
	}
	if movers[0][0] != movers[1][0] {
		t.Errorf("mover fed every frame %+v, fed the gap's frames %+v", movers[0][0], movers[1][0])
	}
	// Over the 200 ms baseline the block moved 12 px (beyond the 8 px
	// a two-frame search reaches): the apparent speed is measured to
	// within a pixel over it.
	if vx := movers[0][0].VxPxPerS; math.Abs(vx-60) > 1/0.2 {
		t.Errorf("apparent speed %.1f px/s, want 60 ± 5", vx)
	}
	d := gocv.NewMat()
	defer d.Close()
	gocv.AbsDiff(shown[0], shown[1], &d)
	if n := gocv.CountNonZero(d.Reshape(1, 0)); n != 0 {
		t.Errorf("%d bytes differ between the two feeds", n)
	}
}

// TestFillerHoldOlder: HoldOlder keeps a frame older than the frame before
// the held one as the oldest, drops older ones, and refuses one out of
// order or without held frames, changing nothing; HoldPrevious drops kept
// frames not older than the new frame before last.
func TestFillerHoldOlder(t *testing.T) {
	c := uprightCam()
	f, err := NewFiller(FillerConfig{Camera: c, Policy: DefaultPolicy(), Motion: &fakeMotion{}})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img := texturedFrame(t, c.Width, c.Height, 3)
	defer img.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	if err := f.HoldOlder(img, 0); !errors.Is(err, ErrNoFrame) {
		t.Errorf("before any frame: %v, want ErrNoFrame", err)
	}
	for i := range 5 {
		if _, err := f.Live(img, int64(i)*10, &dst); err != nil {
			t.Fatal(err)
		}
	}
	// Held 40, before it 30; older 0, 10, 20.
	if err := f.HoldOlder(img, 30); !errors.Is(err, ErrTargetBeforeFrame) {
		t.Errorf("at the frame before last: %v, want ErrTargetBeforeFrame", err)
	}
	small := gocv.NewMatWithSize(10, 10, gocv.MatTypeCV8UC3)
	defer small.Close()
	if err := f.HoldOlder(small, 5); !errors.Is(err, ErrFrameFormat) {
		t.Errorf("wrong size: %v, want ErrFrameFormat", err)
	}
	if got := f.olderUs[:f.olderN]; !slices.Equal(got, []int64{0, 10, 20}) {
		t.Fatalf("older frames %v after refusals, want [0 10 20]", got)
	}
	if err := f.HoldOlder(img, 15); err != nil {
		t.Fatal(err)
	}
	if got := f.olderUs[:f.olderN]; !slices.Equal(got, []int64{15, 20}) {
		t.Errorf("older frames %v, want [15 20]", got)
	}
	// A frame before last older than some kept frames: they go.
	if err := f.HoldPrevious(img, 18); err != nil {
		t.Fatal(err)
	}
	if got := f.olderUs[:f.olderN]; !slices.Equal(got, []int64{15}) {
		t.Errorf("older frames %v after HoldPrevious at 18, want [15]", got)
	}
}

// Before any frame PlaceMarks has nothing to place against and HeldMovers
// holds nothing.
func TestPlaceMarksBeforeFrame(t *testing.T) {
	f, err := NewFiller(FillerConfig{Camera: uprightCam(), Policy: DefaultPolicy(), Motion: &fakeMotion{SigmaPerS: 0.01}})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	if got := f.HeldMovers(); got != nil {
		t.Errorf("HeldMovers before any frame: %v, want nil", got)
	}
	if _, err := f.PlaceMarks(nil, []Mover{{Box: image.Rect(10, 10, 20, 20)}}, filter.Motion{}); !errors.Is(err, ErrNoFrame) {
		t.Errorf("PlaceMarks before any frame: %v, want ErrNoFrame", err)
	}
}
