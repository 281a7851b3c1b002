package predictor_test

import (
	"fmt"

	"gocv.io/x/gocv"

	"stopgap/filter"
	"stopgap/predictor"
)

// steady is a stand-in for *filter.Filter: the vehicle drives straight at
// 10 m/s and the position uncertainty grows by 0.05 m per second of gap.
type steady struct{}

func (steady) Relative(t0, t1 int64) (filter.Motion, error) {
	dt := float64(t1-t0) / 1e6
	v := (0.05 * dt) * (0.05 * dt)
	return filter.Motion{T0Us: t0, T1Us: t1, DxM: 10 * dt,
		Cov: [3][3]float64{{v, 0, 0}, {0, v, 0}, {0, 0, v / 100}}, SpeedMps: 10}, nil
}

// A display loop at 30 fps where the frames at 33 ms and 67 ms are lost and
// the link then stays down: the Filler shows the real frame, then labelled
// predictions, then an honest STALE picture once the frame is older than the
// age cap (here 100 ms, lowered from the default 800 ms for the example).
func ExampleFiller() {
	cam := predictor.Camera{Width: 320, Height: 180, Fx: 250, Fy: 250, Cx: 160, Cy: 90,
		HeightM: 1.4, PitchDeg: 5, XOffsetM: 1.5}
	f, err := predictor.NewFiller(predictor.FillerConfig{
		Camera: cam,
		Policy: predictor.Policy{CutoffConfidence: 0.5, MaxAgeMs: 100},
		Motion: steady{},
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	defer f.Close()

	frame := gocv.NewMatWithSize(cam.Height, cam.Width, gocv.MatTypeCV8UC3)
	defer frame.Close()
	frame.SetTo(gocv.NewScalar(40, 120, 200, 0))
	out := gocv.NewMat() // owned by us, reused every tick
	defer out.Close()

	tk, _ := f.Live(frame, 0, &out)
	fmt.Println(tk.State, tk.AgeMs)
	for _, t := range []int64{33_333, 66_667, 100_000, 133_333} {
		tk, err := f.Missing(t, &out)
		if err != nil {
			fmt.Println(err)
			return
		}
		fmt.Printf("%v %.0f ms conf %.2f labelled %v\n", tk.State, tk.AgeMs, tk.Confidence, tk.LabelFraction > 0)
	}
	// Output:
	// LIVE 0
	// PREDICTED 33 ms conf 1.00 labelled true
	// PREDICTED 67 ms conf 1.00 labelled true
	// PREDICTED 100 ms conf 1.00 labelled true
	// STALE 133 ms conf 1.00 labelled true
}
