package camera_test

import (
	"errors"
	"math"
	"stopgap/internal/camera"
	"stopgap/internal/camera/cameratest"
	"testing"
)

// The geometry against closed forms. The comparison with OpenCV's
// cv::projectPoints needs cgo and lives beside the predictor
// (predictor/camera_test.go, TestProjectMatchesOpenCV), with the
// homographies built on this geometry.

// testCameras are the shared test mounts (cameratest.Mounts).
func testCameras() map[string]camera.Camera { return cameratest.Mounts() }

// TestRotationIsOrthonormal: R_cv must be a proper rotation (det +1, RᵀR = I).
func TestRotationIsOrthonormal(t *testing.T) {
	for name, c := range testCameras() {
		r := c.RotationVehicleToCamera()
		p := mul33(r, transpose3(r))
		for i := 0; i < 3; i++ {
			for j := 0; j < 3; j++ {
				want := 0.0
				if i == j {
					want = 1
				}
				if math.Abs(p[i][j]-want) > 1e-12 {
					t.Fatalf("%s: R Rᵀ[%d][%d] = %g", name, i, j, p[i][j])
				}
			}
		}
		if d := det3(r); math.Abs(d-1) > 1e-12 {
			t.Fatalf("%s: det = %g", name, d)
		}
	}
}

// TestProjectClosedForm checks the extrinsic sign conventions with worked
// values from elementary trigonometry (no roll): a road point straight ahead of
// the camera at horizontal distance L is seen at depression angle
// α = atan(h/L) below the horizontal; a camera pitched down by θ sees it
// α - θ below its optical axis, so v = Cy + Fy·tan(α - θ) and u = Cx.
func TestProjectClosedForm(t *testing.T) {
	c := camera.Camera{Width: 640, Height: 480, Fx: 500, Fy: 510, Cx: 320, Cy: 240,
		HeightM: 1.5, PitchDeg: 8, XOffsetM: 2, YOffsetM: -0.7}
	for _, l := range []float64{4, 10, 35} {
		u, v, err := c.ProjectVehiclePoint([3]float64{c.XOffsetM + l, c.YOffsetM, 0})
		if err != nil {
			t.Fatal(err)
		}
		alpha := math.Atan(c.HeightM / l)
		wantV := c.Cy + c.Fy*math.Tan(alpha-c.PitchDeg*math.Pi/180)
		if math.Abs(u-c.Cx) > 1e-9 || math.Abs(v-wantV) > 1e-9 {
			t.Errorf("L=%g: got (%g,%g) want (%g,%g)", l, u, v, c.Cx, wantV)
		}
	}
	// A point to the left (vehicle +y) appears left of centre (u < Cx).
	u, _, err := c.ProjectVehiclePoint([3]float64{c.XOffsetM + 10, c.YOffsetM + 1, 0})
	if err != nil || !(u < c.Cx) {
		t.Errorf("left point at u=%g (err %v), want u < Cx", u, err)
	}
	// Points behind the camera have no pixel.
	if _, _, err := c.ProjectVehiclePoint([3]float64{c.XOffsetM - 1, 0, 0}); !errors.Is(err, camera.ErrBehindCamera) {
		t.Errorf("behind camera: got %v", err)
	}
}

// TestHorizon: far road points (10 km) lie on the horizon line; near road
// points are on its positive side and points well above the road on the
// negative side. With RollDeg > 0 the horizon rises to the right.
func TestHorizon(t *testing.T) {
	for name, c := range testCameras() {
		h := c.Horizon()
		if math.Abs(math.Hypot(h.A, h.B)-1) > 1e-12 {
			t.Fatalf("%s: not normalised", name)
		}
		for _, y := range []float64{-3000, 0, 2500} {
			u, v, err := c.ProjectVehiclePointPinhole([3]float64{1e4, y, 0})
			if err != nil {
				t.Fatal(err)
			}
			// The far point is 1.4-2.1 m below the camera at 10 km: about
			// Fy*h/1e4 ≈ 0.1 px below the true horizon.
			if d := h.SignedDistance(u, v); d < 0 || d > 0.2 {
				t.Errorf("%s: far point %v at distance %g px from horizon", name, y, d)
			}
		}
		u, v, _ := c.ProjectVehiclePointPinhole([3]float64{c.XOffsetM + 6, 0, 0})
		if h.SignedDistance(u, v) <= 0 {
			t.Errorf("%s: near road point not below horizon", name)
		}
		u, v, _ = c.ProjectVehiclePointPinhole([3]float64{c.XOffsetM + 30, 0, c.HeightM + 5})
		if h.SignedDistance(u, v) >= 0 {
			t.Errorf("%s: elevated point not above horizon", name)
		}
	}
	c := testCameras()["hd-pitch-roll"]
	left, _ := c.Horizon().RowAt(0)
	right, _ := c.Horizon().RowAt(float64(c.Width))
	if !(right < left) {
		t.Errorf("RollDeg > 0: horizon row left %g right %g, want rising to the right", left, right)
	}
	// Level camera: horizon is the row through the principal point.
	lv := testCameras()["level"]
	if v, _ := lv.Horizon().RowAt(17); math.Abs(v-lv.Cy) > 1e-12 {
		t.Errorf("level camera horizon at %g want %g", v, lv.Cy)
	}
}

func mul33(a, b [3][3]float64) [3][3]float64 {
	var c [3][3]float64
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			c[i][j] = a[i][0]*b[0][j] + a[i][1]*b[1][j] + a[i][2]*b[2][j]
		}
	}
	return c
}

func transpose3(a [3][3]float64) [3][3]float64 {
	return [3][3]float64{{a[0][0], a[1][0], a[2][0]}, {a[0][1], a[1][1], a[2][1]}, {a[0][2], a[1][2], a[2][2]}}
}

func det3(a [3][3]float64) float64 {
	return a[0][0]*(a[1][1]*a[2][2]-a[1][2]*a[2][1]) -
		a[0][1]*(a[1][0]*a[2][2]-a[1][2]*a[2][0]) +
		a[0][2]*(a[1][0]*a[2][1]-a[1][1]*a[2][0])
}
