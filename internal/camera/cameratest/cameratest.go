// Package cameratest holds camera mounts for tests of the packages that use
// stopgap/internal/camera, so their geometry tests run on the same cameras.
package cameratest

import "stopgap/internal/camera"

// Mounts returns made-up but plausible mounts, by name, with non-zero
// pitch, roll and offsets so that every term of the geometry is exercised.
// Each call returns a new map.
func Mounts() map[string]camera.Camera {
	return map[string]camera.Camera{
		"hd-pitch-roll": {Width: 1280, Height: 720, Fx: 1000, Fy: 1010, Cx: 640.5, Cy: 360.2,
			HeightM: 1.4, PitchDeg: 6, RollDeg: 2.5, XOffsetM: 1.8, YOffsetM: 0.3},
		"vga-up-negroll": {Width: 640, Height: 480, Fx: 520, Fy: 530, Cx: 318, Cy: 245,
			HeightM: 2.1, PitchDeg: -3, RollDeg: -4, XOffsetM: -0.5, YOffsetM: -0.4},
		"level": {Width: 320, Height: 240, Fx: 300, Fy: 300, Cx: 160, Cy: 120,
			HeightM: 1.2, XOffsetM: 1.0},
	}
}
