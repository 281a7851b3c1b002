package simdrive

import (
	"math"
	"math/rand/v2"
	"testing"

	"stopgap/internal/cvref"
	"stopgap/stream/recording"
)

// TestProjectionMatchesOpenCV checks our projection (extrinsics from pose and
// mounting, pinhole, distortion) against cv::projectPoints, the OpenCV
// reference, with the rotation converted by cv::Rodrigues. Differences must
// stay below 1e-6 px.
func TestProjectionMatchesOpenCV(t *testing.T) {
	cams := []struct {
		name string
		cam  recording.Camera
	}{
		{"default", recording.Camera{Width: 1280, Height: 720, Fx: 640, Fy: 640, Cx: 640, Cy: 360, HeightM: 1.4, PitchDeg: 5, XOffsetM: 1.5}},
		{"rolled offset", recording.Camera{Width: 640, Height: 480, Fx: 500, Fy: 510, Cx: 318.5, Cy: 242, HeightM: 1.2, PitchDeg: -3, RollDeg: 4, XOffsetM: 2, YOffsetM: -0.3}},
		{"distorted", recording.Camera{Width: 1280, Height: 720, Fx: 700, Fy: 700, Cx: 650, Cy: 350, K1: -0.12, K2: 0.03, P1: 0.001, P2: -0.0015, K3: -0.002, HeightM: 1.5, PitchDeg: 8, RollDeg: -2, XOffsetM: 1}},
	}
	poses := []pose{{0, 0, 0}, {12.5, -3.25, 0.7}, {-40, 80, -2.9}}
	rng := rand.New(rand.NewPCG(1, 2))
	for _, c := range cams {
		t.Run(c.name, func(t *testing.T) {
			cam := newPinhole(c.cam)
			for _, p := range poses {
				r, tr := cam.extrinsics(p)
				var pts [][3]float64
				var want [][2]float64
				for len(pts) < 50 {
					// Points 2..60 m ahead, ±10 m lateral, -1..5 m height in the vehicle frame.
					v := vec3{2 + 58*rng.Float64(), -10 + 20*rng.Float64(), -1 + 6*rng.Float64()}
					w := vec3{p.XM, p.YM, 0}.add(rotZ(p.YawRad).mulVec(v))
					u, vv, ok := cam.project(p, w)
					if !ok {
						continue
					}
					// Keep points inside a generous image region so that
					// the distortion polynomial stays in its valid range.
					if u < -200 || u > float64(c.cam.Width)+200 || vv < -200 || vv > float64(c.cam.Height)+200 {
						continue
					}
					pts = append(pts, w)
					want = append(want, [2]float64{u, vv})
				}
				rvec, err := cvref.Rodrigues(r)
				if err != nil {
					t.Fatal(err)
				}
				k := [3][3]float64{{c.cam.Fx, 0, c.cam.Cx}, {0, c.cam.Fy, c.cam.Cy}, {0, 0, 1}}
				got, err := cvref.ProjectPoints(pts, rvec, tr, k, [5]float64{c.cam.K1, c.cam.K2, c.cam.P1, c.cam.P2, c.cam.K3})
				if err != nil {
					t.Fatal(err)
				}
				worst := 0.0
				for i := range got {
					worst = math.Max(worst, math.Hypot(got[i][0]-want[i][0], got[i][1]-want[i][1]))
				}
				if worst > 1e-6 {
					t.Errorf("pose %+v: max |ours - cv::projectPoints| = %.3g px", p, worst)
				}
			}
		})
	}
}

// TestCameraConventions checks the documented conventions with worked
// values (hand computed): a point straight ahead at camera height lies on
// the optical axis row shifted up by fy*tan(pitch); a point to the left
// appears left of centre; the ground horizon row matches horizonY.
func TestCameraConventions(t *testing.T) {
	c := recording.Camera{Width: 1280, Height: 720, Fx: 640, Fy: 640, Cx: 640, Cy: 360, HeightM: 1.4, PitchDeg: 5, XOffsetM: 1.5}
	cam := newPinhole(c)
	p := pose{}
	// 1000 m ahead at camera height: direction horizontal, so v = cy - fy tan(5°) = 360 - 55.993 = 304.007.
	u, v, ok := cam.project(p, vec3{1001.5, 0, 1.4})
	wantV := 360 - 640*math.Tan(5*math.Pi/180)
	if !ok || math.Abs(u-640) > 1e-9 || math.Abs(v-wantV) > 1e-9 {
		t.Errorf("ahead at camera height -> (%v, %v), want (640, %v)", u, v, wantV)
	}
	if y, ok := cam.horizonY(100); !ok || math.Abs(y-wantV) > 1e-9 {
		t.Errorf("horizonY = %v, want %v", y, wantV)
	}
	// A point 10 m ahead and 2 m to the left (+y) is left of centre (u < cx).
	if u, _, _ := cam.project(p, vec3{11.5, 2, 0}); u >= 640 {
		t.Errorf("left point at u=%v, want < 640", u)
	}
	// Turning left (+yaw) moves a fixed world point to the right in the image.
	u0, _, _ := cam.project(pose{}, vec3{20, 0, 0})
	u1, _, _ := cam.project(pose{YawRad: 0.1}, vec3{20, 0, 0})
	if u1 <= u0 {
		t.Errorf("after a left turn the point moved from u=%v to %v, want right", u0, u1)
	}
	// Ground point below the camera 1.4 m high at distance d ahead of the camera: v = cy + fy tan(atan(1.4/d) - pitch).
	d := 7.0
	_, v, _ = cam.project(p, vec3{1.5 + d, 0, 0})
	want := 360 + 640*math.Tan(math.Atan(1.4/d)-5*math.Pi/180)
	if math.Abs(v-want) > 1e-9 {
		t.Errorf("ground point row %v, want %v", v, want)
	}
}
