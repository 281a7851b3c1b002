package relay

import (
	"fmt"
	"os"

	"stopgap/predictor"
	"stopgap/stream/recording"
)

// maxCameraFileBytes bounds camera.json (real files are a few hundred bytes).
const maxCameraFileBytes = 64 << 10

// ReadCameraFile reads a camera.json (the recording format's camera file, see
// recording.Camera) with the recording's own strict reader
// (recording.ReadCameraFile: unknown keys, missing keys and extra data are
// errors naming the file, line and column) and returns the predictor's camera
// model.
func ReadCameraFile(path string) (predictor.Camera, error) {
	if st, err := os.Stat(path); err != nil {
		return predictor.Camera{}, fmt.Errorf("camera file: %w", err)
	} else if st.Size() > maxCameraFileBytes {
		return predictor.Camera{}, fmt.Errorf("camera file %s: larger than %d bytes; is it a camera.json?: %w", path, maxCameraFileBytes, ErrBadConfig)
	}
	c, err := recording.ReadCameraFile(path)
	if err != nil {
		return predictor.Camera{}, fmt.Errorf("camera file: %w", err)
	}
	cam := predictor.Camera(c)
	if err := cam.Validate(); err != nil {
		return predictor.Camera{}, fmt.Errorf("camera file %s: %w", path, err)
	}
	return cam, nil
}
