package predictor

import (
	"image"
	"math"
	"runtime"
	"testing"
	"time"

	"gocv.io/x/gocv"

	"stopgap/filter"
)

// streetModel returns upright segments for a street lined with walls 4 m
// to each side, in every 32 px band where one stands, with their tops at a
// quarter of the image height.
func streetModel(c Camera) UprightModel {
	var m UprightModel
	hz, _ := c.Horizon().RowAt(float64(c.Width) / 2)
	for c0 := 0; c0 < c.Width; c0 += DefaultUprightBandPx {
		c1 := min(c0+DefaultUprightBandPx, c.Width)
		for _, side := range []float64{1, -1} {
			if seg, ok := segment(c, verticalPlane(c, [3]float64{0, side, 0}, 4), c0, c1, hz); ok {
				seg.TopRow = float64(c.Height) / 4
				m.Segments = append(m.Segments, seg)
				break
			}
		}
	}
	return m
}

// BenchmarkSceneVsBare1280x720 interleaves one bare cv::warpPerspective and
// one SynthesizeScene (road, far plane, upright segments of streetModel with
// disocclusion marks and the exact unfilled count) of the same 1280x720
// frame, one OpenCV thread, and reports the medians of wall and thread CPU
// time and their ratios ("scene/bare", "scene/bare-cpu"; target at most 1).
func BenchmarkSceneVsBare1280x720(b *testing.B) {
	pinOneThread(b)
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	c := benchCam()
	s, err := NewSynthesizer(c, SynthOptions{})
	if err != nil {
		b.Fatal(err)
	}
	defer s.Close()
	model := streetModel(c)
	src := noiseFrame(b, c.Width, c.Height, 1)
	defer src.Close()
	dst := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer dst.Close()
	bare := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer bare.Close()
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	if err := setMat3(&hm, RotationHomographyPlanar(c, 1.2, 0.05, 0.02)); err != nil {
		b.Fatal(err)
	}
	mo := filter.Motion{T0Us: 0, T1Us: 100_000, DxM: 1.2, DyM: 0.05, DyawRad: 0.02}
	var tw, ts, cw, cs []time.Duration
	var syn Synthesis
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		c0, t0 := threadCPU(), time.Now()
		gocv.WarpPerspectiveWithParams(src, &bare, hm, image.Pt(c.Width, c.Height), gocv.InterpolationLinear, gocv.BorderConstant, neutralFill)
		c1, t1 := threadCPU(), time.Now()
		if syn, err = s.SynthesizeScene(src, mo, 40, &model, &dst); err != nil {
			b.Fatal(err)
		}
		c2, t2 := threadCPU(), time.Now()
		tw, ts = append(tw, t1.Sub(t0)), append(ts, t2.Sub(t1))
		cw, cs = append(cw, c1-c0), append(cs, c2-c1)
	}
	b.StopTimer()
	b.ReportMetric(float64(median(ts))/float64(median(tw)), "scene/bare")
	b.ReportMetric(float64(median(cs))/float64(median(cw)), "scene/bare-cpu")
	b.ReportMetric(float64(syn.UprightSegments), "segments")
	b.ReportMetric(syn.UnfilledFraction, "unfilled-share")
}

// BenchmarkUprightEstimate1280x720 is the per-gap cost of the upright
// estimate (once per held frame), paired with a bare warp as above.
func BenchmarkUprightEstimate1280x720(b *testing.B) {
	pinOneThread(b)
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	c := benchCam()
	e, err := NewUprightEstimator(UprightOptions{})
	if err != nil {
		b.Fatal(err)
	}
	defer e.Close()
	prev := texturedFrame(b, c.Width, c.Height, 1)
	defer prev.Close()
	last := texturedFrame(b, c.Width, c.Height, 2)
	defer last.Close()
	bare := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer bare.Close()
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	if err := setMat3(&hm, RotationHomographyPlanar(c, 1.2, 0.05, 0.02)); err != nil {
		b.Fatal(err)
	}
	mo := filter.Motion{T0Us: 0, T1Us: 33_333, DxM: 0.4}
	var model UprightModel
	var cw, ce []time.Duration
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		c0 := threadCPU()
		gocv.WarpPerspectiveWithParams(last, &bare, hm, image.Pt(c.Width, c.Height), gocv.InterpolationLinear, gocv.BorderConstant, neutralFill)
		c1 := threadCPU()
		if err := e.Estimate(prev, last, c, mo, math.Inf(1), &model); err != nil {
			b.Fatal(err)
		}
		c2 := threadCPU()
		cw, ce = append(cw, c1-c0), append(ce, c2-c1)
	}
	b.StopTimer()
	b.ReportMetric(float64(median(ce))/float64(median(cw)), "estimate/bare-cpu")
}

// BenchmarkFillerTickVsBare1280x720 is a whole PREDICTED tick through the
// Filler on a street with upright structure and a mover: SynthesizeScene,
// label and marks, the per-gap estimates (far depth, upright structure,
// movers) already made for the held frame, paired with one bare
// cv::warpPerspective as above ("tick/bare-cpu"; target at most 1). The
// per-gap estimates, paid once by a gap's first predicted frame, are
// reported as "gap-estimates/bare-cpu".
func BenchmarkFillerTickVsBare1280x720(b *testing.B) {
	pinOneThread(b)
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	c := benchCam()
	f, err := NewFiller(FillerConfig{Camera: c, Policy: DefaultPolicy(), Motion: &fakeMotion{SpeedMps: 12, SigmaPerS: 0.05}})
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	prev, last := streetPair(b, c)
	defer prev.Close()
	defer last.Close()
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	bare := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer bare.Close()
	dst := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer dst.Close()
	if err := setMat3(&hm, RotationHomographyPlanar(c, 1.2, 0.05, 0.02)); err != nil {
		b.Fatal(err)
	}
	var cb, ct, ce []time.Duration
	var tk Tick
	// One gap untimed first, so the scratch slices have grown and
	// allocs/op is the steady state (TestFillerTicksDoNotAllocate: 0).
	// Each gap's held frame has a real frame 200 ms before it (the movers'
	// baseline, DefaultMoverBaselineMs), as on a live stream.
	f.Live(prev, -2_000_000-166_667, &dst)
	f.Live(prev, -2_000_000, &dst)
	f.Live(last, -2_000_000+33_333, &dst)
	if _, err := f.Missing(-2_000_000+133_333, &dst); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if i%10 == 0 { // a new gap: new held frames, estimates redone
			b.StopTimer()
			f.Live(prev, int64(i)*1_000_000-166_667, &dst)
			f.Live(prev, int64(i)*1_000_000, &dst)
			f.Live(last, int64(i)*1_000_000+33_333, &dst)
			b.StartTimer()
			c0 := threadCPU()
			if tk, err = f.Missing(int64(i)*1_000_000+133_333, &dst); err != nil {
				b.Fatal(err)
			}
			ce = append(ce, threadCPU()-c0)
		}
		c0 := threadCPU()
		gocv.WarpPerspectiveWithParams(prev, &bare, hm, image.Pt(c.Width, c.Height), gocv.InterpolationLinear, gocv.BorderConstant, neutralFill)
		c1 := threadCPU()
		if tk, err = f.Missing(int64(i/10*10)*1_000_000+133_333, &dst); err != nil || tk.State != StatePredicted {
			b.Fatalf("tick %+v %v", tk, err)
		}
		c2 := threadCPU()
		cb, ct = append(cb, c1-c0), append(ct, c2-c1)
	}
	b.StopTimer()
	mb := float64(median(cb))
	b.ReportMetric(float64(median(ct))/mb, "tick/bare-cpu")
	b.ReportMetric((float64(median(ce))-float64(median(ct)))/mb, "gap-estimates/bare-cpu")
	b.ReportMetric(float64(tk.UprightSegments), "segments")
	b.ReportMetric(float64(tk.Movers), "marks")
}

// streetPair returns two real frames of c one frame period apart at
// 12 m/s (fakeMotion): a textured frame, and the same as seen 0.4 m further
// on if all were a wall 4 m to the left, with a block that moved on its
// own. The caller closes both.
func streetPair(t testing.TB, c Camera) (prev, last gocv.Mat) {
	t.Helper()
	prev = texturedFrame(t, c.Width, c.Height, 1)
	wall := verticalPlane(c, [3]float64{0, 1, 0}, 4)
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	if err := setMat3(&hm, PlaneHomography(c, 0.4, 0, 0, wall)); err != nil {
		t.Fatal(err)
	}
	last = gocv.NewMat()
	gocv.WarpPerspectiveWithParams(prev, &last, hm, image.Pt(c.Width, c.Height), gocv.InterpolationLinear, gocv.BorderReflect101, neutralFill)
	roi := last.Region(image.Rect(c.Width*700/1280, c.Height*400/720, c.Width*800/1280, c.Height*560/720))
	roi.SetTo(gocv.NewScalar(30, 200, 60, 0))
	roi.Close()
	return prev, last
}
