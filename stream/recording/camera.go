package recording

import (
	"errors"
	"fmt"
	"path/filepath"

	"stopgap/internal/camera"
)

// Camera is the content of camera.json: the module's one camera type
// (package stopgap/internal/camera), intrinsics and mount, with its JSON
// keys. A recording's camera is complete: [Open] and [Create] check it with
// Camera.Validate, mount included, since a recording is made to be replayed
// with predicted frames.
type Camera = camera.Camera

var utf8BOM = []byte{0xEF, 0xBB, 0xBF}

// decodeCamera reads camera.json with the one strict reader (camera.Decode)
// and reports its problems as a [*ParseError] wrapping [ErrCamera], with the
// reader's line and column.
func decodeCamera(file string, data []byte) (Camera, error) {
	cam, err := camera.Decode(file, data)
	if err != nil {
		var pe *camera.ParseError
		if errors.As(err, &pe) {
			return Camera{}, &ParseError{File: file, Line: pe.Line, Column: pe.Column, Err: fmt.Errorf("%w: %w", ErrCamera, pe.Err)}
		}
		return Camera{}, &ParseError{File: file, Err: fmt.Errorf("%w: %w", ErrCamera, err)}
	}
	return cam, nil
}

// encodeCamera renders camera.json (camera.Marshal: every key present) and
// reports a camera that fails Camera.Validate as [ErrCamera].
func encodeCamera(c Camera) ([]byte, error) {
	js, err := camera.Marshal(c)
	if err != nil {
		return nil, fmt.Errorf("%w: %w", ErrCamera, err)
	}
	return js, nil
}

// WriteCameraFile writes c as a camera.json file at path (all keys present,
// the layout [Open] reads), atomically: a temporary file beside it, synced
// and renamed. c must pass Camera.Validate.
func WriteCameraFile(path string, c Camera) error {
	js, err := encodeCamera(c)
	if err != nil {
		return fmt.Errorf("recording: %s: %w", path, err)
	}
	if err := writeFileAtomic(filepath.Dir(path), filepath.Base(path), js); err != nil {
		return fmt.Errorf("recording: %s: %w", path, err)
	}
	return nil
}
