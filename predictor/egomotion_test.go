package predictor

import (
	"errors"
	"image"
	"math"
	"runtime"
	"testing"
	"time"

	"gocv.io/x/gocv"
)

// egoCam is a 640x360 forward camera of a car (1.4 m, 5 degrees down).
func egoCam() Camera {
	return Camera{Width: 640, Height: 360, Fx: 320, Fy: 320, Cx: 320, Cy: 180, HeightM: 1.4, PitchDeg: 5, XOffsetM: 1.5}
}

// groundPair returns a textured frame and the same frame after the planar
// motion (dx, dy, dyaw), the whole picture treated as road (warped by
// GroundHomographyPlanar, itself checked against cv::projectPoints in
// camera_test.go). The caller closes both.
func groundPair(t testing.TB, cam Camera, dx, dy, dyaw float64) (a, b gocv.Mat) {
	t.Helper()
	a = texturedFrame(t, cam.Width, cam.Height, 3)
	b = gocv.NewMat()
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	if err := setMat3(&hm, GroundHomographyPlanar(cam, dx, dy, dyaw)); err != nil {
		t.Fatal(err)
	}
	gocv.WarpPerspectiveWithParams(a, &b, hm, image.Pt(cam.Width, cam.Height), gocv.InterpolationLinear, gocv.BorderReflect101, neutralFill)
	return a, b
}

// TestEgoMotionRecoversGroundMotion: for a known planar motion between two
// frames of a textured road the estimate is within 2 cm and 2 mrad, and the
// speed and yaw rate follow over the 33.3 ms interval.
func TestEgoMotionRecoversGroundMotion(t *testing.T) {
	cam := egoCam()
	for _, tc := range []struct {
		name          string
		dx, dy, dyaw  float64
		speed, yawRps float64
	}{
		{"straight", 0.4, 0, 0, 12, 0},
		{"left turn", 0.33, 0.005, 0.03, 9.9, 0.9},
		{"right turn", 0.2, -0.002, -0.02, 6, -0.6},
		{"reverse", -0.1, 0, 0, -3, 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			a, b := groundPair(t, cam, tc.dx, tc.dy, tc.dyaw)
			defer a.Close()
			defer b.Close()
			e, err := NewEgoMotion(EgoMotionConfig{Camera: cam, Seed: 1})
			if err != nil {
				t.Fatal(err)
			}
			defer e.Close()
			if _, ok, err := e.Observe(a, 0); ok || err != nil {
				t.Fatalf("first frame: ok %v err %v, want no estimate and no error", ok, err)
			}
			est, ok, err := e.Observe(b, 33_333)
			if err != nil || !ok {
				t.Fatalf("second frame: ok %v err %v", ok, err)
			}
			if math.Abs(est.DxM-tc.dx) > 0.02 || math.Abs(est.DyM-tc.dy) > 0.02 || math.Abs(est.DyawRad-tc.dyaw) > 2e-3 {
				t.Errorf("motion (%.4f, %.4f, %.5f), want (%.4f, %.4f, %.5f); %d inliers of %d, rms %.2f px",
					est.DxM, est.DyM, est.DyawRad, tc.dx, tc.dy, tc.dyaw, est.Inliers, est.Tracked, est.RMSPx)
			}
			if math.Abs(est.SpeedMps-tc.speed) > 0.7 || math.Abs(est.YawRateRps-tc.yawRps) > 0.07 {
				t.Errorf("speed %.3f m/s yaw rate %.4f rad/s, want about %.1f and %.2f", est.SpeedMps, est.YawRateRps, tc.speed, tc.yawRps)
			}
			s := est.Sample()
			if s.TimeUs != 16_666 || s.SpeedStdMps <= 0 || s.YawRateStdRps <= 0 {
				t.Errorf("sample %+v: want the interval's middle and positive noise", s)
			}
		})
	}
}

// TestEgoMotionInput: bad configurations, frames of the wrong size and
// frames out of order are errors that change nothing; a pause longer than
// MaxIntervalUs yields no estimate; a featureless road yields none either.
func TestEgoMotionInput(t *testing.T) {
	cam := egoCam()
	for _, cfg := range []EgoMotionConfig{
		{},
		{Camera: cam, WorkWidth: -1},
		{Camera: cam, MaxRangeM: math.NaN()},
		{Camera: cam, WorkWidth: 16},
		{Camera: cam, MaxRangeM: 1},
		{Camera: cam, WindowPx: 12},
		{Camera: cam, WindowPx: 3},
		{Camera: cam, PyramidLevels: -1},
		{Camera: cam, SideslipRad: math.Inf(1)},
		{Camera: cam, SideslipFloorM: -0.1},
	} {
		if e, err := NewEgoMotion(cfg); err == nil {
			e.Close()
			t.Errorf("NewEgoMotion(%+v) accepted", cfg)
		}
	}
	e, err := NewEgoMotion(EgoMotionConfig{Camera: cam})
	if err != nil {
		t.Fatal(err)
	}
	defer e.Close()
	a, b := groundPair(t, cam, 0.3, 0, 0)
	defer a.Close()
	defer b.Close()
	small := gocv.NewMatWithSize(100, 100, gocv.MatTypeCV8UC3)
	defer small.Close()
	if _, _, err := e.Observe(small, 0); !errors.Is(err, ErrFrameFormat) {
		t.Errorf("wrong size: %v, want ErrFrameFormat", err)
	}
	if _, _, err := e.Observe(a, 100_000); err != nil {
		t.Fatal(err)
	}
	if _, _, err := e.Observe(b, 100_000); !errors.Is(err, ErrTimeOrder) {
		t.Errorf("same time: %v, want ErrTimeOrder", err)
	}
	// The refused frame changed nothing: b still pairs with a.
	if _, ok, err := e.Observe(b, 133_333); !ok || err != nil {
		t.Errorf("after a refused frame: ok %v err %v, want an estimate", ok, err)
	}
	if _, ok, err := e.Observe(a, 133_333+DefaultEgoMaxIntervalUs+1); ok || err != nil {
		t.Errorf("after a long pause: ok %v err %v, want no estimate", ok, err)
	}
	flat := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(90, 90, 90, 0), cam.Height, cam.Width, gocv.MatTypeCV8UC3)
	defer flat.Close()
	e.Reset()
	for i, m := range []gocv.Mat{flat, flat} {
		if _, ok, err := e.Observe(m, int64(i)*33_333); ok || err != nil {
			t.Errorf("featureless frame %d: ok %v err %v, want no estimate", i, ok, err)
		}
	}
}

// BenchmarkEgoMotionVsBare1280x720 is the per-frame cost of the video
// ego-motion on a 1280x720 frame (reduction to the work width, corners,
// pyramidal flow, RANSAC and refinement) against one bare WarpPerspective
// of the same frame in the same iteration, one OpenCV thread, thread CPU
// time ("ego/bare-cpu"; budget at most 1).
//
//	go test ./predictor -run '^$' -bench EgoMotionVsBare -benchtime 100x
func BenchmarkEgoMotionVsBare1280x720(b *testing.B) {
	pinOneThread(b)
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	c := benchCam()
	fa, fb := groundPair(b, c, 0.4, 0, 0.01)
	defer fa.Close()
	defer fb.Close()
	e, err := NewEgoMotion(EgoMotionConfig{Camera: c, Seed: 1})
	if err != nil {
		b.Fatal(err)
	}
	defer e.Close()
	bare := gocv.NewMatWithSize(c.Height, c.Width, gocv.MatTypeCV8UC3)
	defer bare.Close()
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	if err := setMat3(&hm, RotationHomographyPlanar(c, 1.2, 0.05, 0.02)); err != nil {
		b.Fatal(err)
	}
	if _, _, err := e.Observe(fa, 0); err != nil {
		b.Fatal(err)
	}
	var tw, te, cw, ce []time.Duration
	estimates := 0
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		frame := fb
		if i%2 == 1 {
			frame = fa
		}
		c0, t0 := threadCPU(), time.Now()
		gocv.WarpPerspectiveWithParams(fa, &bare, hm, image.Pt(c.Width, c.Height), gocv.InterpolationLinear, gocv.BorderConstant, neutralFill)
		c1, t1 := threadCPU(), time.Now()
		_, ok, err := e.Observe(frame, int64(i+1)*33_333)
		c2, t2 := threadCPU(), time.Now()
		if err != nil {
			b.Fatal(err)
		}
		if ok {
			estimates++
		}
		tw, te = append(tw, t1.Sub(t0)), append(te, t2.Sub(t1))
		cw, ce = append(cw, c1-c0), append(ce, c2-c1)
	}
	b.StopTimer()
	b.ReportMetric(float64(median(te))/float64(median(tw)), "ego/bare")
	b.ReportMetric(float64(median(ce))/float64(median(cw)), "ego/bare-cpu")
	b.ReportMetric(float64(estimates)/float64(b.N), "estimate-share")
}

// TestEgoMotionSideslipPrior: on a turning pair that follows its heading
// (dy = dx·tan(dyaw/2)), the non-holonomic prior keeps the estimate within
// the tolerances of TestEgoMotionRecoversGroundMotion and narrows the
// fit's lateral and yaw variances against the free three-parameter fit of
// the same points (NoSideslipPrior).
func TestEgoMotionSideslipPrior(t *testing.T) {
	cam := egoCam()
	const dx, dyaw = 0.33, 0.03
	dy := dx * math.Tan(dyaw/2)
	a, b := groundPair(t, cam, dx, dy, dyaw)
	defer a.Close()
	defer b.Close()
	fit := func(free bool) EgoEstimate {
		e, err := NewEgoMotion(EgoMotionConfig{Camera: cam, Seed: 1, NoSideslipPrior: free})
		if err != nil {
			t.Fatal(err)
		}
		defer e.Close()
		if _, _, err := e.Observe(a, 0); err != nil {
			t.Fatal(err)
		}
		est, ok, err := e.Observe(b, 33_333)
		if err != nil || !ok {
			t.Fatalf("free %v: ok %v err %v", free, ok, err)
		}
		return est
	}
	prior, free := fit(false), fit(true)
	if math.Abs(prior.DxM-dx) > 0.02 || math.Abs(prior.DyM-dy) > 0.02 || math.Abs(prior.DyawRad-dyaw) > 2e-3 {
		t.Errorf("with the prior: (%.4f, %.4f, %.5f), want (%.4f, %.4f, %.5f)", prior.DxM, prior.DyM, prior.DyawRad, dx, dy, dyaw)
	}
	if !(prior.Cov[1][1] < free.Cov[1][1]) || !(prior.Cov[2][2] < free.Cov[2][2]) {
		t.Errorf("variances with the prior dy %.3g, dyaw %.3g; free fit %.3g, %.3g: want both smaller",
			prior.Cov[1][1], prior.Cov[2][2], free.Cov[1][1], free.Cov[2][2])
	}
}
