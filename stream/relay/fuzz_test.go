package relay

import (
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
// README's recording format names them; absent optional keys are 0), and
// (2) survives the round trip through the recording writer (the camera.json
// a relay recording gets) and ReadCameraFile.
func FuzzReadCameraFile(f *testing.F) {
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640,"cy":360,"height_m":1.4,"pitch_deg":5}`))
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640,"cy":360,"k1":-0.1,"k2":0.01,"height_m":1.4,"pitch_deg":95}`))
	f.Add([]byte(`{"width":"1280"}`))
	f.Add([]byte("{\n\"width\": 12,\n\"height\": 1e400}"))
	f.Add([]byte(``))
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640,"cy":360,"height_m":1.4,"pitch_deg":5} {"fx":1}`))
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"Fx":900,"fy":1000,"cx":640,"cy":360,"height_m":1.4}`))
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
		if err := json.Unmarshal(data, &raw); err != nil {
			t.Fatalf("accepted a file that is not one JSON object: %v", err)
		}
		num := func(key string) float64 {
			for k, v := range raw {
				// encoding/json matches keys case-insensitively, as the
				// relay's decoder does; the last match wins in both.
				if strings.EqualFold(k, key) {
					if f, ok := v.(float64); ok {
						return f
					}
				}
			}
			return 0
		}
		want := map[string]float64{
			"width": float64(cam.Width), "height": float64(cam.Height), "fx": cam.Fx, "fy": cam.Fy, "cx": cam.Cx, "cy": cam.Cy,
			"k1": cam.K1, "k2": cam.K2, "p1": cam.P1, "p2": cam.P2, "k3": cam.K3,
			"height_m": cam.HeightM, "pitch_deg": cam.PitchDeg, "roll_deg": cam.RollDeg, "x_offset_m": cam.XOffsetM, "y_offset_m": cam.YOffsetM,
		}
		if countFold(raw) {
			return // a key given twice in different cases: the map cannot tell which one won
		}
		for key, got := range want {
			if n := num(key); n != got {
				t.Fatalf("key %q is %v in the file, %v in the camera", key, n, got)
			}
		}
		dir := filepath.Join(t.TempDir(), "rec")
		w, err := recording.Create(dir, recording.Camera(cam))
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

// countFold reports whether two keys of m are equal under case folding.
func countFold(m map[string]any) bool {
	seen := map[string]bool{}
	for k := range m {
		l := strings.ToLower(k)
		if seen[l] {
			return true
		}
		seen[l] = true
	}
	return false
}

func TestReadCameraFileErrors(t *testing.T) {
	dir := t.TempDir()
	tests := []struct{ name, content, want string }{
		{"syntax", "{\n\"width\": 1280,\n\"height\": }", "line 3"},
		{"type", "{\n\"width\": \"wide\"}", "line 2"},
		{"invalid", `{"width":1280,"height":720,"fx":-1,"fy":1000,"cx":640,"cy":360}`, "fx"},
		{"trailing", "{\"width\":1280,\"height\":720,\"fx\":1000,\"fy\":1000,\"cx\":640,\"cy\":360}\n{\"fx\":1}", "line 2, column 1: bad camera parameters: extra data"},
		// The README's recording format: unknown keys are an error, in the
		// relay as in a recording.
		{"unknown key", "{\"width\":1280,\"height\":720,\"fx\":1000,\"fy\":1000,\"cx\":640,\"cy\":360,\n\"focal_mm\":4}", "line 2"},
		{"missing key", `{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640}`, "cy"},
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
