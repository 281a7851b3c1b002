package predictor

import (
	"image"
	"image/color"
	"math"
	"math/rand/v2"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/filter"
	"stopgap/internal/cvref"
)

// TestFarHomographyMatchesOpenCV: points on a plane facing the T0 camera at
// depth D (camera coordinates (x, y, D)) are projected with cv::projectPoints
// from the T0 and the T1 camera poses, as in TestGroundHomographyMatchesOpenCV;
// FarHomographyPlanar(D) must map the first to the second to 1e-6 px.
func TestFarHomographyMatchesOpenCV(t *testing.T) {
	for cname, c := range testCameras() {
		rcv := c.RotationVehicleToCamera()
		cc := c.CentreVehicle()
		for _, depth := range []float64{9, 25, 80} {
			var pts [][3]float64
			for _, x := range []float64{-6, 0, 5} {
				for _, y := range []float64{-4, -1, 0.5} {
					// Camera -> vehicle frame: P = R_cvᵀ X + C.
					p := mul3v(transpose3(rcv), vec3{x, y, depth})
					pts = append(pts, [3]float64{p[0] + cc[0], p[1] + cc[1], p[2] + cc[2]})
				}
			}
			rv0, _ := cvref.Rodrigues(rcv)
			_, t0 := c.Extrinsics()
			p0, err := cvref.ProjectPoints(pts, rv0, t0, c.K(), [5]float64{})
			if err != nil {
				t.Fatal(err)
			}
			for mname, m := range testMotions() {
				r1 := mul33(rcv, transpose3(rotZ(m.yaw)))
				rd := mul3v(transpose3(rotZ(m.yaw)), vec3{m.dx, m.dy, 0})
				q := mul3v(rcv, vec3{rd[0] + c.XOffsetM, rd[1] + c.YOffsetM, rd[2] + c.HeightM})
				rv1, _ := cvref.Rodrigues(r1)
				p1, err := cvref.ProjectPoints(pts, rv1, vec3{-q[0], -q[1], -q[2]}, c.K(), [5]float64{})
				if err != nil {
					t.Fatal(err)
				}
				h := FarHomographyPlanar(c, m.dx, m.dy, m.yaw, depth)
				for i := range pts {
					u, v, ok := h.Apply(p0[i][0], p0[i][1])
					if !ok || math.Abs(u-p1[i][0]) > 1e-6 || math.Abs(v-p1[i][1]) > 1e-6 {
						t.Errorf("%s/%s depth %g point %v: H gives (%.9f,%.9f,%v), OpenCV (%.9f,%.9f)", cname, mname, depth, pts[i], u, v, ok, p1[i][0], p1[i][1])
					}
				}
			}
		}
		// Infinite depth is the rotation-only map.
		if a, b := FarHomographyPlanar(c, 2, 0.3, 0.1, math.Inf(1)), RotationHomographyPlanar(c, 2, 0.3, 0.1); a != b {
			t.Errorf("%s: infinite depth %v differs from rotation only %v", cname, a, b)
		}
	}
}

// texturedFrame returns a random blocky texture (seeded), blurred a little,
// so that a warp of a few pixels changes it measurably.
func texturedFrame(t testing.TB, w, h int, seed uint64) gocv.Mat {
	t.Helper()
	rng := rand.New(rand.NewPCG(seed, 1))
	m := gocv.NewMatWithSize(h, w, gocv.MatTypeCV8UC3)
	for y := 0; y < h; y += 6 {
		for x := 0; x < w; x += 6 {
			c := color.RGBA{uint8(rng.IntN(256)), uint8(rng.IntN(256)), uint8(rng.IntN(256)), 0}
			gocv.Rectangle(&m, image.Rect(x, y, x+6, y+6), c, -1)
		}
	}
	gocv.GaussianBlur(m, &m, image.Pt(5, 5), 1.2, 1.2, gocv.BorderReflect101)
	return m
}

// TestFarDepthEstimateRecoversPlane: a frame warped by the far-plane
// homography of a known depth is explained best by that depth; a pure
// rotation by infinity; a short baseline is not observable (infinity).
func TestFarDepthEstimateRecoversPlane(t *testing.T) {
	cam := Camera{Width: 640, Height: 360, Fx: 320, Fy: 320, Cx: 320, Cy: 180, HeightM: 1.4, PitchDeg: 5, XOffsetM: 1.5}
	prev := texturedFrame(t, cam.Width, cam.Height, 7)
	defer prev.Close()
	est, err := NewFarDepthEstimator(FarDepthOptions{})
	if err != nil {
		t.Fatal(err)
	}
	defer est.Close()
	last := gocv.NewMat()
	defer last.Close()
	hm := gocv.NewMatWithSize(3, 3, gocv.MatTypeCV64F)
	defer hm.Close()
	m := filter.Motion{T0Us: 0, T1Us: 100000, DxM: 1.0, DyM: 0.02, DyawRad: 0.01}
	for _, tc := range []struct {
		name   string
		depth  float64
		motion filter.Motion
		want   float64
	}{
		{"plane at 25 m", 25, m, 25},
		{"plane at 12.5 m", 12.5, m, 12.5},
		{"far scene, rotation only", math.Inf(1), m, math.Inf(1)},
		{"baseline too short", 25, filter.Motion{T1Us: 10000, DxM: 0.1}, math.Inf(1)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			h := FarHomographyPlanar(cam, tc.motion.DxM, tc.motion.DyM, tc.motion.DyawRad, tc.depth)
			if err := setMat3(&hm, h); err != nil {
				t.Fatal(err)
			}
			gocv.WarpPerspectiveWithParams(prev, &last, hm, image.Pt(cam.Width, cam.Height), gocv.InterpolationLinear, gocv.BorderReflect101, color.RGBA{})
			got, err := est.Estimate(prev, last, cam, tc.motion)
			if err != nil {
				t.Fatal(err)
			}
			if got != tc.want {
				t.Errorf("depth %v, want %v", got, tc.want)
			}
		})
	}
}

// BenchmarkFarDepthEstimate1280x720 is the once-per-gap cost of the far-scene
// depth sweep (downscale both frames, 14 small warps), on the camera of the
// synthesis benchmarks (benchCam) so that the figures can be added; the
// whole first tick of a gap, sweep included, is BenchmarkGapVsBare1280x720.
func BenchmarkFarDepthEstimate1280x720(b *testing.B) {
	prevThreads := SetOpenCVThreads(1)
	defer SetOpenCVThreads(prevThreads)
	cam := benchCam()
	prev := texturedFrame(b, cam.Width, cam.Height, 3)
	defer prev.Close()
	last := texturedFrame(b, cam.Width, cam.Height, 4)
	defer last.Close()
	est, err := NewFarDepthEstimator(FarDepthOptions{})
	if err != nil {
		b.Fatal(err)
	}
	defer est.Close()
	m := filter.Motion{T1Us: 33333, DxM: 0.4, DyawRad: 0.005}
	b.ReportAllocs()
	b.ResetTimer()
	for i := 0; i < b.N; i++ {
		if _, err := est.Estimate(prev, last, cam, m); err != nil {
			b.Fatal(err)
		}
	}
}
