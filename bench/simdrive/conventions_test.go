package simdrive

import (
	"math"
	"testing"

	"stopgap/internal/cvref"
	"stopgap/stream/recording"
)

// axisAngle returns the rotation by angle rad about the unit axis k, by
// Rodrigues' formula R = cos a I + (1 - cos a) k kᵀ + sin a [k]×, written
// out here so that the test does not lean on the rotations under test.
func axisAngle(k vec3, a float64) mat3 {
	c, s := math.Cos(a), math.Sin(a)
	var r mat3
	cross := mat3{{0, -k[2], k[1]}, {k[2], 0, -k[0]}, {-k[1], k[0], 0}}
	for i := 0; i < 3; i++ {
		for j := 0; j < 3; j++ {
			r[i][j] = (1-c)*k[i]*k[j] + s*cross[i][j]
			if i == j {
				r[i][j] += c
			}
		}
	}
	return r
}

// conventionRotation builds the vehicle-to-camera rotation from the words of
// the README's conventions only:
//
//   - vehicle axes ISO 8855 (x forward, y left, z up), camera axes as OpenCV
//     (x right, y down, z along the optical axis): with no pitch or roll,
//     camera x = -vehicle y, camera y = -vehicle z, camera z = vehicle x;
//   - pitch > 0 tilts the optical axis down toward the road: a right-hand
//     rotation by +pitch about the vehicle's y (left) axis, which turns
//     forward (1, 0, 0) into (cos, 0, -sin);
//   - roll > 0 turns the camera's right side down: a right-hand rotation by
//     +roll about the (pitched) optical axis, the sense of ISO 8855 roll.
//
// The camera's orientation in the vehicle frame is roll ∘ pitch applied to
// the unrotated camera axes; the vehicle-to-camera rotation is its transpose.
func conventionRotation(pitchDeg, rollDeg float64) mat3 {
	axes := mat3{{0, -1, 0}, {0, 0, -1}, {1, 0, 0}} // vehicle -> unrotated camera
	pitch := axisAngle(vec3{0, 1, 0}, pitchDeg*math.Pi/180)
	optical := pitch.mulVec(vec3{1, 0, 0})
	roll := axisAngle(optical, rollDeg*math.Pi/180)
	camToVehicle := roll.mul(pitch).mul(axes.transpose())
	return camToVehicle.transpose()
}

// TestCameraModelsAgreeWithConventions projects the same world points through
// the renderer's camera (simdrive), the predictor's camera
// (camera.Camera.ProjectVehiclePoint) and cv::projectPoints (OpenCV, the
// reference) with a rotation built independently from the README's stated
// conventions (conventionRotation); all three must agree to 1e-6 px, for
// large pitch and roll of both signs, offsets, distortion and vehicle poses
// with yaw. A hand-worked value pins roll's size as well as its sign.
func TestCameraModelsAgreeWithConventions(t *testing.T) {
	cams := map[string]recording.Camera{
		"level":           {Width: 640, Height: 480, Fx: 500, Fy: 500, Cx: 320, Cy: 240, HeightM: 1.4, XOffsetM: 1.5},
		"pitched down":    {Width: 640, Height: 480, Fx: 500, Fy: 520, Cx: 315, Cy: 250, HeightM: 1.6, PitchDeg: 25, XOffsetM: 1.2, YOffsetM: 0.4},
		"rolled right":    {Width: 640, Height: 480, Fx: 500, Fy: 500, Cx: 320, Cy: 240, HeightM: 1.4, PitchDeg: 6, RollDeg: 20, XOffsetM: 1.5},
		"rolled left":     {Width: 640, Height: 480, Fx: 480, Fy: 490, Cx: 330, Cy: 235, HeightM: 1.3, PitchDeg: -8, RollDeg: -15, XOffsetM: 2, YOffsetM: -0.5},
		"distorted, both": {Width: 1280, Height: 720, Fx: 700, Fy: 700, Cx: 650, Cy: 350, K1: -0.12, K2: 0.03, P1: 0.001, P2: -0.0015, K3: -0.002, HeightM: 1.5, PitchDeg: 12, RollDeg: 7, XOffsetM: 1, YOffsetM: 0.2},
	}
	poses := []pose{{0, 0, 0}, {12.5, -3.25, 0.7}, {-40, 80, -2.9}}
	// Vehicle-frame points ahead of the car: on the road, at camera height,
	// above it.
	var vehiclePts []vec3
	for _, x := range []float64{6, 15, 40} {
		for _, y := range []float64{-4, 0, 3} {
			for _, z := range []float64{0, 1.4, 4} {
				vehiclePts = append(vehiclePts, vec3{x, y, z})
			}
		}
	}
	for name, rc := range cams {
		t.Run(name, func(t *testing.T) {
			render := newPinhole(rc)
			rvc := conventionRotation(rc.PitchDeg, rc.RollDeg)
			k := [3][3]float64{{rc.Fx, 0, rc.Cx}, {0, rc.Fy, rc.Cy}, {0, 0, 1}}
			dist := [5]float64{rc.K1, rc.K2, rc.P1, rc.P2, rc.K3}
			for _, p := range poses {
				// World = vehicle origin + rotZ(yaw) vehicle; camera =
				// rvc (rotZ(yaw)ᵀ (W - origin) - C).
				rz := axisAngle(vec3{0, 0, 1}, p.YawRad)
				r := rvc.mul(rz.transpose())
				centreW := vec3{p.XM, p.YM, 0}.add(rz.mulVec(vec3{rc.XOffsetM, rc.YOffsetM, rc.HeightM}))
				tr := r.mulVec(centreW).scale(-1)
				rvec, err := cvref.Rodrigues(r)
				if err != nil {
					t.Fatal(err)
				}
				world := make([][3]float64, len(vehiclePts))
				for i, v := range vehiclePts {
					world[i] = vec3{p.XM, p.YM, 0}.add(rz.mulVec(v))
				}
				ref, err := cvref.ProjectPoints(world, rvec, tr, k, dist)
				if err != nil {
					t.Fatal(err)
				}
				for i, v := range vehiclePts {
					ur, vr, ok := render.project(p, world[i])
					if !ok {
						t.Fatalf("pose %v point %v: behind the renderer's camera", p, v)
					}
					up, vp, err := rc.ProjectVehiclePoint(v)
					if err != nil {
						t.Fatalf("pose %v point %v: %v", p, v, err)
					}
					for _, got := range []struct {
						who  string
						u, v float64
					}{{"simdrive", ur, vr}, {"predictor", up, vp}} {
						if d := math.Hypot(got.u-ref[i][0], got.v-ref[i][1]); !(d <= 1e-6) {
							t.Errorf("pose %v vehicle point %v: %s (%.6f, %.6f), OpenCV with the README's rotation (%.6f, %.6f), off by %.3g px",
								p, v, got.who, got.u, got.v, ref[i][0], ref[i][1], d)
						}
					}
				}
			}
		})
	}

	// Worked by hand from the conventions (no pitch, roll φ, no distortion):
	// a point at the camera's height, D ahead and a to the right of the
	// optical centre, has camera coordinates (a cos φ, -a sin φ, D), so
	// u = cx + f a cos φ / D and v = cy - f a sin φ / D: the right side of
	// the horizon rises by f a sin φ / D pixels.
	const f, cx, cy, dM, aM, rollDeg = 500.0, 320.0, 240.0, 20.0, 5.0, 10.0
	rc := recording.Camera{Width: 640, Height: 480, Fx: f, Fy: f, Cx: cx, Cy: cy, HeightM: 1.4, RollDeg: rollDeg, XOffsetM: 1.5}
	phi := rollDeg * math.Pi / 180
	wantU, wantV := cx+f*aM*math.Cos(phi)/dM, cy-f*aM*math.Sin(phi)/dM // 443.1, 218.3
	v := vec3{1.5 + dM, -aM, 1.4}
	up, vp, err := rc.ProjectVehiclePoint(v)
	if err != nil {
		t.Fatal(err)
	}
	ur, vr, _ := newPinhole(rc).project(pose{}, v)
	for _, got := range []struct {
		who  string
		u, v float64
	}{{"simdrive", ur, vr}, {"predictor", up, vp}} {
		if math.Abs(got.u-wantU) > 1e-9 || math.Abs(got.v-wantV) > 1e-9 {
			t.Errorf("roll %g deg, point %g m right at %g m: %s (%.6f, %.6f), worked value (%.6f, %.6f)", rollDeg, aM, dM, got.who, got.u, got.v, wantU, wantV)
		}
	}
}
