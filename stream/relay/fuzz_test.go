package relay

import (
	"bytes"
	"encoding/json"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"stopgap/stream/recording"
)

// FuzzReadCameraFile: any camera.json content gives a camera or an error,
// never a panic. An accepted camera (1) holds exactly the numbers of the
// file, recomputed here with a plain JSON decode into a map (keys as the
// README's recording format names them, spelt exactly; absent optional keys
// are 0), and (2) survives the round trip through the recording writer (the
// camera.json a relay recording gets) and ReadCameraFile.
func FuzzReadCameraFile(f *testing.F) {
	const mount = `"height_m":1.4,"pitch_deg":5,"roll_deg":0,"x_offset_m":1.5,"y_offset_m":0`
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640,"cy":360,` + mount + `}`))
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640,"cy":360,"k1":-0.1,"k2":0.01,"height_m":1.4,"pitch_deg":95,"roll_deg":0,"x_offset_m":1.5,"y_offset_m":0}`))
	f.Add([]byte(`{"width":"1280"}`))
	f.Add([]byte("{\n\"width\": 12,\n\"height\": 1e400}"))
	f.Add([]byte(``))
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640,"cy":360,` + mount + `} {"fx":1}`))
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"Fx":900,"fy":1000,"cx":640,"cy":360,` + mount + `}`))
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640,"cy":360,"height_m":1.4,"pitch_deg":5}`))
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, data []byte) {
		p := filepath.Join(dir, "camera.json")
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		cam, err := ReadCameraFile(p)
		if err != nil {
			return
		}
		var raw map[string]any
		if err := json.Unmarshal(bytes.TrimPrefix(data, []byte("\xEF\xBB\xBF")), &raw); err != nil {
			t.Fatalf("accepted a file that is not one JSON object: %v", err)
		}
		want := map[string]float64{
			"width": float64(cam.Width), "height": float64(cam.Height), "fx": cam.Fx, "fy": cam.Fy, "cx": cam.Cx, "cy": cam.Cy,
			"k1": cam.K1, "k2": cam.K2, "p1": cam.P1, "p2": cam.P2, "k3": cam.K3,
			"height_m": cam.HeightM, "pitch_deg": cam.PitchDeg, "roll_deg": cam.RollDeg, "x_offset_m": cam.XOffsetM, "y_offset_m": cam.YOffsetM,
		}
		for key := range raw {
			if _, ok := want[key]; !ok {
				t.Fatalf("accepted the unknown key %q", key)
			}
		}
		for key, got := range want {
			n, _ := raw[key].(float64)
			if n != got {
				t.Fatalf("key %q is %v in the file, %v in the camera", key, n, got)
			}
		}
		dir := filepath.Join(t.TempDir(), "rec")
		w, err := recording.Create(dir, cam)
		if err != nil {
			t.Fatalf("accepted camera %+v refused by the recording writer: %v", cam, err)
		}
		w.Close()
		back, err := ReadCameraFile(filepath.Join(dir, recording.CameraFile))
		if err != nil {
			t.Fatalf("the recording's camera.json for %+v is refused: %v", cam, err)
		}
		if back != cam {
			t.Fatalf("round trip through the recording changed the camera: %+v -> %+v", cam, back)
		}
	})
}

func TestReadCameraFileErrors(t *testing.T) {
	dir := t.TempDir()
	tests := []struct{ name, content, want string }{
		{"syntax", "{\n\"width\": 1280,\n\"height\": }", "line 3"},
		{"type", "{\n\"width\": \"wide\"}", "line 2"},
		{"invalid", `{"width":1280,"height":720,"fx":-1,"fy":1000,"cx":640,"cy":360,"height_m":1.4,"pitch_deg":5,"roll_deg":0,"x_offset_m":1.5,"y_offset_m":0}`, "line 1, column 28: invalid camera: fx = -1"},
		{"trailing", "{\"width\":1280,\"height\":720,\"fx\":1000,\"fy\":1000,\"cx\":640,\"cy\":360}\n{\"fx\":1}", "line 2, column 1: malformed camera file: data after"},
		// The README's recording format: unknown keys are an error, in the
		// relay as in a recording.
		{"unknown key", "{\"width\":1280,\"height\":720,\"fx\":1000,\"fy\":1000,\"cx\":640,\"cy\":360,\n\"focal_mm\":4}", "line 2"},
		{"missing key", `{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640}`, "missing: cy, height_m"},
		{"no mount", `{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640,"cy":360,"height_m":0,"pitch_deg":0,"roll_deg":0,"x_offset_m":0,"y_offset_m":0}`, "height_m = 0"},
		{"key in another case", "{\"width\":1280,\"height\":720,\n\"Fx\":1000}", "line 2, column 1"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			p := filepath.Join(dir, tc.name+".json")
			os.WriteFile(p, []byte(tc.content), 0o644)
			_, err := ReadCameraFile(p)
			if err == nil || !contains(err.Error(), tc.want) || !contains(err.Error(), p) {
				t.Fatalf("error %v, want one naming %s and %q", err, p, tc.want)
			}
		})
	}
}

func contains(s, sub string) bool { return strings.Contains(s, sub) }
