package relay

import (
	"math"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"stopgap/filter"
	"stopgap/internal/display"
	"stopgap/predictor"
	"stopgap/stream/cadence"
	"stopgap/stream/whip"
)

// BenchmarkTick720p measures the display loop's per-tick work at 1280x720:
// "live" is a real frame passed through (copy, VP8 encode, console write and
// meta), "predicted" a missing tick filled by warping the held frame
// (confidence check, synthesis, label, encode, console). The ratio between
// the two is the cost of prediction. Live ticks cycle through a moving
// sequence and predicted ticks through gap ages of 33 to 200 ms, so the
// encoder codes motion, not a still picture; "kB/frame" is the mean encoded
// size. Decoding is not included (see stream/vp8's benchmarks). OpenCV runs
// on one thread, as in the predictor's benchmarks.
func BenchmarkTick720p(b *testing.B) {
	prev := predictor.SetOpenCVThreads(1)
	defer predictor.SetOpenCVThreads(prev)
	cam := predictor.Camera{Width: 1280, Height: 720, Fx: 1000, Fy: 1000, Cx: 640, Cy: 360, HeightM: 1.4, PitchDeg: 5}
	// A fixed latency: every frame below is ready 1 ms after its tick's
	// nominal arrival, so it is LIVE.
	r, err := New(Config{Camera: cam, LatencyMs: 50, IngestToken: testIngestToken, ConsoleToken: testConsoleToken, Logger: quietLogger(),
		// The benchmark fills ticks with deadlines of its own, far behind the clock.
		DrawOverdue: true,
		Whip:        whip.Config{Network: whip.Network{LoopbackOnly: true}}})
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
	telUs := int64(t0) // telemetry at 100 Hz up to untilUs
	telemetryUntil := func(untilUs int64) {
		for ; telUs <= untilUs; telUs += 10_000 {
			if err := p.flt.Add(filter.Sample{TimeUs: telUs, SpeedMps: 10, YawRateRps: 0.05}); err != nil {
				b.Fatal(err)
			}
		}
	}
	telemetryUntil(t0 + 1_000_000)
	// A moving textured scene (gradients and a checkerboard panning 8 px
	// right and 2 px down per frame), not noise: noise is the worst case for
	// VP8 and not what a camera sees; and not one still picture, which VP8
	// encodes almost for free after the first frame. Live ticks cycle
	// through the sequence, as stream/vp8's encoder benchmark does.
	seq := movingSequence(b, 30, 1280, 720)
	defer func() {
		for _, m := range seq {
			m.Close()
		}
	}()
	var encBytes, encFrames int
	encoded := func() { encBytes += len(p.encBuf); encFrames++ }
	const periodUs = 1e6 / DefaultFPS
	captureOf := func(k int) int64 { return t0 + int64(math.Round(float64(k)*periodUs)) }
	live := func(k int, img gocv.Mat) {
		m := <-p.free
		m.allocBGR(img.Cols(), img.Rows())
		img.CopyTo(&m.bgr)
		m.hasBGR = true
		c := captureOf(k)
		p.onFrame(frameEvent{pic: m, captureUs: c, readyUs: c + 51_000, lastPktAt: time.Now(), vehicleClk: true})
	}
	report := func(b *testing.B) {
		b.ReportMetric(float64(encBytes)/float64(encFrames)/1000, "kB/frame")
	}
	live(0, seq[0]) // tick 0 at t0
	k := 0

	b.Run("live", func(b *testing.B) {
		encBytes, encFrames = 0, 0
		b.ReportAllocs()
		for i := 0; i < b.N; i++ {
			k++ // the next tick's frame, in time
			live(k, seq[i%len(seq)])
			encoded()
		}
		b.StopTimer()
		report(b)
	})
	b.Run("predicted", func(b *testing.B) {
		k++
		live(k, seq[0])
		held := k
		telemetryUntil(captureOf(held) + 10_000)
		encBytes, encFrames = 0, 0
		b.ReportAllocs()
		b.ResetTimer()
		before := r.met.ticks[display.StatePredicted].Load()
		for i := 0; i < b.N; i++ {
			// Ticks 1..6 after the held frame (33 to 200 ms), over and
			// over: each output is a different warp, as in a real gap.
			j := held + 1 + i%6
			c := captureOf(j)
			p.Missing(cadence.Tick{K: j, TargetUs: c, DeadlineUs: c + 70_000, Policy: predictor.DefaultPolicy()})
			encoded()
		}
		b.StopTimer()
		if r.met.ticks[display.StatePredicted].Load()-before != uint64(b.N) {
			b.Fatalf("%d of %d ticks PREDICTED", r.met.ticks[display.StatePredicted].Load()-before, b.N)
		}
		report(b)
	})
}

// movingSequence returns n BGR frames of a textured scene panning 8 px
// right and 2 px down per frame. It fails if two consecutive frames are
// nearly equal (mean absolute difference below 4 grey levels), so the
// benchmark cannot silently encode a still picture.
func movingSequence(b testing.TB, n, w, h int) []gocv.Mat {
	b.Helper()
	seq := make([]gocv.Mat, n)
	for i := range seq {
		seq[i] = gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC3)
		px, err := seq[i].DataPtrUint8()
		if err != nil {
			b.Fatal(err)
		}
		for y := 0; y < h; y++ {
			sy := y + 2*i
			for x := 0; x < w; x++ {
				sx := x + 8*i
				o := (y*w + x) * 3
				chk := byte(((sx/40 + sy/40) % 2) * 60)
				px[o], px[o+1], px[o+2] = byte(sx/5)+chk, byte(sy/3)+chk, byte((sx+sy)/8)
			}
		}
	}
	diff := gocv.NewMat()
	defer diff.Close()
	for i := 1; i < n; i++ {
		gocv.AbsDiff(seq[i-1], seq[i], &diff)
		if s := diff.Sum(); (s.Val1+s.Val2+s.Val3)/float64(3*w*h) < 4 {
			b.Fatalf("frames %d and %d of the benchmark sequence are nearly equal: the encoder would see a still picture", i-1, i)
		}
	}
	return seq
}
