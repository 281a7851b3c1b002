package relay

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"os"

	"stopgap/predictor"
	"stopgap/stream/recording"
)

// maxCameraFileBytes bounds camera.json (real files are a few hundred bytes).
const maxCameraFileBytes = 64 << 10

// ReadCameraFile reads a camera.json (the recording format's camera file, see
// recording.Camera) and returns the predictor's camera model. Errors name the
// file and, for JSON syntax errors, the line.
func ReadCameraFile(path string) (predictor.Camera, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return predictor.Camera{}, fmt.Errorf("camera file: %w", err)
	}
	if len(data) > maxCameraFileBytes {
		return predictor.Camera{}, fmt.Errorf("camera file %s: larger than %d bytes; is it a camera.json?: %w", path, maxCameraFileBytes, ErrBadConfig)
	}
	var c recording.Camera
	dec := json.NewDecoder(bytes.NewReader(data))
	if err := dec.Decode(&c); err != nil {
		var se *json.SyntaxError
		var te *json.UnmarshalTypeError
		switch {
		case errors.As(err, &se):
			return predictor.Camera{}, fmt.Errorf("camera file %s line %d: %w", path, 1+bytes.Count(data[:min(int(se.Offset), len(data))], []byte("\n")), err)
		case errors.As(err, &te):
			return predictor.Camera{}, fmt.Errorf("camera file %s line %d: %w", path, 1+bytes.Count(data[:min(int(te.Offset), len(data))], []byte("\n")), err)
		}
		return predictor.Camera{}, fmt.Errorf("camera file %s: %w", path, err)
	}
	if off := dec.InputOffset(); len(bytes.TrimSpace(data[off:])) > 0 {
		off += int64(len(data[off:]) - len(bytes.TrimLeft(data[off:], " \t\r\n")))
		line := 1 + bytes.Count(data[:off], []byte("\n"))
		return predictor.Camera{}, fmt.Errorf("camera file %s line %d: extra data after the JSON object; a camera.json holds exactly one object: %w", path, line, ErrBadConfig)
	}
	if err := c.Validate(); err != nil {
		return predictor.Camera{}, fmt.Errorf("camera file %s: %w", path, err)
	}
	cam := predictor.CameraFromRecording(c)
	if err := cam.Validate(); err != nil {
		return predictor.Camera{}, fmt.Errorf("camera file %s: %w", path, err)
	}
	return cam, nil
}
