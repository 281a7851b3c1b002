package ros2

import (
	"errors"
	"math"
	"testing"
)

func TestVehicleFromROS(t *testing.T) {
	// REP 103: x forward, y left, z up; ISO 8855: the same. A twist with
	// linear.x = 10 and angular.z = +0.2 is 10 m/s forward turning left.
	x, y, z := VehicleFromROS(Vector3{10, 0.5, -0.1})
	if x != 10 || y != 0.5 || z != -0.1 {
		t.Fatalf("got (%v, %v, %v), want (10, 0.5, -0.1)", x, y, z)
	}
	_, _, yaw := VehicleFromROS(Vector3{0, 0, 0.2})
	if yaw != 0.2 {
		t.Fatalf("yaw rate %v, want +0.2 (left turn stays positive)", yaw)
	}
}

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

// TestTransformFromMountAxes checks the exported rotation against what
// the axis conventions say independently: the optical frame is x right,
// y down, z forward (REP 103 optical frames, OpenCV), the vehicle x
// forward, y left, z up; pitch > 0 looks down, roll > 0 turns the
// camera's right side down.
func TestTransformFromMountAxes(t *testing.T) {
	const tol = 1e-12
	deg := math.Pi / 180
	for _, tc := range []struct {
		name                string
		m                   Mount
		axisZ, axisX, axisY Vector3 // optical z, x, y axes in the base frame
	}{
		{"level", Mount{}, Vector3{1, 0, 0}, Vector3{0, -1, 0}, Vector3{0, 0, -1}},
		{"pitch 10 down", Mount{PitchDeg: 10},
			Vector3{math.Cos(10 * deg), 0, -math.Sin(10 * deg)}, Vector3{0, -1, 0}, Vector3{-math.Sin(10 * deg), 0, -math.Cos(10 * deg)}},
		{"roll 5 right side down", Mount{RollDeg: 5},
			Vector3{1, 0, 0}, Vector3{0, -math.Cos(5 * deg), -math.Sin(5 * deg)}, Vector3{0, math.Sin(5 * deg), -math.Cos(5 * deg)}},
	} {
		t.Run(tc.name, func(t *testing.T) {
			tr, q := TransformFromMount(tc.m)
			if tr != (Vector3{tc.m.XOffsetM, tc.m.YOffsetM, tc.m.HeightM}) {
				t.Fatalf("translation %v", tr)
			}
			r := matFromQuat(q)
			for _, c := range []struct {
				name string
				in   Vector3
				want Vector3
			}{{"z", Vector3{0, 0, 1}, tc.axisZ}, {"x", Vector3{1, 0, 0}, tc.axisX}, {"y", Vector3{0, 1, 0}, tc.axisY}} {
				got := r.mulVec(c.in)
				if !near(got.X, c.want.X, tol) || !near(got.Y, c.want.Y, tol) || !near(got.Z, c.want.Z, tol) {
					t.Errorf("optical %s axis in base = %v, want %v", c.name, got, c.want)
				}
			}
		})
	}
}

func TestMountRoundTrip(t *testing.T) {
	for _, m := range []Mount{
		{XOffsetM: 1.5, YOffsetM: -0.2, HeightM: 1.4, PitchDeg: 5, RollDeg: 0},
		{HeightM: 2, PitchDeg: -20, RollDeg: 10},
		{HeightM: 0.5, PitchDeg: 45, RollDeg: -30},
	} {
		tr, q := TransformFromMount(m)
		got, err := MountFromTransform(tr, q)
		if err != nil {
			t.Fatal(err)
		}
		if !near(got.PitchDeg, m.PitchDeg, 1e-9) || !near(got.RollDeg, m.RollDeg, 1e-9) || got.HeightM != m.HeightM || got.XOffsetM != m.XOffsetM || got.YOffsetM != m.YOffsetM {
			t.Errorf("round trip %+v -> %+v", m, got)
		}
	}
}

func TestMountFromTransformErrors(t *testing.T) {
	// A camera looking 30 degrees to the left: yaw about base z applied
	// after the level mount.
	_, q := TransformFromMount(Mount{})
	s, c := math.Sincos(15 * math.Pi / 180)
	yawed := quatMul(Quaternion{0, 0, s, c}, q)
	if _, err := MountFromTransform(Vector3{}, yawed); !errors.Is(err, ErrMount) {
		t.Fatalf("yawed camera: err = %v, want ErrMount", err)
	}
	if _, err := MountFromTransform(Vector3{}, Quaternion{1, 1, 0, 0}); !errors.Is(err, ErrMount) {
		t.Fatalf("non-unit quaternion: err = %v, want ErrMount", err)
	}
}

func TestMountFromTFChain(t *testing.T) {
	// base_link -> camera_link (camera body frame, x forward: REP 103)
	// -> camera_optical_frame, the usual two-step layout: the optical
	// frame's rotation from its body frame is the fixed (-90, 0, -90)
	// degree roll-pitch-yaw, quaternion (-0.5, 0.5, -0.5, 0.5).
	tfs := []TransformStamped{
		{Header: Header{FrameID: "base_link"}, ChildFrameID: "camera_link", Translation: Vector3{1.2, 0.1, 1.5}, Rotation: Quaternion{0, math.Sin(4 * math.Pi / 360), 0, math.Cos(4 * math.Pi / 360)}},
		{Header: Header{FrameID: "camera_link"}, ChildFrameID: "camera_optical_frame", Rotation: Quaternion{-0.5, 0.5, -0.5, 0.5}},
	}
	m, err := mountFromTF(tfs, "base_link", "camera_optical_frame")
	if err != nil {
		t.Fatal(err)
	}
	// A positive rotation about base y (pointing left) turns x toward -z:
	// the camera looks 4 degrees down.
	if !near(m.PitchDeg, 4, 1e-9) || !near(m.RollDeg, 0, 1e-9) || m.HeightM != 1.5 || m.XOffsetM != 1.2 || m.YOffsetM != 0.1 {
		t.Fatalf("got %+v, want pitch 4, roll 0 at (1.2, 0.1, 1.5)", m)
	}
	if _, err := mountFromTF(tfs, "base_footprint", "camera_optical_frame"); !errors.Is(err, ErrMount) {
		t.Fatalf("missing chain: err = %v", err)
	}
}
