package camera_test

import (
	"errors"
	"fmt"

	"stopgap/internal/camera"
)

// A calibration gives the intrinsics; the mount is measured on the vehicle.
// Only the complete camera is written and read as camera.json.
func Example() {
	cam := camera.Camera{Width: 1280, Height: 720, Fx: 1000, Fy: 1000, Cx: 640, Cy: 360}
	fmt.Println("intrinsics:", cam.ValidateIntrinsics())
	fmt.Println("complete:", cam.Validate())

	cam.HeightM, cam.PitchDeg, cam.XOffsetM = 1.4, 5, 1.5
	js, err := camera.Marshal(cam)
	if err != nil {
		fmt.Println(err)
		return
	}
	back, err := camera.Decode("camera.json", js)
	fmt.Println("round trip:", back == cam, err)
	// Closed form for zero roll: v = Cy - Fy tan(pitch) = 360 - 1000 tan 5°.
	row, _ := back.Horizon().RowAt(640)
	fmt.Printf("horizon at the centre column: row %.1f\n", row)
	// Output:
	// intrinsics: <nil>
	// complete: invalid camera: height_m = 0: the camera must be above the road (> 0 m); measure the lens centre's height above the ground
	// round trip: true <nil>
	// horizon at the centre column: row 272.5
}

// A misspelt key is refused with its position.
func ExampleDecode() {
	_, err := camera.Decode("camera.json", []byte("{\"width\": 640,\n \"Height\": 360}"))
	fmt.Println(err)
	fmt.Println(errors.Is(err, camera.ErrFile))
	// Output:
	// camera: camera.json line 2, column 2: malformed camera file: unknown key "Height"; the keys are width height fx fy cx cy k1 k2 p1 p2 k3 height_m pitch_deg roll_deg x_offset_m y_offset_m (spelt exactly so; the distortion ones optional)
	// true
}
