package relay

import (
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// FuzzReadCameraFile: any camera.json content gives a valid camera or an
// error, never a panic.
func FuzzReadCameraFile(f *testing.F) {
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640,"cy":360,"height_m":1.4,"pitch_deg":5}`))
	f.Add([]byte(`{"width":1280,"height":720,"fx":1000,"fy":1000,"cx":640,"cy":360,"k1":-0.1,"k2":0.01,"height_m":1.4,"pitch_deg":95}`))
	f.Add([]byte(`{"width":"1280"}`))
	f.Add([]byte("{\n\"width\": 12,\n\"height\": 1e400}"))
	f.Add([]byte(``))
	dir := f.TempDir()
	f.Fuzz(func(t *testing.T, data []byte) {
		p := filepath.Join(dir, "camera.json")
		if err := os.WriteFile(p, data, 0o644); err != nil {
			t.Fatal(err)
		}
		cam, err := ReadCameraFile(p)
		if err == nil {
			if verr := cam.Validate(); verr != nil {
				t.Fatalf("accepted an invalid camera: %v", verr)
			}
		}
	})
}

func TestReadCameraFileErrors(t *testing.T) {
	dir := t.TempDir()
	tests := []struct{ name, content, want string }{
		{"syntax", "{\n\"width\": 1280,\n\"height\": }", "line 3"},
		{"type", "{\n\"width\": \"wide\"}", "line 2"},
		{"invalid", `{"width":1280,"height":720,"fx":-1,"fy":1000,"cx":640,"cy":360}`, "fx"},
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
