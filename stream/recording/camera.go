package recording

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"path/filepath"
	"strings"
)

// MaxImageSide is the largest accepted image width or height in pixels.
const MaxImageSide = 1 << 15

// Camera is the content of camera.json: pinhole intrinsics in pixels,
// OpenCV (Brown-Conrady) distortion coefficients and the camera's mounting
// on the vehicle.
//
// Conventions: camera axes follow OpenCV (x right, y down, z forward along
// the optical axis); the camera centre is at (XOffsetM, YOffsetM, HeightM) in
// the ISO 8855 vehicle frame (x forward, y left, z up, origin on the ground);
// PitchDeg > 0 tilts the optical axis down toward the road; RollDeg > 0
// rotates the image clockwise as seen by the camera (right side down).
// With all angles zero the optical axis points along vehicle +x.
//
// This is a plain data struct; the predictor package has its own camera
// model with the geometry.
type Camera struct {
	Width  int     `json:"width"`  // image width in pixels, > 0
	Height int     `json:"height"` // image height in pixels, > 0
	Fx     float64 `json:"fx"`     // focal length along x in pixels, > 0
	Fy     float64 `json:"fy"`     // focal length along y in pixels, > 0
	Cx     float64 `json:"cx"`     // principal point x in pixels, in [0, Width]
	Cy     float64 `json:"cy"`     // principal point y in pixels, in [0, Height]
	K1     float64 `json:"k1"`     // radial distortion (optional, default 0)
	K2     float64 `json:"k2"`     // radial distortion (optional, default 0)
	P1     float64 `json:"p1"`     // tangential distortion (optional, default 0)
	P2     float64 `json:"p2"`     // tangential distortion (optional, default 0)
	K3     float64 `json:"k3"`     // radial distortion (optional, default 0)

	HeightM  float64 `json:"height_m"`   // camera centre height above the road in metres, >= 0
	PitchDeg float64 `json:"pitch_deg"`  // downward tilt of the optical axis in degrees, in (-90, 90)
	RollDeg  float64 `json:"roll_deg"`   // roll about the optical axis in degrees, in (-90, 90)
	XOffsetM float64 `json:"x_offset_m"` // camera centre ahead of the vehicle origin in metres
	YOffsetM float64 `json:"y_offset_m"` // camera centre left of the vehicle origin in metres
}

// Validate reports the first invalid parameter, wrapping [ErrCamera]. The
// error names the JSON key.
func (c Camera) Validate() error {
	_, err := c.validate()
	return err
}

// validate returns the JSON key at fault with the error.
func (c Camera) validate() (string, error) {
	bad := func(key, format string, a ...any) (string, error) {
		return key, fmt.Errorf("%w: %s %s", ErrCamera, key, fmt.Sprintf(format, a...))
	}
	if c.Width <= 0 || c.Width > MaxImageSide {
		return bad("width", "is %d; it must be in 1..%d pixels", c.Width, MaxImageSide)
	}
	if c.Height <= 0 || c.Height > MaxImageSide {
		return bad("height", "is %d; it must be in 1..%d pixels", c.Height, MaxImageSide)
	}
	floats := []struct {
		key string
		v   float64
	}{
		{"fx", c.Fx}, {"fy", c.Fy}, {"cx", c.Cx}, {"cy", c.Cy},
		{"k1", c.K1}, {"k2", c.K2}, {"p1", c.P1}, {"p2", c.P2}, {"k3", c.K3},
		{"height_m", c.HeightM}, {"pitch_deg", c.PitchDeg}, {"roll_deg", c.RollDeg},
		{"x_offset_m", c.XOffsetM}, {"y_offset_m", c.YOffsetM},
	}
	for _, f := range floats {
		if math.IsNaN(f.v) || math.IsInf(f.v, 0) {
			return bad(f.key, "is %v; it must be a finite number", f.v)
		}
	}
	if c.Fx <= 0 {
		return bad("fx", "is %v; the focal length must be positive (pixels)", c.Fx)
	}
	if c.Fy <= 0 {
		return bad("fy", "is %v; the focal length must be positive (pixels)", c.Fy)
	}
	if c.Cx < 0 || c.Cx > float64(c.Width) {
		return bad("cx", "is %v; the principal point must lie in the image, 0..%d", c.Cx, c.Width)
	}
	if c.Cy < 0 || c.Cy > float64(c.Height) {
		return bad("cy", "is %v; the principal point must lie in the image, 0..%d", c.Cy, c.Height)
	}
	if c.HeightM < 0 {
		return bad("height_m", "is %v; the camera height above the road must not be negative (metres)", c.HeightM)
	}
	if c.PitchDeg <= -90 || c.PitchDeg >= 90 {
		return bad("pitch_deg", "is %v; it must be in (-90, 90) degrees, positive tilts down", c.PitchDeg)
	}
	if c.RollDeg <= -90 || c.RollDeg >= 90 {
		return bad("roll_deg", "is %v; it must be in (-90, 90) degrees", c.RollDeg)
	}
	return "", nil
}

// cameraJSON mirrors Camera with pointers so that missing required keys can
// be told apart from zeros.
type cameraJSON struct {
	Width    *int     `json:"width"`
	Height   *int     `json:"height"`
	Fx       *float64 `json:"fx"`
	Fy       *float64 `json:"fy"`
	Cx       *float64 `json:"cx"`
	Cy       *float64 `json:"cy"`
	K1       float64  `json:"k1"`
	K2       float64  `json:"k2"`
	P1       float64  `json:"p1"`
	P2       float64  `json:"p2"`
	K3       float64  `json:"k3"`
	HeightM  float64  `json:"height_m"`
	PitchDeg float64  `json:"pitch_deg"`
	RollDeg  float64  `json:"roll_deg"`
	XOffsetM float64  `json:"x_offset_m"`
	YOffsetM float64  `json:"y_offset_m"`
}

// decodeCamera parses camera.json strictly: one JSON object, no unknown keys
// (a misspelt key would otherwise silently become a zero), all of width,
// height, fx, fy, cx, cy present, and a valid camera.
func decodeCamera(file string, data []byte) (Camera, error) {
	perr := func(off int64, err error) error {
		line, col := lineCol(data, off)
		return &ParseError{File: file, Line: line, Column: col, Err: err}
	}
	data = bytes.TrimPrefix(data, utf8BOM)
	if len(bytes.TrimSpace(data)) == 0 {
		return Camera{}, &ParseError{File: file, Err: fmt.Errorf("%w: file is empty; expected a JSON object with width, height, fx, fy, cx, cy", ErrCamera)}
	}
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	var raw cameraJSON
	if err := dec.Decode(&raw); err != nil {
		var se *json.SyntaxError
		var te *json.UnmarshalTypeError
		switch {
		case errors.As(err, &se):
			// Offset is just past the offending character.
			return Camera{}, perr(se.Offset-1, fmt.Errorf("%w: invalid JSON: %v", ErrCamera, err))
		case errors.As(err, &te):
			return Camera{}, perr(te.Offset, fmt.Errorf("%w: key %q: %v", ErrCamera, te.Field, err))
		case errors.Is(err, io.ErrUnexpectedEOF):
			return Camera{}, perr(int64(len(data)), fmt.Errorf("%w: JSON ends early; the file is truncated", ErrCamera))
		default:
			// Unknown keys carry no offset: find the key in the text.
			off := dec.InputOffset()
			if k, ok := strings.CutPrefix(err.Error(), "json: unknown field "); ok {
				if i := bytes.Index(data, []byte(k)); i >= 0 {
					off = int64(i)
				}
			}
			return Camera{}, perr(off, fmt.Errorf("%w: %v (known keys: width height fx fy cx cy k1 k2 p1 p2 k3 height_m pitch_deg roll_deg x_offset_m y_offset_m)", ErrCamera, err))
		}
	}
	if off := dec.InputOffset(); len(bytes.TrimSpace(data[off:])) > 0 {
		off += int64(len(data[off:]) - len(bytes.TrimLeft(data[off:], " \t\r\n")))
		return Camera{}, perr(off, fmt.Errorf("%w: extra data after the JSON object; a camera.json holds exactly one object", ErrCamera))
	}
	var missing []string
	for _, m := range []struct {
		key string
		ok  bool
	}{{"width", raw.Width != nil}, {"height", raw.Height != nil}, {"fx", raw.Fx != nil},
		{"fy", raw.Fy != nil}, {"cx", raw.Cx != nil}, {"cy", raw.Cy != nil}} {
		if !m.ok {
			missing = append(missing, m.key)
		}
	}
	if len(missing) > 0 {
		return Camera{}, &ParseError{File: file, Err: fmt.Errorf("%w: required keys missing: %v", ErrCamera, missing)}
	}
	cam := Camera{
		Width: *raw.Width, Height: *raw.Height, Fx: *raw.Fx, Fy: *raw.Fy, Cx: *raw.Cx, Cy: *raw.Cy,
		K1: raw.K1, K2: raw.K2, P1: raw.P1, P2: raw.P2, K3: raw.K3,
		HeightM: raw.HeightM, PitchDeg: raw.PitchDeg, RollDeg: raw.RollDeg,
		XOffsetM: raw.XOffsetM, YOffsetM: raw.YOffsetM,
	}
	if key, err := cam.validate(); err != nil {
		off := int64(bytes.Index(data, []byte(`"`+key+`"`)))
		if off < 0 {
			return Camera{}, &ParseError{File: file, Err: err}
		}
		return Camera{}, perr(off, err)
	}
	return cam, nil
}

// encodeCamera renders camera.json with every key present.
func encodeCamera(c Camera) ([]byte, error) {
	b, err := json.MarshalIndent(c, "", "  ")
	if err != nil {
		return nil, err
	}
	return append(b, '\n'), nil
}

var utf8BOM = []byte{0xEF, 0xBB, 0xBF}

// lineCol converts a byte offset into a 1-based line and column.
func lineCol(data []byte, off int64) (line, col int) {
	if off < 0 {
		off = 0
	}
	if off > int64(len(data)) {
		off = int64(len(data))
	}
	before := data[:off]
	line = 1 + bytes.Count(before, []byte{'\n'})
	col = int(off) - (bytes.LastIndexByte(before, '\n') + 1) + 1
	return line, col
}

// WriteCameraFile writes c as a camera.json file at path (all keys present,
// the layout [Open] reads), atomically: a temporary file beside it, synced
// and renamed. c must pass [Camera.Validate].
func WriteCameraFile(path string, c Camera) error {
	if err := c.Validate(); err != nil {
		return fmt.Errorf("recording: %s: %w", path, err)
	}
	js, err := encodeCamera(c)
	if err != nil {
		return fmt.Errorf("recording: %s: %w", path, err)
	}
	if err := writeFileAtomic(filepath.Dir(path), filepath.Base(path), js); err != nil {
		return fmt.Errorf("recording: %s: %w", path, err)
	}
	return nil
}

// ReadCameraFile reads a camera.json file strictly, as [Open] does.
func ReadCameraFile(path string) (Camera, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return Camera{}, fmt.Errorf("recording: %w", err)
	}
	return decodeCamera(path, data)
}
