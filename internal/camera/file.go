package camera

import (
	"bytes"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"os"
	"strconv"
	"strings"
)

// MaxFileBytes bounds a camera.json; real ones are a few hundred bytes.
const MaxFileBytes = 64 << 10

// key is one key of camera.json: its name (the field's JSON tag; a test
// keeps the two equal), whether a file must give it, and where its value
// goes.
type key struct {
	name     string
	required bool
	i        *int
	f        *float64
}

// keys returns the keys of camera.json in the order of the struct, bound to
// the fields of c. The distortion coefficients are optional (absent means 0:
// a pinhole or an already rectified image); every other key is required,
// the mount included, since a forgotten pitch or offset read as 0 would
// silently move every predicted pixel.
func (c *Camera) keys() [16]key {
	return [16]key{
		{"width", true, &c.Width, nil}, {"height", true, &c.Height, nil},
		{"fx", true, nil, &c.Fx}, {"fy", true, nil, &c.Fy}, {"cx", true, nil, &c.Cx}, {"cy", true, nil, &c.Cy},
		{"k1", false, nil, &c.K1}, {"k2", false, nil, &c.K2}, {"p1", false, nil, &c.P1}, {"p2", false, nil, &c.P2}, {"k3", false, nil, &c.K3},
		{"height_m", true, nil, &c.HeightM}, {"pitch_deg", true, nil, &c.PitchDeg}, {"roll_deg", true, nil, &c.RollDeg},
		{"x_offset_m", true, nil, &c.XOffsetM}, {"y_offset_m", true, nil, &c.YOffsetM},
	}
}

// RequiredKeys and OptionalKeys list the keys of camera.json, in file order.
// README.md's recording format names the same (a test compares them).
func RequiredKeys() []string { return keyNames(func(k key) bool { return k.required }) }

// OptionalKeys lists the keys a camera.json may leave out (they are then 0).
func OptionalKeys() []string { return keyNames(func(k key) bool { return !k.required }) }

// keyNames returns the names of the keys that keep selects, in file order.
func keyNames(keep func(key) bool) []string {
	var c Camera
	var out []string
	for _, k := range c.keys() {
		if keep(k) {
			out = append(out, k.name)
		}
	}
	return out
}

// ReadFile reads the camera.json at path with [Decode]; file is the path.
func ReadFile(path string) (Camera, error) {
	f, err := os.Open(path)
	if err != nil {
		return Camera{}, fmt.Errorf("camera: %w", err)
	}
	defer f.Close()
	data, err := io.ReadAll(io.LimitReader(f, MaxFileBytes+1))
	if err != nil {
		return Camera{}, fmt.Errorf("camera: %s: %w", path, err)
	}
	return Decode(path, data)
}

// Decode is the one reader of camera.json. It is strict: the file holds
// exactly one JSON object (an UTF-8 byte order mark and surrounding white
// space are allowed), every key is one of [RequiredKeys] or [OptionalKeys]
// spelt exactly (no case folding), no key appears twice, every required key
// is present, every value is a JSON number (width and height whole ones),
// and the camera passes [Camera.Validate] (the complete level). Any other
// input gives a [*ParseError] with the line and column of the fault; file
// only names the input in it. data is not kept.
func Decode(file string, data []byte) (Camera, error) {
	if len(data) > MaxFileBytes {
		return Camera{}, &ParseError{File: file, Err: fmt.Errorf("%w: larger than %d bytes; is it a camera.json?", ErrFile, MaxFileBytes)}
	}
	body := bytes.TrimPrefix(data, utf8BOM)
	d := decoder{file: file, data: data, body: body, base: int64(len(data) - len(body))}
	if len(bytes.TrimSpace(body)) == 0 {
		return Camera{}, &ParseError{File: file, Err: fmt.Errorf("%w: the file is empty; write one JSON object with the keys %s", ErrFile, strings.Join(RequiredKeys(), ", "))}
	}
	var cam Camera
	keys := cam.keys()
	var at [len(keys)]int64 // offset of each key given, -1 if absent
	for i := range at {
		at[i] = -1
	}

	dec := json.NewDecoder(bytes.NewReader(body))
	tok, err := dec.Token()
	if err != nil {
		return Camera{}, d.jsonErr(err)
	}
	if tok != json.Delim('{') {
		return Camera{}, d.errAt(skip(body, 0, ""), "%w: the file must hold one JSON object {...}", ErrFile)
	}
	for dec.More() {
		start := skip(body, dec.InputOffset(), ",")
		tok, err := dec.Token()
		if err != nil {
			return Camera{}, d.jsonErr(err)
		}
		name, _ := tok.(string) // the decoder only returns strings as object keys
		k := -1
		for i := range keys {
			if keys[i].name == name {
				k = i
			}
		}
		if k < 0 {
			return Camera{}, d.errAt(start, "%w: unknown key %q; the keys are %s (spelt exactly so; the distortion ones optional)", ErrFile, name, strings.Join(keyNames(func(key) bool { return true }), " "))
		}
		if at[k] >= 0 {
			line, _ := d.lineCol(at[k])
			return Camera{}, d.errAt(start, "%w: key %q given twice (first on line %d); keep one", ErrFile, name, line)
		}
		at[k] = start
		valueAt := skip(body, dec.InputOffset(), ":")
		var raw json.RawMessage
		if err := dec.Decode(&raw); err != nil {
			return Camera{}, d.jsonErr(err)
		}
		if err := keys[k].set(raw); err != nil {
			return Camera{}, d.errAt(valueAt, "%w: key %q: %w", ErrFile, name, err)
		}
	}
	if _, err := dec.Token(); err != nil { // the closing brace
		return Camera{}, d.jsonErr(err)
	}
	end := dec.InputOffset() - 1
	if rest := skip(body, dec.InputOffset(), ""); rest < int64(len(body)) {
		return Camera{}, d.errAt(rest, "%w: data after the JSON object; a camera.json holds exactly one object", ErrFile)
	}
	var missing []string
	for i, k := range keys {
		if k.required && at[i] < 0 {
			missing = append(missing, k.name)
		}
	}
	if len(missing) > 0 {
		return Camera{}, d.errAt(end, "%w: required keys missing: %s; add them (the mount keys too: measure the camera's position on the vehicle)", ErrFile, strings.Join(missing, ", "))
	}
	if err := cam.Validate(); err != nil {
		var ce *Error
		if errors.As(err, &ce) {
			for i, k := range keys {
				if k.name == ce.Key && at[i] >= 0 {
					return Camera{}, d.wrapAt(at[i], err)
				}
			}
		}
		return Camera{}, &ParseError{File: file, Err: err}
	}
	return cam, nil
}

// set parses raw, a JSON value, into the key's field.
func (k key) set(raw json.RawMessage) error {
	s := string(raw)
	if s == "" || !(s[0] == '-' || (s[0] >= '0' && s[0] <= '9')) {
		return fmt.Errorf("the value %s is not a number", truncate(s, 20))
	}
	if k.i != nil {
		n, err := strconv.Atoi(s)
		if errors.Is(err, strconv.ErrRange) {
			return fmt.Errorf("the value %s is out of range", truncate(s, 20))
		}
		if err != nil {
			return fmt.Errorf("the value %s is not a whole number of pixels", truncate(s, 20))
		}
		*k.i = n
		return nil
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		return fmt.Errorf("the value %s is out of range", truncate(s, 20))
	}
	*k.f = v
	return nil
}

// Marshal renders c as camera.json with every key present, indented, with a
// final newline: what [Decode] reads back to the same Camera. c must pass
// [Camera.Validate].
func Marshal(c Camera) ([]byte, error) {
	if err := c.Validate(); err != nil {
		return nil, err
	}
	b, err := json.MarshalIndent(c, "", "  ")
	if err != nil {
		return nil, fmt.Errorf("camera: %w", err)
	}
	return append(b, '\n'), nil
}

var utf8BOM = []byte{0xEF, 0xBB, 0xBF}

// decoder turns offsets in the body (data without its byte order mark)
// into positions in data.
type decoder struct {
	file string
	data []byte
	body []byte // data without its byte order mark
	base int64  // length of the byte order mark
}

// errAt returns a *ParseError at body offset off.
func (d decoder) errAt(off int64, format string, a ...any) error {
	return d.wrapAt(off, fmt.Errorf(format, a...))
}

func (d decoder) wrapAt(off int64, err error) error {
	line, col := d.lineCol(off)
	return &ParseError{File: d.file, Line: line, Column: col, Err: err}
}

// jsonErr positions an error of encoding/json.
func (d decoder) jsonErr(err error) error {
	var se *json.SyntaxError
	switch {
	case errors.As(err, &se):
		// The token reader's offsets point at or past the offending byte
		// depending on the path that found it; a plain check of the whole
		// body reports it just past the byte, always.
		off := se.Offset
		var all *json.SyntaxError
		if errors.As(json.Unmarshal(d.body, new(json.RawMessage)), &all) {
			off, err = all.Offset, all
		}
		return d.errAt(off-1, "%w: invalid JSON: %v", ErrFile, err)
	case errors.Is(err, io.EOF), errors.Is(err, io.ErrUnexpectedEOF):
		return d.errAt(int64(len(d.data))-d.base, "%w: the JSON ends early; is the file truncated?", ErrFile)
	default:
		return &ParseError{File: d.file, Err: fmt.Errorf("%w: %v", ErrFile, err)}
	}
}

// lineCol converts a body offset into a 1-based line and byte column of data.
func (d decoder) lineCol(off int64) (line, col int) {
	off = min(max(off+d.base, 0), int64(len(d.data)))
	before := d.data[:off]
	line = 1 + bytes.Count(before, []byte{'\n'})
	col = int(off) - (bytes.LastIndexByte(before, '\n') + 1) + 1
	return line, col
}

// skip returns the offset of the first byte at or after off that is neither
// JSON white space nor one of the separators in seps.
func skip(b []byte, off int64, seps string) int64 {
	for off < int64(len(b)) {
		c := b[off]
		if c != ' ' && c != '\t' && c != '\r' && c != '\n' && !strings.ContainsRune(seps, rune(c)) {
			break
		}
		off++
	}
	return off
}

func truncate(s string, n int) string {
	if len(s) <= n {
		return s
	}
	return s[:n] + "..."
}
