package relay

import (
	"errors"
	"image"
	"image/color"
	"math"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"stopgap/filter"
	"stopgap/predictor"
	"stopgap/stream/whip"
)

// TestVideoMotionFeedsFilter: with Config.VideoMotion and no telemetry at
// all, the frames of a vehicle driving at 9 m/s over a textured road give
// the filter its speed; without it the filter has no data.
func TestVideoMotionFeedsFilter(t *testing.T) {
	cam := predictor.Camera{Width: 640, Height: 360, Fx: 320, Fy: 320, Cx: 320, Cy: 180, HeightM: 1.4, PitchDeg: 5, XOffsetM: 1.5}
	const periodUs, stepM = 33_333, 0.3 // 9 m/s
	tex := gocv.NewMatWithSize(cam.Height, cam.Width, gocv.MatTypeCV8UC3)
	defer tex.Close()
	gocv.RandU(&tex, gocv.NewScalar(0, 0, 0, 0), gocv.NewScalar(255, 255, 255, 0))
	gocv.GaussianBlur(tex, &tex, image.Pt(5, 5), 1.5, 1.5, gocv.BorderReflect101)
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	frame := func(i int, dst *gocv.Mat) {
		h := predictor.GroundHomographyPlanar(cam, stepM*float64(i), 0, 0)
		for r := range 3 {
			for c := range 3 {
				hm.SetDoubleAt(r, c, h[r][c])
			}
		}
		gocv.WarpPerspectiveWithParams(tex, dst, hm, image.Pt(cam.Width, cam.Height), gocv.InterpolationLinear, gocv.BorderReflect101, color.RGBA{})
	}
	for _, on := range []bool{true, false} {
		r, err := New(Config{Camera: cam, VideoMotion: on, LatencyMs: 50, IngestToken: testIngestToken, ConsoleToken: testConsoleToken, Logger: quietLogger(),
			Whip: whip.Config{Network: whip.Network{LoopbackOnly: true}}})
		if err != nil {
			t.Fatal(err)
		}
		p, err := newPipeline(r, newFakeVehicle(t, &fakeClock{}, 0, nil))
		if err != nil {
			r.shutdown()
			t.Fatal(err)
		}
		const t0 = 1_000_000_000
		for i := range 8 {
			m := <-p.free
			m.allocBGR(cam.Width, cam.Height)
			frame(i, &m.bgr)
			m.hasBGR = true
			c := t0 + int64(i)*periodUs
			p.onFrame(frameEvent{pic: m, captureUs: c, readyUs: c + 50_000, lastPktAt: time.Now(), vehicleClk: true})
		}
		st, err := p.flt.Predict(t0 + 7*periodUs)
		if on {
			if err != nil || math.Abs(st.Vec[filter.IdxSpeed]-stepM*1e6/periodUs) > 0.5 {
				t.Errorf("video motion on: speed %.2f m/s, %v; want about 9", st.Vec[filter.IdxSpeed], err)
			}
		} else if !errors.Is(err, filter.ErrNoData) {
			t.Errorf("video motion off: %+v, %v; want no data", st, err)
		}
		p.close()
		r.shutdown()
	}
}
