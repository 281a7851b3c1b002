package predictor

import (
	"image"
	"slices"
	"testing"
	"time"

	"gocv.io/x/gocv"
)

// benchCam is a 1280x720 forward camera without roll (the horizon band is
// then exactly BandPx rows) and without distortion.
func benchCam() Camera {
	return Camera{Width: 1280, Height: 720, Fx: 1000, Fy: 1000, Cx: 640, Cy: 360,
		HeightM: 1.4, PitchDeg: 4, XOffsetM: 1.8}
}

// pinOneThread sets OpenCV to one thread for the benchmark and restores it.
func pinOneThread(b *testing.B) {
	prev := SetOpenCVThreads(1)
	b.Cleanup(func() { SetOpenCVThreads(prev) })
}

// BenchmarkWarpPerspectiveBare1280x720 is the reference cost: one bilinear
// cv::warpPerspective of a full 1280x720 BGR frame, one OpenCV thread. The
// map is the rotation homography of the same motion as the synthesis
// benchmark: nearly every output pixel has a source, which is OpenCV's fast
// path. (Warping the whole frame with the ground map instead is slower,
// because its sky rows map outside the source and take the per-pixel border
// path, so it would flatter the ratio.)
func BenchmarkWarpPerspectiveBare1280x720(b *testing.B) {
	pinOneThread(b)
	c := benchCam()
	src := noiseFrame(b, c.Width, c.Height, 1)
	defer src.Close()
	dst := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer dst.Close()
	h := RotationHomographyPlanar(c, 1.2, 0.05, 0.02)
	m := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer m.Close()
	if err := setMat3(&m, h); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		gocv.WarpPerspectiveWithParams(src, &dst, m, image.Pt(c.Width, c.Height), gocv.InterpolationLinear, gocv.BorderConstant, neutralFill)
	}
}

// BenchmarkSynthesize1280x720 is one full PREDICTED tick through the Filler:
// motion lookup, confidence, both homographies, split warp with the blended
// band, exact unfilled count, and the label. One OpenCV thread. Compare its
// ns/op with BenchmarkWarpPerspectiveBare1280x720 from the same run (target:
// at most 1.5x).
func BenchmarkSynthesize1280x720(b *testing.B) {
	pinOneThread(b)
	c := benchCam()
	f, err := NewFiller(FillerConfig{Camera: c, Policy: DefaultPolicy(), Motion: &fakeMotion{SpeedMps: 12, SigmaPerS: 0.05}})
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	src := noiseFrame(b, c.Width, c.Height, 1)
	defer src.Close()
	dst := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer dst.Close()
	if _, err := f.Live(src, 0, &dst); err != nil {
		b.Fatal(err)
	}
	tk, err := f.Missing(100_000, &dst)
	if err != nil || tk.State != StatePredicted {
		b.Fatalf("setup tick %+v %v", tk, err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if tk, err = f.Missing(100_000, &dst); err != nil {
			b.Fatal(err)
		}
	}
	b.StopTimer()
	// After the loop: ResetTimer discards metrics reported before it.
	b.ReportMetric(tk.LabelFraction, "label-share")
	b.ReportMetric(tk.UnfilledFraction, "unfilled-share")
}

// BenchmarkSynthesizeWarpOnly1280x720 is the split warp alone (no label,
// no motion or confidence), for the breakdown.
func BenchmarkSynthesizeWarpOnly1280x720(b *testing.B) {
	pinOneThread(b)
	c := benchCam()
	s, err := NewSynthesizer(c, SynthOptions{})
	if err != nil {
		b.Fatal(err)
	}
	defer s.Close()
	src := noiseFrame(b, c.Width, c.Height, 1)
	defer src.Close()
	dst := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer dst.Close()
	g, r := GroundHomographyPlanar(c, 1.2, 0.05, 0.02), RotationHomographyPlanar(c, 1.2, 0.05, 0.02)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := s.Warp(src, g, r, &dst); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkSynthVsBare1280x720 interleaves one bare warp and one full
// PREDICTED tick (as in the two benchmarks above) in every iteration, times
// each, and reports the medians and their ratio ("synth/bare"). On a shared
// machine the load changes between separate benchmarks; pairing them and
// taking medians keeps the ratio meaningful. One OpenCV thread.
func BenchmarkSynthVsBare1280x720(b *testing.B) {
	pinOneThread(b)
	c := benchCam()
	f, err := NewFiller(FillerConfig{Camera: c, Policy: DefaultPolicy(), Motion: &fakeMotion{SpeedMps: 12, SigmaPerS: 0.05}})
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	src := noiseFrame(b, c.Width, c.Height, 1)
	defer src.Close()
	dst := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer dst.Close()
	bare := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer bare.Close()
	m := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer m.Close()
	if err := setMat3(&m, RotationHomographyPlanar(c, 1.2, 0.05, 0.02)); err != nil {
		b.Fatal(err)
	}
	if _, err := f.Live(src, 0, &dst); err != nil {
		b.Fatal(err)
	}
	tb := make([]time.Duration, 0, b.N)
	ts := make([]time.Duration, 0, b.N)
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		t0 := time.Now()
		gocv.WarpPerspectiveWithParams(src, &bare, m, image.Pt(c.Width, c.Height), gocv.InterpolationLinear, gocv.BorderConstant, neutralFill)
		t1 := time.Now()
		tk, err := f.Missing(100_000, &dst)
		t2 := time.Now()
		if err != nil || tk.State != StatePredicted {
			b.Fatalf("tick %+v %v", tk, err)
		}
		tb = append(tb, t1.Sub(t0))
		ts = append(ts, t2.Sub(t1))
	}
	b.StopTimer()
	mb, ms := median(tb), median(ts)
	b.ReportMetric(float64(mb.Nanoseconds()), "bare-ns")
	b.ReportMetric(float64(ms.Nanoseconds()), "synth-ns")
	b.ReportMetric(float64(ms)/float64(mb), "synth/bare")
}

func median(d []time.Duration) time.Duration {
	s := slices.Clone(d)
	slices.Sort(s)
	return s[len(s)/2]
}
