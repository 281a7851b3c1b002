package recording

import (
	"bytes"
	"errors"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"reflect"
	"testing"
)

var testCam = Camera{Width: 320, Height: 180, Fx: 160, Fy: 160, Cx: 160, Cy: 90, HeightM: 1.4, PitchDeg: 5, XOffsetM: 1.5}

// writeSample records n frames with telemetry between them, an arrival per
// frame (every third never arrived) and truth.
func writeSample(t *testing.T, dir string, n int) {
	t.Helper()
	w, err := Create(dir, testCam)
	if err != nil {
		t.Fatal(err)
	}
	for i := 0; i < n; i++ {
		us := int64(i) * 33333
		for k := int64(0); k < 3; k++ {
			row := TelemetryRow{TimeUs: us + k*11111, SpeedMps: 10 + 0.1*float64(i), YawRateRps: -0.02 * float64(k), AccelMps2: 0.3, HasAccel: k != 1, HasArrival: true, ArrivalUs: 500000 + us + k*11111}
			if err := w.WriteTelemetry(row); err != nil {
				t.Fatal(err)
			}
		}
		if err := w.WriteFrame(i, us, []byte{0xFF, 0xD8, byte(i)}, "jpg"); err != nil {
			t.Fatal(err)
		}
		if err := w.WriteArrival(i, 600000+us, i%3 != 2); err != nil {
			t.Fatal(err)
		}
		if err := w.WriteTruth(Truth{Index: i, CaptureUs: us, XM: 0.1 * float64(i), YM: 1.0 / 3, YawRad: 1e-3 * float64(i), SpeedMps: 10, YawRateRps: math.Pi / 100}); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
}

func TestWriterRoundTrip(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "rec")
	writeSample(t, dir, 5)
	r, err := Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	if r.Camera != testCam {
		t.Errorf("camera = %+v, want %+v", r.Camera, testCam)
	}
	if len(r.Frames) != 5 || len(r.Telemetry) != 15 || len(r.Arrivals) != 5 || len(r.Truth) != 5 {
		t.Fatalf("counts frames %d telemetry %d arrivals %d truth %d", len(r.Frames), len(r.Telemetry), len(r.Arrivals), len(r.Truth))
	}
	if len(r.Warnings) != 0 {
		t.Errorf("warnings %q", r.Warnings)
	}
	for i, f := range r.Frames {
		p, err := r.FramePath(i)
		if err != nil {
			t.Fatal(err)
		}
		b, err := os.ReadFile(p)
		if err != nil || !bytes.Equal(b, []byte{0xFF, 0xD8, byte(i)}) {
			t.Errorf("frame %d file %s = %v, %v", i, f.File, b, err)
		}
		if f.CaptureUs != int64(i)*33333 {
			t.Errorf("frame %d capture %d", i, f.CaptureUs)
		}
	}
	wantRow := TelemetryRow{TimeUs: 4*33333 + 11111, SpeedMps: 10.4, YawRateRps: -0.02, HasArrival: true, ArrivalUs: 500000 + 4*33333 + 11111}
	if got := r.Telemetry[13]; got != wantRow {
		t.Errorf("telemetry[13] = %+v, want %+v", got, wantRow)
	}
	if got := r.Arrivals[2]; got != (Arrival{Index: 2, CaptureUs: 2 * 33333, HasCapture: true}) {
		t.Errorf("arrival 2 = %+v, want never arrived", got)
	}
	if got := r.Truth[4]; got.YM != 1.0/3 || got.YawRateRps != math.Pi/100 {
		t.Errorf("truth floats not exact: %+v", got)
	}
}

// TestWriterKilled simulates a writer killed mid-line: every CSV file is cut
// at every byte position inside its last line, and Open must read the
// directory up to the last complete row.
func TestWriterKilled(t *testing.T) {
	const n = 4
	src := filepath.Join(t.TempDir(), "rec")
	writeSample(t, src, n)
	for _, name := range []string{FramesFile, TelemetryFile, ArrivalsFile, TruthFile} {
		full, err := os.ReadFile(filepath.Join(src, name))
		if err != nil {
			t.Fatal(err)
		}
		lastStart := bytes.LastIndexByte(full[:len(full)-1], '\n') + 1
		for cut := lastStart; cut < len(full); cut++ {
			t.Run(fmt.Sprintf("%s/cut%d", name, cut-lastStart), func(t *testing.T) {
				dir := copyDir(t, src)
				if err := os.WriteFile(filepath.Join(dir, name), full[:cut], 0o644); err != nil {
					t.Fatal(err)
				}
				r, err := Open(dir)
				if err != nil {
					t.Fatalf("cut %s at byte %d (%q): %v", name, cut, full[lastStart:cut], err)
				}
				partial := string(full[lastStart:cut])
				switch name {
				case FramesFile:
					// Only the complete line can parse; a shorter prefix
					// either lacks a field or names a missing file.
					// Only the line without its newline parses; a shorter
					// prefix lacks a field or names a missing file.
					want := n - 1
					if cut == len(full)-1 {
						want = n
					}
					if len(r.Frames) != want {
						t.Errorf("frames %d, want %d (cut %q)", len(r.Frames), want, partial)
					}
					if wantDrop := cut > lastStart && want == n-1; (r.DroppedLines == 1) != wantDrop {
						t.Errorf("dropped %d lines (cut %q)", r.DroppedLines, partial)
					}
					// Arrivals and truth for a lost frame are dropped with a warning.
					if len(r.Arrivals) != want || len(r.Truth) != want {
						t.Errorf("arrivals %d truth %d, want %d", len(r.Arrivals), len(r.Truth), want)
					}
				case TelemetryFile:
					if got := len(r.Telemetry); got != 3*n-1 && got != 3*n {
						t.Errorf("telemetry %d rows", got)
					}
				case ArrivalsFile:
					if got := len(r.Arrivals); got != n-1 && got != n {
						t.Errorf("arrivals %d rows", got)
					}
				case TruthFile:
					if got := len(r.Truth); got != n-1 && got != n {
						t.Errorf("truth %d rows", got)
					}
				}
				if len(r.Frames) < n-1 {
					t.Errorf("lost complete frames: %d", len(r.Frames))
				}
			})
		}
	}
}

// TestWriterKilledBetweenImageAndLine: an image renamed into place without
// its CSV line is not part of the recording, and a leftover temp file is
// ignored.
func TestWriterKilledBetweenImageAndLine(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "rec")
	writeSample(t, dir, 2)
	for _, orphan := range []string{"frames/000002.jpg", "frames/.000003.jpg.tmp123"} {
		if err := os.WriteFile(filepath.Join(dir, filepath.FromSlash(orphan)), []byte("x"), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	r, err := Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	if len(r.Frames) != 2 {
		t.Errorf("frames = %d, want 2", len(r.Frames))
	}
}

func TestWriterErrors(t *testing.T) {
	dir := filepath.Join(t.TempDir(), "rec")
	w, err := Create(dir, testCam)
	if err != nil {
		t.Fatal(err)
	}
	if _, err := Create(dir, testCam); !errors.Is(err, ErrExists) {
		t.Errorf("second Create = %v, want ErrExists", err)
	}
	if _, err := Create(filepath.Join(dir, "x"), Camera{Width: 10, Height: 10, Fx: 0, Fy: 1}); !errors.Is(err, ErrCamera) {
		t.Errorf("Create with fx=0 = %v, want ErrCamera", err)
	}
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	must(w.WriteFrame(0, 100, []byte("a"), ".png"))
	must(w.WriteTelemetry(TelemetryRow{TimeUs: 5}))
	tests := []struct {
		name string
		err  error
		want error
	}{
		{"frame index skips", w.WriteFrame(2, 200, []byte("a"), "png"), ErrOrder},
		{"frame index repeats", w.WriteFrame(0, 200, []byte("a"), "png"), ErrOrder},
		{"frame time repeats", w.WriteFrame(1, 100, []byte("a"), "png"), ErrOrder},
		{"frame empty", w.WriteFrame(1, 200, nil, "png"), ErrValue},
		{"frame bad ext", w.WriteFrame(1, 200, []byte("a"), "p/g"), ErrValue},
		{"telemetry time repeats", w.WriteTelemetry(TelemetryRow{TimeUs: 5}), ErrOrder},
		{"telemetry NaN", w.WriteTelemetry(TelemetryRow{TimeUs: 6, SpeedMps: math.NaN()}), ErrValue},
		{"arrival before frame", w.WriteArrival(1, 7, true), ErrOrder},
		{"truth before frame", w.WriteTruth(Truth{Index: 1, CaptureUs: 200}), ErrOrder},
		{"truth time mismatch", w.WriteTruth(Truth{Index: 0, CaptureUs: 101}), ErrOrder},
		{"truth Inf", w.WriteTruth(Truth{Index: 0, CaptureUs: 100, XM: math.Inf(1)}), ErrValue},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			if !errors.Is(tc.err, tc.want) {
				t.Errorf("error %v, want %v", tc.err, tc.want)
			}
		})
	}
	must(w.WriteArrival(0, 7, true))
	if err := w.WriteArrival(0, 8, true); !errors.Is(err, ErrOrder) {
		t.Errorf("duplicate arrival = %v, want ErrOrder", err)
	}
	must(w.Close())
	if err := w.WriteFrame(1, 200, []byte("a"), "png"); !errors.Is(err, ErrClosed) {
		t.Errorf("write after close = %v", err)
	}
	if err := w.Close(); !errors.Is(err, ErrClosed) {
		t.Errorf("second close = %v", err)
	}
	// Nothing rejected reached the files.
	r, err := Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	want := &Recording{Dir: dir, Camera: testCam, Frames: []Frame{{Index: 0, CaptureUs: 100, File: "frames/000000.png"}},
		Telemetry: []TelemetryRow{{TimeUs: 5}}, Arrivals: []Arrival{{Index: 0, ArrivalUs: 7, Arrived: true, CaptureUs: 100, HasCapture: true}}}
	if !reflect.DeepEqual(r, want) {
		t.Errorf("got %+v\nwant %+v", r, want)
	}
}

// copyDir copies a flat-or-one-level recording directory.
func copyDir(t *testing.T, src string) string {
	t.Helper()
	dst := t.TempDir()
	err := filepath.WalkDir(src, func(p string, d os.DirEntry, err error) error {
		if err != nil {
			return err
		}
		rel, _ := filepath.Rel(src, p)
		if d.IsDir() {
			return os.MkdirAll(filepath.Join(dst, rel), 0o755)
		}
		b, err := os.ReadFile(p)
		if err != nil {
			return err
		}
		return os.WriteFile(filepath.Join(dst, rel), b, 0o644)
	})
	if err != nil {
		t.Fatal(err)
	}
	return dst
}
