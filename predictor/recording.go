package predictor

import "stopgap/stream/recording"

// CameraFromRecording converts the content of a recording's camera.json to
// the camera model. The two share their conventions (see Camera); the
// recording type is plain data so that the format package needs no OpenCV.
func CameraFromRecording(c recording.Camera) Camera {
	return Camera{
		Width: c.Width, Height: c.Height,
		Fx: c.Fx, Fy: c.Fy, Cx: c.Cx, Cy: c.Cy,
		K1: c.K1, K2: c.K2, P1: c.P1, P2: c.P2, K3: c.K3,
		HeightM: c.HeightM, PitchDeg: c.PitchDeg, RollDeg: c.RollDeg,
		XOffsetM: c.XOffsetM, YOffsetM: c.YOffsetM,
	}
}

// Recording returns c as the content of a recording's camera.json: the
// inverse of CameraFromRecording.
func (c Camera) Recording() recording.Camera {
	return recording.Camera{
		Width: c.Width, Height: c.Height,
		Fx: c.Fx, Fy: c.Fy, Cx: c.Cx, Cy: c.Cy,
		K1: c.K1, K2: c.K2, P1: c.P1, P2: c.P2, K3: c.K3,
		HeightM: c.HeightM, PitchDeg: c.PitchDeg, RollDeg: c.RollDeg,
		XOffsetM: c.XOffsetM, YOffsetM: c.YOffsetM,
	}
}
