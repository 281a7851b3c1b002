package relay

import (
	"fmt"

	"stopgap/internal/camera"
	"stopgap/predictor"
)

// ReadCameraFile reads the vehicle camera's camera.json with the module's
// one strict reader (camera.ReadFile: one JSON object, exact keys, every
// required key present, nothing after it, the complete validation; errors
// name the file, line and column). The error also wraps ErrBadConfig.
func ReadCameraFile(path string) (predictor.Camera, error) {
	cam, err := camera.ReadFile(path)
	if err != nil {
		return predictor.Camera{}, fmt.Errorf("%w: %w", ErrBadConfig, err)
	}
	return cam, nil
}
