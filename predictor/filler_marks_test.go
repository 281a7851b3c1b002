package predictor

import (
	"testing"

	"gocv.io/x/gocv"
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
