package main

import (
	"bytes"
	"context"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

// TestTuneCLI: bad input to tune exits non-zero with a message naming the
// problem and leaves no output directory; a short drive runs end to end
// and says plainly that the data is too little.
func TestTuneCLI(t *testing.T) {
	dir := t.TempDir()
	drive := filepath.Join(dir, "drive")
	var out, errb bytes.Buffer
	if code := run(context.Background(), []string{"simdrive", "--quiet", "--out", drive, "--width", "160", "--height", "90", "--duration-s", "3"}, &out, &errb); code != 0 {
		t.Fatalf("simdrive: %d %s", code, errb.String())
	}
	// A drive without frames: the camera of the good drive, empty tables.
	empty := filepath.Join(dir, "empty")
	if err := os.Mkdir(empty, 0o755); err != nil {
		t.Fatal(err)
	}
	cam, err := os.ReadFile(filepath.Join(drive, "camera.json"))
	if err != nil {
		t.Fatal(err)
	}
	for name, body := range map[string]string{"camera.json": string(cam), "frames.csv": "index,t_capture_us,file\n", "telemetry.csv": "t_us,speed_mps,yaw_rate_rps\n"} {
		if err := os.WriteFile(filepath.Join(empty, name), []byte(body), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	tests := []struct {
		name     string
		args     []string
		wantCode int
		wantErr  string
		wantOut  string
	}{
		{"no drives", []string{"tune", "--out", filepath.Join(dir, "t0")}, 2, "at least one --drive", ""},
		{"tolerance out of range", []string{"tune", "--quiet", "--drive", drive, "--out", filepath.Join(dir, "t1"), "--max-harm-rate", "1.5"}, 1, "maximum harm rate 1.5 out of range", ""},
		{"two tolerances", []string{"tune", "--quiet", "--drive", drive, "--out", filepath.Join(dir, "t2"), "--max-harm-rate", "0.1", "--min-ssim", "0.5"}, 1, "exactly one tolerance", ""},
		{"one arrivals file for two drives", []string{"tune", "--quiet", "--drive", drive, "--drive", drive, "--arrivals", filepath.Join(drive, "arrivals.csv"), "--out", filepath.Join(dir, "t5")}, 1, "--recorded-arrivals", ""},
		{"recorded arrivals missing", []string{"tune", "--quiet", "--drive", drive, "--recorded-arrivals", "--out", filepath.Join(dir, "t6")}, 1, "arrivals.csv", ""},
		{"drive without frames", []string{"tune", "--quiet", "--drive", drive, "--drive", empty, "--out", filepath.Join(dir, "t3")}, 1, "frames", ""},
		{"short drive", []string{"tune", "--quiet", "--drive", drive, "--out", filepath.Join(dir, "t4"), "--loss-rate", "0.3", "--burst-ms", "100", "--resamples", "50"}, 0, "CAUTION", "too little data"},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			var out, errb bytes.Buffer
			code := run(context.Background(), tc.args, &out, &errb)
			if code != tc.wantCode {
				t.Fatalf("exit %d, want %d\nstdout: %s\nstderr: %s", code, tc.wantCode, out.String(), errb.String())
			}
			if !strings.Contains(errb.String(), tc.wantErr) {
				t.Errorf("stderr %q does not contain %q", errb.String(), tc.wantErr)
			}
			if !strings.Contains(out.String(), tc.wantOut) {
				t.Errorf("stdout %q does not contain %q", out.String(), tc.wantOut)
			}
		})
	}
	for _, failed := range []string{"t0", "t1", "t2", "t3", "t5", "t6"} {
		if _, err := os.Stat(filepath.Join(dir, failed)); !os.IsNotExist(err) {
			t.Errorf("failed run left %s (stat: %v)", failed, err)
		}
	}
	for _, f := range []string{"tune.json", "tune.html", "coverage_harm_vs_cutoff.png"} {
		if _, err := os.Stat(filepath.Join(dir, "t4", f)); err != nil {
			t.Errorf("tune report lacks %s: %v", f, err)
		}
	}
}
