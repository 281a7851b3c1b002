package predictor

import (
	"errors"
	"math"
	"stopgap/internal/camera/cameratest"
	"testing"

	"stopgap/internal/cvref"
)

// testCameras are the shared test mounts (cameratest.Mounts).
func testCameras() map[string]Camera { return cameratest.Mounts() }

// TestProjectMatchesOpenCV compares our projection (with distortion) with
// cv::projectPoints (OpenCV 4.6 calib3d, the reference implementation of the
// model we document), using our extrinsics as rvec/tvec. Tolerance 1e-6 px.
func TestProjectMatchesOpenCV(t *testing.T) {
	dists := [][5]float64{{}, {-0.28, 0.09, 0.0012, -0.0007, -0.012}, {0.1, -0.05, -0.002, 0.001, 0.01}}
	pts := [][3]float64{{5, 0, 0}, {12, 3, 0}, {25, -6, 0.5}, {8, 1.5, 2.5}, {40, -2, 4}, {6.5, -2.2, 0.3}}
	for name, c := range testCameras() {
		for di, d := range dists {
			c.K1, c.K2, c.P1, c.P2, c.K3 = d[0], d[1], d[2], d[3], d[4]
			r, tv := c.Extrinsics()
			rvec, err := cvref.Rodrigues(r)
			if err != nil {
				t.Fatal(err)
			}
			ref, err := cvref.ProjectPoints(pts, rvec, tv, c.K(), d)
			if err != nil {
				t.Fatal(err)
			}
			for i, p := range pts {
				u, v, err := c.ProjectVehiclePoint(p)
				if err != nil {
					t.Fatalf("%s dist %d point %v: %v", name, di, p, err)
				}
				if math.Abs(u-ref[i][0]) > 1e-6 || math.Abs(v-ref[i][1]) > 1e-6 {
					t.Errorf("%s dist %d point %v: ours (%.9f,%.9f) OpenCV (%.9f,%.9f)", name, di, p, u, v, ref[i][0], ref[i][1])
				}
			}
		}
	}
}

type planar struct{ dx, dy, yaw float64 }

func testMotions() map[string]planar {
	return map[string]planar{
		"still":      {0, 0, 0},
		"straight":   {2.5, 0, 0},
		"left-turn":  {3, 0.4, 0.15},
		"right-turn": {1.2, -0.2, -0.3},
		"reverse":    {-1.5, 0.1, 0.05},
		"sidestep":   {0.2, 0.8, -0.02},
	}
}

// TestGroundHomographyMatchesOpenCV: for road points P (vehicle frame at T0),
// cv::projectPoints with the T0 camera pose gives p0 and with the T1 camera
// pose gives p1 (both poses built from our R_cv via cv::Rodrigues, T1 pose
// composed directly as world->vehicle(T1)->camera). Our ground homography must
// map p0 to p1 to 1e-6 px.
func TestGroundHomographyMatchesOpenCV(t *testing.T) {
	var pts [][3]float64
	for _, x := range []float64{7, 11, 18, 30} {
		for _, y := range []float64{-4, -1, 0.5, 3} {
			pts = append(pts, [3]float64{x, y, 0})
		}
	}
	for cname, c := range testCameras() {
		rcv := c.RotationVehicleToCamera()
		rv0, _ := cvref.Rodrigues(rcv)
		_, t0 := c.Extrinsics()
		p0, err := cvref.ProjectPoints(pts, rv0, t0, c.K(), [5]float64{})
		if err != nil {
			t.Fatal(err)
		}
		for mname, m := range testMotions() {
			t.Run(cname+"/"+mname, func(t *testing.T) {
				// World (vehicle at T0) -> vehicle at T1: P1 = Rzᵀ (P - D).
				// -> camera: R_cv (P1 - C) = (R_cv Rzᵀ) P - R_cv (Rzᵀ D + C).
				r1 := mul33(rcv, transpose3(rotZ(m.yaw)))
				rd := mul3v(transpose3(rotZ(m.yaw)), vec3{m.dx, m.dy, 0})
				q := mul3v(rcv, vec3{rd[0] + c.XOffsetM, rd[1] + c.YOffsetM, rd[2] + c.HeightM})
				rv1, _ := cvref.Rodrigues(r1)
				p1, err := cvref.ProjectPoints(pts, rv1, vec3{-q[0], -q[1], -q[2]}, c.K(), [5]float64{})
				if err != nil {
					t.Fatal(err)
				}
				h := GroundHomographyPlanar(c, m.dx, m.dy, m.yaw)
				for i := range pts {
					u, v, ok := h.Apply(p0[i][0], p0[i][1])
					if !ok || math.Abs(u-p1[i][0]) > 1e-6 || math.Abs(v-p1[i][1]) > 1e-6 {
						t.Errorf("point %v: H gives (%.9f,%.9f,%v), OpenCV (%.9f,%.9f)", pts[i], u, v, ok, p1[i][0], p1[i][1])
					}
				}
			})
		}
	}
}

// TestRotationHomographyFarPoints: for points 100 km away the parallax of a
// few metres is below 0.1 px, so K R K^-1 must agree with cv::projectPoints at
// T1 there (and, by construction, for any point when the translation is zero).
func TestRotationHomographyFarPoints(t *testing.T) {
	pts := [][3]float64{{1e5, 0, 0}, {1e5, 2e4, 3e3}, {1e5, -3e4, 1e3}}
	for cname, c := range testCameras() {
		rcv := c.RotationVehicleToCamera()
		rv0, _ := cvref.Rodrigues(rcv)
		_, t0 := c.Extrinsics()
		p0, _ := cvref.ProjectPoints(pts, rv0, t0, c.K(), [5]float64{})
		for mname, m := range testMotions() {
			r1 := mul33(rcv, transpose3(rotZ(m.yaw)))
			rd := mul3v(transpose3(rotZ(m.yaw)), vec3{m.dx, m.dy, 0})
			q := mul3v(rcv, vec3{rd[0] + c.XOffsetM, rd[1] + c.YOffsetM, rd[2] + c.HeightM})
			rv1, _ := cvref.Rodrigues(r1)
			p1, _ := cvref.ProjectPoints(pts, rv1, vec3{-q[0], -q[1], -q[2]}, c.K(), [5]float64{})
			h := RotationHomographyPlanar(c, m.dx, m.dy, m.yaw)
			for i := range pts {
				u, v, ok := h.Apply(p0[i][0], p0[i][1])
				if !ok || math.Abs(u-p1[i][0]) > 0.1 || math.Abs(v-p1[i][1]) > 0.1 {
					t.Errorf("%s/%s point %v: H (%.4f,%.4f) OpenCV (%.4f,%.4f)", cname, mname, pts[i], u, v, p1[i][0], p1[i][1])
				}
			}
		}
	}
}

// TestZeroMotionIdentity: no motion gives identity homographies.
func TestZeroMotionIdentity(t *testing.T) {
	for name, c := range testCameras() {
		for _, h := range []Homography{GroundHomographyPlanar(c, 0, 0, 0), RotationHomographyPlanar(c, 0, 0, 0)} {
			for i := 0; i < 3; i++ {
				for j := 0; j < 3; j++ {
					if math.Abs(h[i][j]-IdentityHomography()[i][j]) > 1e-12 {
						t.Fatalf("%s: %v is not identity", name, h)
					}
				}
			}
		}
	}
}

// TestHorizonInvariant: the ground homography maps the horizon to itself
// (the camera keeps its height and attitude relative to the road).
func TestHorizonInvariant(t *testing.T) {
	c := testCameras()["hd-pitch-roll"]
	hz := c.Horizon()
	h := GroundHomographyPlanar(c, 3, 0.4, 0.15)
	for _, u := range []float64{100, 640, 1200} {
		v, _ := hz.RowAt(u)
		x, y, ok := h.Apply(u, v)
		if !ok || math.Abs(hz.SignedDistance(x, y)) > 1e-6 {
			t.Errorf("horizon point (%g,%g) -> (%g,%g) ok=%v, distance %g", u, v, x, y, ok, hz.SignedDistance(x, y))
		}
	}
}

func TestHomographyInverse(t *testing.T) {
	h := GroundHomographyPlanar(testCameras()["vga-up-negroll"], 1.2, -0.2, -0.3)
	hi, err := h.Inverse()
	if err != nil {
		t.Fatal(err)
	}
	x, y, _ := h.Apply(300, 400)
	u, v, ok := hi.Apply(x, y)
	if !ok || math.Abs(u-300) > 1e-9 || math.Abs(v-400) > 1e-9 {
		t.Fatalf("round trip gave (%g,%g,%v)", u, v, ok)
	}
	if _, err := (Homography{}).Inverse(); !errors.Is(err, ErrSingular) {
		t.Fatalf("zero matrix: got %v", err)
	}
	if _, err := (Homography{{math.NaN(), 0, 0}, {0, 1, 0}, {0, 0, 1}}).Inverse(); !errors.Is(err, ErrSingular) {
		t.Fatalf("NaN matrix: got %v", err)
	}
}
