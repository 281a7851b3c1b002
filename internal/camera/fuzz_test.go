package camera

import (
	"encoding/json"
	"errors"
	"testing"
)

// FuzzDecode feeds arbitrary bytes as camera.json: never a panic; a refusal
// is a *ParseError; an accepted camera (1) holds exactly the numbers a plain
// encoding/json decode of the same bytes finds under each key (absent
// optional keys are 0), (2) survives Marshal and Decode unchanged, and (3)
// Marshal of the result is a fixed point.
func FuzzDecode(f *testing.F) {
	f.Add([]byte(validFile))
	f.Add([]byte(`{"width":1,"height":1,"fx":1e-300,"fy":1,"cx":0,"cy":1,"height_m":1,"pitch_deg":0,"roll_deg":0,"x_offset_m":0,"y_offset_m":0}`))
	f.Add([]byte(`{"width":1,"height":1,"fx":1,"fy":1,"cx":0,"cy":1,"fx":0}`))
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"Fx":900,"fy":1000,"cx":640,"cy":360,"height_m":1.4}`))
	f.Add([]byte("\xEF\xBB\xBF{\"k1\": -0.1, \"width\": 2}"))
	f.Add([]byte(`[]`))
	f.Add([]byte(`{"width":1e3}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		cam, err := Decode("camera.json", data)
		if err != nil {
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("error %v is not a *ParseError", err)
			}
			return
		}
		var raw map[string]any
		body := data
		if len(body) >= 3 && string(body[:3]) == string(utf8BOM) {
			body = body[3:]
		}
		if err := json.Unmarshal(body, &raw); err != nil {
			t.Fatalf("accepted bytes that are not one JSON object: %v", err)
		}
		c := cam
		for _, k := range c.keys() {
			got := 0.0
			if k.i != nil {
				got = float64(*k.i)
			} else {
				got = *k.f
			}
			want, ok := raw[k.name].(float64)
			if !ok && k.required {
				t.Fatalf("accepted a file without %q", k.name)
			}
			if got != want {
				t.Fatalf("key %q is %v in the file, %v in the camera", k.name, want, got)
			}
		}
		if len(raw) > len(c.keys()) {
			t.Fatalf("accepted %d keys, there are %d", len(raw), len(c.keys()))
		}
		js, err := Marshal(cam)
		if err != nil {
			t.Fatalf("accepted camera %+v cannot be written: %v", cam, err)
		}
		back, err := Decode("camera.json", js)
		if err != nil {
			t.Fatalf("the written camera.json for %+v is refused: %v\n%s", cam, err, js)
		}
		if back != cam {
			t.Fatalf("round trip changed the camera:\n read    %+v\n written %s\n re-read %+v", cam, js, back)
		}
		if js2, _ := Marshal(back); string(js2) != string(js) {
			t.Fatalf("re-encoding is not stable:\n%s\n%s", js, js2)
		}
	})
}
