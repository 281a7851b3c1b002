package relay

import (
	"testing"
	"time"

	"gocv.io/x/gocv"

	"stopgap/filter"
	"stopgap/predictor"
	"stopgap/stream/whip"
)

// BenchmarkTick720p measures the display loop's per-tick work at 1280x720:
// "live" is a real frame passed through (copy, VP8 encode, console write and
// meta), "predicted" a missing tick filled by warping the held frame
// (confidence check, synthesis, label, encode, console). The ratio between
// the two is the cost of prediction. Decoding is not included (see
// stream/vp8's benchmarks). OpenCV runs on one thread, as in the predictor's
// benchmarks.
func BenchmarkTick720p(b *testing.B) {
	prev := predictor.SetOpenCVThreads(1)
	defer predictor.SetOpenCVThreads(prev)
	cam := predictor.Camera{Width: 1280, Height: 720, Fx: 1000, Fy: 1000, Cx: 640, Cy: 360, HeightM: 1.4, PitchDeg: 5}
	r, err := New(Config{Camera: cam, IngestToken: testIngestToken, ConsoleToken: testConsoleToken, Logger: quietLogger(),
		Whip: whip.Config{Network: whip.Network{LoopbackOnly: true}}})
	if err != nil {
		b.Fatal(err)
	}
	defer r.shutdown()
	v := newFakeVehicle(b, &fakeClock{}, 0, nil)
	p, err := newPipeline(r, v)
	if err != nil {
		b.Fatal(err)
	}
	defer p.close()
	const t0 = 1_000_000_000
	for i := 0; i <= 100; i++ {
		if err := p.flt.Add(filter.Sample{TimeUs: t0 + int64(i)*10_000, SpeedMps: 10, YawRateRps: 0.05}); err != nil {
			b.Fatal(err)
		}
	}
	img := gocv.NewMatWithSize(720, 1280, gocv.MatTypeCV8UC3)
	defer img.Close()
	// A textured scene (gradients and a checkerboard), not noise: noise is
	// the worst case for VP8 and not what a camera sees.
	px, _ := img.DataPtrUint8()
	for y := 0; y < 720; y++ {
		for x := 0; x < 1280; x++ {
			o := (y*1280 + x) * 3
			chk := byte(((x/40 + y/40) % 2) * 60)
			px[o], px[o+1], px[o+2] = byte(x/5)+chk, byte(y/3)+chk, byte((x+y)/8)
		}
	}
	live := func(k int) {
		m := <-p.free
		img.CopyTo(m)
		c := p.nominalCaptureUs(k)
		p.onFrame(frameEvent{mat: m, captureUs: c, readyUs: c + 1000, lastPktAt: time.Now(), vehicleClk: true})
	}
	p.latUs, p.latKnown = 50_000, true
	p.haveC0 = true
	p.grid.Observe(t0) // tick 0 at t0
	live(0)

	b.Run("live", func(b *testing.B) {
		b.ReportAllocs()
		for i := 0; i < b.N; i++ {
			p.next = 0 // tick 0 is due again, so the frame is shown, not late
			live(0)
		}
	})
	b.Run("predicted", func(b *testing.B) {
		b.ReportAllocs()
		live(0)
		before := r.met.ticksPredicted.Load()
		for i := 0; i < b.N; i++ {
			p.missing(3) // 100 ms after the held frame
		}
		if r.met.ticksPredicted.Load()-before != uint64(b.N) {
			b.Fatalf("%d of %d ticks PREDICTED", r.met.ticksPredicted.Load()-before, b.N)
		}
	})
}
