package predictor

import (
	"bytes"
	"image"
	"math"
	"runtime"
	"testing"
	"time"

	"gocv.io/x/gocv"
)

// Frame timing and scene of the gap benchmark and its unit test: 30 fps
// frames, the vehicle at 12 m/s (fakeMotion: 0.4 m between two frames, above
// DefaultFarDepthMinBaselineM), and a far scene that is a plane facing the
// camera at gapSceneDepthM, one of DefaultFarDepthCandidatesM.
const (
	gapFramePeriodUs = 33_333
	gapSpeedMps      = 12
	gapSceneDepthM   = 25
)

// gapScene returns two consecutive real frames of cam: a textured frame and
// the same frame as seen after the fakeMotion of one frame period, with the
// whole picture on a plane facing the camera at depthM (warped by
// FarHomographyPlanar). The caller closes both.
func gapScene(t testing.TB, cam Camera, depthM float64) (prev, last gocv.Mat) {
	t.Helper()
	prev = texturedFrame(t, cam.Width, cam.Height, 5)
	last = gocv.NewMat()
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	dx := gapSpeedMps * float64(gapFramePeriodUs) / 1e6
	if err := setMat3(&hm, FarHomographyPlanar(cam, dx, 0, 0, depthM)); err != nil {
		t.Fatal(err)
	}
	gocv.WarpPerspectiveWithParams(prev, &last, hm, image.Pt(cam.Width, cam.Height), gocv.InterpolationLinear, gocv.BorderReflect101, neutralFill)
	return prev, last
}

// gapFiller returns a Filler on cam with the default policy and far-depth
// estimate, driven by fakeMotion at gapSpeedMps.
func gapFiller(t testing.TB, cam Camera) *Filler {
	t.Helper()
	f, err := NewFiller(FillerConfig{Camera: cam, Policy: DefaultPolicy(), Motion: &fakeMotion{SpeedMps: gapSpeedMps, SigmaPerS: 0.05}})
	if err != nil {
		t.Fatal(err)
	}
	return f
}

// TestFillerFarDepthSweepFindsScene: on the benchmark's camera, two real
// frames of a far scene at 25 m make the gap's first predicted frame use a
// finite far depth, the scene's (the sweep ran through the Filler, from the
// frame before the held one); the next tick of the same gap reuses it.
func TestFillerFarDepthSweepFindsScene(t *testing.T) {
	cam := benchCam()
	prev, last := gapScene(t, cam, gapSceneDepthM)
	defer prev.Close()
	defer last.Close()
	f := gapFiller(t, cam)
	defer f.Close()
	dst := gocv.NewMat()
	defer dst.Close()
	if _, err := f.Live(prev, 0, &dst); err != nil {
		t.Fatal(err)
	}
	if _, err := f.Live(last, gapFramePeriodUs, &dst); err != nil {
		t.Fatal(err)
	}
	for i, target := range []int64{2 * gapFramePeriodUs, 3 * gapFramePeriodUs} {
		tk, err := f.Missing(target, &dst)
		if err != nil || tk.State != StatePredicted {
			t.Fatalf("gap tick %d: %+v %v", i, tk, err)
		}
		if tk.FarDepthM != gapSceneDepthM {
			t.Errorf("gap tick %d: far depth %v m, want the scene's %v m", i, tk.FarDepthM, float64(gapSceneDepthM))
		}
	}
}

// BenchmarkGapVsBare1280x720 times, in every iteration and on the same
// camera (benchCam, one OpenCV thread):
//
//   - bare: one bilinear cv::warpPerspective of the full frame (the map of
//     BenchmarkWarpPerspectiveBare1280x720);
//   - first: a gap's first PREDICTED tick through the Filler, which includes
//     the far-depth sweep over the held frame and the one before it;
//   - steady: the next tick of the same gap (the depth is reused).
//
// Two real frames are fed (untimed) before each gap, so every iteration
// starts a new gap, and the far scene is at a finite depth (25 m), so the
// sweep and the translating far warp run as they do on a real drive. It
// reports the medians and the ratios "first/bare" and "steady/bare".
// Every other iteration calls Filler.Prepare when the held frame has
// arrived (as a caller does once the frame is on its way to the display):
// "prepare/bare" is its cost and "prepared-first/bare" the first tick
// after it, which then makes no estimate.
func BenchmarkGapVsBare1280x720(b *testing.B) {
	pinOneThread(b)
	c := benchCam()
	prev, last := gapScene(b, c, gapSceneDepthM)
	defer prev.Close()
	defer last.Close()
	f := gapFiller(b, c)
	defer f.Close()
	dst := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer dst.Close()
	bare := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer bare.Close()
	m := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer m.Close()
	if err := setMat3(&m, RotationHomographyPlanar(c, 1.2, 0.05, 0.02)); err != nil {
		b.Fatal(err)
	}
	tb := make([]time.Duration, 0, b.N)
	tf := make([]time.Duration, 0, b.N)
	ts := make([]time.Duration, 0, b.N)
	var tp, tfp []time.Duration // Prepare, and the first tick after it
	// One gap untimed first, so the scratch slices have grown and
	// allocs/op is the steady state.
	// Each gap's held frame has a real frame 200 ms before it (the movers'
	// baseline, DefaultMoverBaselineMs), as on a live stream.
	for k, tUs := range []int64{-2_000_000 - 5*gapFramePeriodUs, -2_000_000, -2_000_000 + gapFramePeriodUs} {
		if _, err := f.Live([]gocv.Mat{prev, prev, last}[k], tUs, &dst); err != nil {
			b.Fatal(err)
		}
	}
	if _, err := f.Missing(-2_000_000+2*gapFramePeriodUs, &dst); err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		t0 := int64(i) * 1_000_000
		if _, err := f.Live(prev, t0-5*gapFramePeriodUs, &dst); err != nil {
			b.Fatal(err)
		}
		if _, err := f.Live(prev, t0, &dst); err != nil {
			b.Fatal(err)
		}
		if _, err := f.Live(last, t0+gapFramePeriodUs, &dst); err != nil {
			b.Fatal(err)
		}
		prepared := i%2 == 1
		if prepared { // the estimates made when the held frame arrived
			p0 := time.Now()
			f.Prepare()
			tp = append(tp, time.Since(p0))
		}
		s0 := time.Now()
		gocv.WarpPerspectiveWithParams(prev, &bare, m, image.Pt(c.Width, c.Height), gocv.InterpolationLinear, gocv.BorderConstant, neutralFill)
		s1 := time.Now()
		first, err := f.Missing(t0+2*gapFramePeriodUs, &dst)
		s2 := time.Now()
		if err != nil || first.State != StatePredicted || math.IsInf(first.FarDepthM, 0) {
			b.Fatalf("first gap tick %+v %v (want PREDICTED with a finite far depth)", first, err)
		}
		steady, err := f.Missing(t0+3*gapFramePeriodUs, &dst)
		s3 := time.Now()
		if err != nil || steady.State != StatePredicted {
			b.Fatalf("second gap tick %+v %v", steady, err)
		}
		tb = append(tb, s1.Sub(s0))
		if prepared {
			tfp = append(tfp, s2.Sub(s1))
		} else {
			tf = append(tf, s2.Sub(s1))
		}
		ts = append(ts, s3.Sub(s2))
	}
	b.StopTimer()
	mb, mf, ms := median(tb), median(tf), median(ts)
	b.ReportMetric(float64(mb.Nanoseconds()), "bare-ns")
	b.ReportMetric(float64(mf.Nanoseconds()), "first-ns")
	b.ReportMetric(float64(ms.Nanoseconds()), "steady-ns")
	b.ReportMetric(float64(mf)/float64(mb), "first/bare")
	b.ReportMetric(float64(ms)/float64(mb), "steady/bare")
	if len(tp) > 0 {
		b.ReportMetric(float64(median(tfp))/float64(mb), "prepared-first/bare")
		b.ReportMetric(float64(median(tp))/float64(mb), "prepare/bare")
	}
}

// TestFillerWarmChangesNothing: a Filler warmed before its first frame
// shows, tick for tick and pixel for pixel, what a cold one shows over two
// gaps (first and steady ticks, far depth, upright segments, marks), and
// Warm after a real frame is a no-op. It logs the thread CPU time of each
// Filler's first gap tick (the cost Warm moves to the Filler's creation).
func TestFillerWarmChangesNothing(t *testing.T) {
	cam := benchCam()
	prev, last := gapScene(t, cam, gapSceneDepthM)
	defer prev.Close()
	defer last.Close()
	warm, cold := gapFiller(t, cam), gapFiller(t, cam)
	defer warm.Close()
	defer cold.Close()
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	c0 := threadCPU()
	if err := warm.Warm(); err != nil {
		t.Fatal(err)
	}
	warmCPU := threadCPU() - c0
	var firstCPU [2]time.Duration
	dsts := [2]gocv.Mat{gocv.NewMat(), gocv.NewMat()}
	defer dsts[0].Close()
	defer dsts[1].Close()
	for gap := range 2 {
		t0 := int64(gap) * 1_000_000
		for i, f := range []*Filler{warm, cold} {
			for k, tUs := range []int64{t0 - 6*gapFramePeriodUs, t0, t0 + gapFramePeriodUs} {
				if _, err := f.Live([]gocv.Mat{prev, prev, last}[k], tUs, nil); err != nil {
					t.Fatal(err)
				}
			}
			if gap == 0 && i == 0 {
				if err := f.Warm(); err != nil { // holds a frame now: nothing to do
					t.Fatal(err)
				}
			}
		}
		for tick := int64(2); tick <= 3; tick++ {
			var got [2]Tick
			for i, f := range []*Filler{warm, cold} {
				c := threadCPU()
				tk, err := f.Missing(t0+tick*gapFramePeriodUs, &dsts[i])
				if gap == 0 && tick == 2 {
					firstCPU[i] = threadCPU() - c
				}
				if err != nil {
					t.Fatal(err)
				}
				tk.SynthDuration = 0
				got[i] = tk
			}
			if got[0] != got[1] {
				t.Errorf("gap %d tick %d: warmed %+v, cold %+v", gap, tick, got[0], got[1])
			}
			if got[0].State != StatePredicted || math.IsInf(got[0].FarDepthM, 0) {
				t.Errorf("gap %d tick %d: %+v, want PREDICTED with a finite far depth (the case tests little otherwise)", gap, tick, got[0])
			}
			a, _ := dsts[0].DataPtrUint8()
			b, _ := dsts[1].DataPtrUint8()
			if !bytes.Equal(a, b) {
				t.Errorf("gap %d tick %d: the warmed Filler's picture differs from the cold one's", gap, tick)
			}
		}
	}
	t.Logf("thread CPU at %dx%d: Warm %v; first gap tick warmed %v, cold %v", cam.Width, cam.Height, warmCPU, firstCPU[0], firstCPU[1])
}
