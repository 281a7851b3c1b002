package camera

import (
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"slices"
	"strings"
	"testing"
)

const validFile = `{
  "width": 640,
  "height": 360,
  "fx": 320,
  "fy": 320,
  "cx": 320,
  "cy": 180,
  "height_m": 1.4,
  "pitch_deg": 5,
  "roll_deg": 0,
  "x_offset_m": 1.2,
  "y_offset_m": 0
}
`

func TestDecodeValid(t *testing.T) {
	want := Camera{Width: 640, Height: 360, Fx: 320, Fy: 320, Cx: 320, Cy: 180, HeightM: 1.4, PitchDeg: 5, XOffsetM: 1.2}
	for _, tc := range []struct{ name, data string }{
		{"indented", validFile},
		{"byte order mark", "\xEF\xBB\xBF" + validFile},
		{"one line, other order", `{"y_offset_m":0,"x_offset_m":1.2,"roll_deg":0,"pitch_deg":5,"height_m":1.4,"cy":180,"cx":320,"fy":320,"fx":320,"height":360,"width":640}`},
		{"zero distortion given", strings.Replace(validFile, `"cy": 180,`, `"cy": 180, "k1": 0, "k2": 0, "p1": 0, "p2": 0, "k3": 0,`, 1)},
		{"exponent", strings.Replace(validFile, `"fx": 320`, `"fx": 3.2e2`, 1)},
	} {
		t.Run(tc.name, func(t *testing.T) {
			got, err := Decode("camera.json", []byte(tc.data))
			if err != nil {
				t.Fatal(err)
			}
			if got != want {
				t.Fatalf("got %+v, want %+v", got, want)
			}
		})
	}
}

func TestDecodeErrors(t *testing.T) {
	edit := func(old, new string) string {
		if !strings.Contains(validFile, old) {
			panic(old)
		}
		return strings.Replace(validFile, old, new, 1)
	}
	tests := []struct {
		name         string
		data         string
		want         error
		line, column int    // 0, 0: the whole file
		text         string // in the message
	}{
		{"empty", "", ErrFile, 0, 0, "empty"},
		{"white space", " \n\t", ErrFile, 0, 0, "empty"},
		{"too large", "{" + strings.Repeat(" ", MaxFileBytes) + "}", ErrFile, 0, 0, "larger than"},
		{"array", "\n [1]", ErrFile, 2, 2, "one JSON object"},
		{"number", "5", ErrFile, 1, 1, "one JSON object"},
		{"truncated", `{"width": 640,` + "\n", ErrFile, 2, 1, "ends early"},
		{"syntax", edit(`"fy": 320,`, `"fy": 320,,`), ErrFile, 5, 13, "invalid JSON"},
		{"unknown key", edit(`"pitch_deg"`, `"pitch_dge"`), ErrFile, 9, 3, `unknown key "pitch_dge"`},
		{"key in another case", edit(`"fx"`, `"Fx"`), ErrFile, 4, 3, `unknown key "Fx"`},
		{"key twice", edit(`"cy": 180,`, `"cy": 180, "fx": 1,`), ErrFile, 7, 14, `"fx" given twice (first on line 4)`},
		{"missing key", edit(`"cy": 180,`, ``), ErrFile, 13, 1, "missing: cy"},
		{"missing mount", edit(`"roll_deg": 0,`, ``), ErrFile, 13, 1, "missing: roll_deg"},
		{"string value", edit(`"fx": 320`, `"fx": "320"`), ErrFile, 4, 9, "not a number"},
		{"null value", edit(`"fx": 320`, `"fx": null`), ErrFile, 4, 9, "not a number"},
		{"object value", edit(`"fx": 320`, `"fx": {}`), ErrFile, 4, 9, "not a number"},
		{"fractional width", edit(`"width": 640`, `"width": 640.5`), ErrFile, 2, 12, "whole number"},
		{"huge width", edit(`"width": 640`, `"width": 99999999999999999999`), ErrFile, 2, 12, "out of range"},
		{"float overflow", edit(`"fx": 320`, `"fx": 1e999`), ErrFile, 4, 9, "out of range"},
		{"trailing object", validFile + "{}\n", ErrFile, 14, 1, "data after"},
		{"trailing comma", strings.TrimSpace(validFile) + ",", ErrFile, 13, 2, "data after"},
		{"fx zero", edit(`"fx": 320`, `"fx": 0`), ErrInvalid, 4, 3, "fx = 0"},
		{"width zero", edit(`"width": 640`, `"width": 0`), ErrInvalid, 2, 3, "width = 0"},
		{"cx outside", edit(`"cx": 320`, `"cx": 641`), ErrInvalid, 6, 3, "cx = 641"},
		{"height_m zero", edit(`"height_m": 1.4`, `"height_m": 0`), ErrInvalid, 8, 3, "height_m = 0"},
		{"pitch 90", edit(`"pitch_deg": 5`, `"pitch_deg": 90`), ErrInvalid, 9, 3, "pitch_deg = 90"},
		{"bom keeps columns", "\xEF\xBB\xBF{\"width\": x}", ErrFile, 1, 14, "invalid JSON"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Decode("dir/camera.json", []byte(tc.data))
			var pe *ParseError
			if !errors.As(err, &pe) || !errors.Is(err, tc.want) {
				t.Fatalf("got %v, want a *ParseError wrapping %v", err, tc.want)
			}
			if pe.Line != tc.line || pe.Column != tc.column {
				t.Errorf("at line %d, column %d, want %d, %d (%v)", pe.Line, pe.Column, tc.line, tc.column, err)
			}
			if msg := err.Error(); !strings.Contains(msg, tc.text) || !strings.Contains(msg, "dir/camera.json") {
				t.Errorf("message %q does not name the file and say %q", msg, tc.text)
			}
		})
	}
}

// TestKeysAreTheJSONTags: the reader's keys and the struct's JSON tags (what
// Marshal writes) are the same names in the same order.
func TestKeysAreTheJSONTags(t *testing.T) {
	var tags []string
	typ := reflect.TypeFor[Camera]()
	for i := range typ.NumField() {
		tags = append(tags, typ.Field(i).Tag.Get("json"))
	}
	var c Camera
	var names []string
	for _, k := range c.keys() {
		names = append(names, k.name)
	}
	if !slices.Equal(tags, names) {
		t.Fatalf("reader keys %v, JSON tags %v", names, tags)
	}
	// Each key is bound to the field of its tag.
	for i, k := range c.keys() {
		f := reflect.ValueOf(&c).Elem().Field(i).Addr().Interface()
		if (k.i != nil && f != any(k.i)) || (k.f != nil && f != any(k.f)) {
			t.Errorf("key %q is not bound to field %s", k.name, typ.Field(i).Name)
		}
	}
}

func TestMarshalRoundTrip(t *testing.T) {
	js, err := Marshal(good)
	if err != nil {
		t.Fatal(err)
	}
	back, err := Decode("", js)
	if err != nil {
		t.Fatalf("%v\n%s", err, js)
	}
	if back != good {
		t.Fatalf("round trip: %+v -> %+v", good, back)
	}
	if _, err := Marshal(Camera{Width: 4, Height: 2, Fx: 3, Fy: 3, Cx: 2, Cy: 1}); !errors.Is(err, ErrInvalid) {
		t.Errorf("Marshal of a camera without mount = %v, want ErrInvalid (height_m)", err)
	}
}

func TestReadFile(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "camera.json")
	if err := os.WriteFile(p, []byte(validFile), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := ReadFile(p); err != nil {
		t.Fatal(err)
	}
	if _, err := ReadFile(filepath.Join(dir, "absent.json")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("absent file: %v, want os.ErrNotExist", err)
	}
	big := filepath.Join(dir, "big.json")
	os.WriteFile(big, []byte(strings.Repeat(" ", MaxFileBytes+10)), 0o644)
	if _, err := ReadFile(big); !errors.Is(err, ErrFile) || !strings.Contains(err.Error(), big) {
		t.Errorf("oversized file: %v, want ErrFile naming %s", err, big)
	}
}
