package recording

import (
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"strconv"
	"strings"
	"testing"
)

const validCamera = `{
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

const validFrames = "index,t_capture_us,file\n" +
	"0,1000000,frames/000000.jpg\n" +
	"1,1033333,frames/000001.jpg\n" +
	"2,1066667,frames/000002.jpg\n"

const validTelemetry = "t_us,speed_mps,yaw_rate_rps,accel_mps2\n" +
	"990000,10,0.01,\n" +
	"1000000,10.1,0.02,0.5\n" +
	"1010000,10.2,-0.03,0.5\n"

// deleted marks a file to remove in a test case.
const deleted = "\x00deleted"

// writeDir builds a recording directory from the valid files, with
// overrides (content deleted removes the file). Frame images are tiny
// placeholder files; Open does not decode them.
func writeDir(t *testing.T, overrides map[string]string) string {
	t.Helper()
	dir := t.TempDir()
	files := map[string]string{
		CameraFile:          validCamera,
		FramesFile:          validFrames,
		TelemetryFile:       validTelemetry,
		"frames/000000.jpg": "img0",
		"frames/000001.jpg": "img1",
		"frames/000002.jpg": "img2",
	}
	for k, v := range overrides {
		files[k] = v
	}
	for name, content := range files {
		if content == deleted {
			continue
		}
		p := filepath.Join(dir, filepath.FromSlash(name))
		if err := os.MkdirAll(filepath.Dir(p), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(p, []byte(content), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	return dir
}

func TestOpenValid(t *testing.T) {
	dir := writeDir(t, map[string]string{
		ArrivalsFile: "index,t_arrival_us\n1,5000\n0,4000\n2,\n",
		TruthFile: "index,t_capture_us,x_m,y_m,yaw_rad,speed_mps,yaw_rate_rps\n" +
			"0,1000000,0,0,0,10,0\n1,1033333,0.33,0.001,0.002,10,0.05\n2,1066667,0.66,0.002,0.004,10,0.05\n",
	})
	r, err := Open(dir)
	if err != nil {
		t.Fatal(err)
	}
	wantCam := Camera{Width: 640, Height: 360, Fx: 320, Fy: 320, Cx: 320, Cy: 180, HeightM: 1.4, PitchDeg: 5, XOffsetM: 1.2}
	if r.Camera != wantCam {
		t.Errorf("camera = %+v, want %+v", r.Camera, wantCam)
	}
	wantFrames := []Frame{{Index: 0, CaptureUs: 1000000, File: "frames/000000.jpg"}, {Index: 1, CaptureUs: 1033333, File: "frames/000001.jpg"}, {Index: 2, CaptureUs: 1066667, File: "frames/000002.jpg"}}
	if !reflect.DeepEqual(r.Frames, wantFrames) {
		t.Errorf("frames = %+v", r.Frames)
	}
	wantTel := []TelemetryRow{
		{TimeUs: 990000, SpeedMps: 10, YawRateRps: 0.01},
		{TimeUs: 1000000, SpeedMps: 10.1, YawRateRps: 0.02, AccelMps2: 0.5, HasAccel: true},
		{TimeUs: 1010000, SpeedMps: 10.2, YawRateRps: -0.03, AccelMps2: 0.5, HasAccel: true},
	}
	if !reflect.DeepEqual(r.Telemetry, wantTel) {
		t.Errorf("telemetry = %+v", r.Telemetry)
	}
	wantArr := []Arrival{{Index: 1, ArrivalUs: 5000, Arrived: true}, {Index: 0, ArrivalUs: 4000, Arrived: true}, {Index: 2, ArrivalUs: 0, Arrived: false}}
	if !reflect.DeepEqual(r.Arrivals, wantArr) {
		t.Errorf("arrivals = %+v", r.Arrivals)
	}
	if len(r.Truth) != 3 || r.Truth[1].XM != 0.33 || r.Truth[2].YawRateRps != 0.05 {
		t.Errorf("truth = %+v", r.Truth)
	}
	if len(r.Warnings) != 0 || r.DroppedLines != 0 {
		t.Errorf("warnings = %q, dropped %d", r.Warnings, r.DroppedLines)
	}
	p, err := r.FramePath(1)
	if err != nil || p != filepath.Join(dir, "frames", "000001.jpg") {
		t.Errorf("FramePath(1) = %q, %v", p, err)
	}
	if _, err := r.FramePath(3); !errors.Is(err, ErrNoFrames) {
		t.Errorf("FramePath(3) error = %v, want ErrNoFrames", err)
	}
}

func TestOpenTolerated(t *testing.T) {
	tests := []struct {
		name      string
		files     map[string]string
		check     func(t *testing.T, r *Recording)
		wantWarns int
	}{
		{
			name:  "unknown column ignored with warning, any column order",
			files: map[string]string{FramesFile: "file,exposure_us,t_capture_us,index\nframes/000000.jpg,5,10,0\n"},
			check: func(t *testing.T, r *Recording) {
				if len(r.Frames) != 1 || r.Frames[0].CaptureUs != 10 {
					t.Errorf("frames = %+v", r.Frames)
				}
				if !strings.Contains(r.Warnings[0], "exposure_us") {
					t.Errorf("warning %q does not name the column", r.Warnings[0])
				}
			},
			wantWarns: 1,
		},
		{
			name:  "CRLF, BOM and spaces",
			files: map[string]string{TelemetryFile: "\ufefft_us, speed_mps ,yaw_rate_rps\r\n1, 2.5 ,0\r\n2,3,0.1\r\n"},
			check: func(t *testing.T, r *Recording) {
				if len(r.Telemetry) != 2 || r.Telemetry[0].SpeedMps != 2.5 {
					t.Errorf("telemetry = %+v", r.Telemetry)
				}
			},
		},
		{
			name:  "last line without newline that parses is kept",
			files: map[string]string{TelemetryFile: "t_us,speed_mps,yaw_rate_rps\n1,2,0\n2,3,0.1"},
			check: func(t *testing.T, r *Recording) {
				if len(r.Telemetry) != 2 || r.DroppedLines != 0 {
					t.Errorf("telemetry = %+v, dropped %d", r.Telemetry, r.DroppedLines)
				}
			},
		},
		{
			name:  "last line without newline that fails is dropped",
			files: map[string]string{TelemetryFile: "t_us,speed_mps,yaw_rate_rps\n1,2,0\n2,3"},
			check: func(t *testing.T, r *Recording) {
				if len(r.Telemetry) != 1 || r.DroppedLines != 1 {
					t.Errorf("telemetry = %+v, dropped %d", r.Telemetry, r.DroppedLines)
				}
			},
			wantWarns: 1,
		},
		{
			name: "video recording",
			files: map[string]string{
				FramesFile: "index,t_capture_us\n0,0\n1,33333\n", "video.ivf": "DKIF",
			},
			check: func(t *testing.T, r *Recording) {
				if r.VideoFile != "video.ivf" || len(r.Frames) != 2 || r.Frames[1].File != "" {
					t.Errorf("video %q frames %+v", r.VideoFile, r.Frames)
				}
				if _, err := r.FramePath(0); !errors.Is(err, ErrNoFrames) {
					t.Errorf("FramePath on video = %v", err)
				}
			},
		},
		{
			name: "trailing arrivals and truth beyond the last frame dropped",
			files: map[string]string{
				ArrivalsFile: "index,t_arrival_us\n0,1\n2,5\n1,3\n3,7\n4,\n",
				TruthFile: "index,t_capture_us,x_m,y_m,yaw_rad,speed_mps,yaw_rate_rps\n0,1000000,0,0,0,10,0\n" +
					"1,1033333,0,0,0,10,0\n2,1066667,0,0,0,10,0\n3,1100000,0,0,0,10,0\n",
			},
			check: func(t *testing.T, r *Recording) {
				if len(r.Arrivals) != 3 || len(r.Truth) != 3 {
					t.Errorf("arrivals %+v truth %+v", r.Arrivals, r.Truth)
				}
			},
			wantWarns: 2,
		},
		{
			name:  "header only: no frames",
			files: map[string]string{FramesFile: "index,t_capture_us,file\n"},
			check: func(t *testing.T, r *Recording) {
				if len(r.Frames) != 0 {
					t.Errorf("frames = %+v", r.Frames)
				}
			},
		},
		{
			name:  "blank optional telemetry fields",
			files: map[string]string{TelemetryFile: "t_us,speed_mps,yaw_rate_rps,accel_mps2,steer_rad,t_arrival_us\n1,2,0,,,\n2,2,0,0.1,0.02,77\n"},
			check: func(t *testing.T, r *Recording) {
				want := []TelemetryRow{{TimeUs: 1, SpeedMps: 2}, {TimeUs: 2, SpeedMps: 2, AccelMps2: 0.1, HasAccel: true, SteerRad: 0.02, HasSteer: true, ArrivalUs: 77, HasArrival: true}}
				if !reflect.DeepEqual(r.Telemetry, want) {
					t.Errorf("telemetry = %+v", r.Telemetry)
				}
			},
		},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			r, err := Open(writeDir(t, tc.files))
			if err != nil {
				t.Fatal(err)
			}
			if len(r.Warnings) != tc.wantWarns {
				t.Errorf("warnings = %q, want %d", r.Warnings, tc.wantWarns)
			}
			tc.check(t, r)
		})
	}
}

func TestOpenErrors(t *testing.T) {
	cam := func(old, new string) string { return strings.Replace(validCamera, old, new, 1) }
	tel := func(rows string) string { return "t_us,speed_mps,yaw_rate_rps,accel_mps2\n" + rows }
	fr := func(rows string) string { return "index,t_capture_us,file\n" + rows }
	arr := func(rows string) string { return "index,t_arrival_us\n" + rows }
	truth := func(rows string) string { return "index,t_capture_us,x_m,y_m,yaw_rad,speed_mps,yaw_rate_rps\n" + rows }
	tests := []struct {
		name   string
		files  map[string]string
		want   error
		file   string
		line   int // 0: the message must not carry a line
		column int
	}{
		{"camera missing", map[string]string{CameraFile: deleted}, ErrMissingFile, CameraFile, 0, 0},
		{"camera truncated", map[string]string{CameraFile: `{"width": 640,` + "\n"}, ErrCamera, CameraFile, 2, 1},
		{"camera syntax", map[string]string{CameraFile: cam(`"fy": 320,`, `"fy": 320,,`)}, ErrCamera, CameraFile, 5, 13},
		{"camera unknown key", map[string]string{CameraFile: cam(`"pitch_deg"`, `"pitch_dge"`)}, ErrCamera, CameraFile, 9, 3},
		{"camera fx zero", map[string]string{CameraFile: cam(`"fx": 320`, `"fx": 0`)}, ErrCamera, CameraFile, 4, 3},
		{"camera fy negative", map[string]string{CameraFile: cam(`"fy": 320`, `"fy": -1`)}, ErrCamera, CameraFile, 5, 3},
		{"camera width zero", map[string]string{CameraFile: cam(`"width": 640`, `"width": 0`)}, ErrCamera, CameraFile, 2, 3},
		{"camera height negative", map[string]string{CameraFile: cam(`"height": 360`, `"height": -360`)}, ErrCamera, CameraFile, 3, 3},
		{"camera width fractional", map[string]string{CameraFile: cam(`"width": 640`, `"width": 640.5`)}, ErrCamera, CameraFile, 2, 12},
		{"camera cx outside", map[string]string{CameraFile: cam(`"cx": 320`, `"cx": 641`)}, ErrCamera, CameraFile, 6, 3},
		{"camera cy negative", map[string]string{CameraFile: cam(`"cy": 180`, `"cy": -0.5`)}, ErrCamera, CameraFile, 7, 3},
		{"camera key missing", map[string]string{CameraFile: cam(`"cy": 180,`, ``)}, ErrCamera, CameraFile, 13, 1},
		{"camera mount key missing", map[string]string{CameraFile: cam(`"roll_deg": 0,`, ``)}, ErrCamera, CameraFile, 13, 1},
		{"camera height_m zero", map[string]string{CameraFile: cam(`"height_m": 1.4`, `"height_m": 0`)}, ErrCamera, CameraFile, 8, 3},
		{"camera pitch 90", map[string]string{CameraFile: cam(`"pitch_deg": 5`, `"pitch_deg": 90`)}, ErrCamera, CameraFile, 9, 3},
		{"camera trailing data", map[string]string{CameraFile: validCamera + "{}\n"}, ErrCamera, CameraFile, 14, 1},
		{"camera empty", map[string]string{CameraFile: ""}, ErrCamera, CameraFile, 0, 0},

		{"frames missing", map[string]string{FramesFile: deleted}, ErrMissingFile, FramesFile, 0, 0},
		{"frames empty", map[string]string{FramesFile: ""}, ErrEmpty, FramesFile, 1, 0},
		{"frames header truncated", map[string]string{FramesFile: "index,t_cap"}, ErrHeader, FramesFile, 1, 0},
		{"frames missing column", map[string]string{FramesFile: "index,file\n0,frames/000000.jpg\n"}, ErrMissingColumn, FramesFile, 1, 0},
		{"frames duplicate column", map[string]string{FramesFile: "index,t_capture_us,index\n"}, ErrHeader, FramesFile, 1, 3},
		{"frames malformed time", map[string]string{FramesFile: fr("0,1000000,frames/000000.jpg\n1,10x,frames/000001.jpg\n")}, ErrSyntax, FramesFile, 3, 2},
		{"frames fractional index", map[string]string{FramesFile: fr("0.5,1000000,frames/000000.jpg\n")}, ErrSyntax, FramesFile, 2, 1},
		{"frames time equal", map[string]string{FramesFile: fr("0,1000000,frames/000000.jpg\n1,1000000,frames/000001.jpg\n")}, ErrNotIncreasing, FramesFile, 3, 2},
		{"frames time decreasing", map[string]string{FramesFile: fr("0,1000000,frames/000000.jpg\n1,1033333,frames/000001.jpg\n2,1000001,frames/000002.jpg\n")}, ErrNotIncreasing, FramesFile, 4, 2},
		{"frames duplicate index", map[string]string{FramesFile: fr("0,1000000,frames/000000.jpg\n0,1033333,frames/000001.jpg\n")}, ErrIndex, FramesFile, 3, 1},
		{"frames index gap", map[string]string{FramesFile: fr("0,1000000,frames/000000.jpg\n2,1033333,frames/000002.jpg\n")}, ErrIndex, FramesFile, 3, 1},
		{"frames start at 1", map[string]string{FramesFile: fr("1,1000000,frames/000001.jpg\n")}, ErrIndex, FramesFile, 2, 1},
		{"frames negative index", map[string]string{FramesFile: fr("-1,1000000,frames/000001.jpg\n")}, ErrIndex, FramesFile, 2, 1},
		{"frames file missing", map[string]string{"frames/000001.jpg": deleted}, ErrFrameFile, FramesFile, 3, 3},
		{"frames file empty", map[string]string{"frames/000002.jpg": ""}, ErrFrameFile, FramesFile, 4, 3},
		{"frames file outside", map[string]string{FramesFile: fr("0,1,../camera.json\n")}, ErrFrameFile, FramesFile, 2, 3},
		{"frames file absolute", map[string]string{FramesFile: fr("0,1,/etc/passwd\n")}, ErrFrameFile, FramesFile, 2, 3},
		{"frames field count", map[string]string{FramesFile: fr("0,1000000\n")}, ErrFieldCount, FramesFile, 2, 0},
		{"frames empty line", map[string]string{FramesFile: fr("0,1000000,frames/000000.jpg\n\n1,1033333,frames/000001.jpg\n")}, ErrEmptyLine, FramesFile, 3, 0},
		{"frames quote", map[string]string{FramesFile: fr("0,1000000,\"frames/000000.jpg\"\n")}, ErrQuote, FramesFile, 2, 3},
		{"frames no video", map[string]string{FramesFile: "index,t_capture_us\n0,1\n"}, ErrVideo, FramesFile, 1, 0},
		{"frames two videos", map[string]string{FramesFile: "index,t_capture_us\n0,1\n", "video.ivf": "a", "video.mkv": "b"}, ErrVideo, FramesFile, 1, 0},

		{"telemetry missing", map[string]string{TelemetryFile: deleted}, ErrMissingFile, TelemetryFile, 0, 0},
		{"telemetry missing column", map[string]string{TelemetryFile: "t_us,speed_mps\n1,2\n"}, ErrMissingColumn, TelemetryFile, 1, 0},
		{"telemetry NaN", map[string]string{TelemetryFile: tel("1,10,0,\n2,NaN,0,\n")}, ErrNotFinite, TelemetryFile, 3, 2},
		{"telemetry Inf", map[string]string{TelemetryFile: tel("1,10,0,\n2,10,0,+Inf\n")}, ErrNotFinite, TelemetryFile, 3, 4},
		{"telemetry overflow", map[string]string{TelemetryFile: tel("1,10,1e999,\n")}, ErrNotFinite, TelemetryFile, 2, 3},
		{"telemetry malformed", map[string]string{TelemetryFile: tel("1,10,0,\n2,1O,0,\n")}, ErrSyntax, TelemetryFile, 3, 2},
		{"telemetry blank required", map[string]string{TelemetryFile: tel("1,,0,\n")}, ErrBlank, TelemetryFile, 2, 2},
		{"telemetry time equal", map[string]string{TelemetryFile: tel("1,10,0,\n2,10,0,\n2,10,0,\n")}, ErrNotIncreasing, TelemetryFile, 4, 1},
		{"telemetry time decreasing", map[string]string{TelemetryFile: tel("5,10,0,\n4,10,0,\n")}, ErrNotIncreasing, TelemetryFile, 3, 1},
		{"telemetry time fractional", map[string]string{TelemetryFile: tel("5.5,10,0,\n")}, ErrSyntax, TelemetryFile, 2, 1},

		{"arrivals unknown index before known", map[string]string{ArrivalsFile: arr("0,1\n5,2\n1,3\n")}, ErrUnknownIndex, ArrivalsFile, 3, 1},
		{"arrivals negative index", map[string]string{ArrivalsFile: arr("-1,1\n")}, ErrUnknownIndex, ArrivalsFile, 2, 1},
		{"arrivals duplicate", map[string]string{ArrivalsFile: arr("0,1\n1,2\n0,3\n")}, ErrIndex, ArrivalsFile, 4, 1},
		{"arrivals malformed", map[string]string{ArrivalsFile: arr("0,1.5\n")}, ErrSyntax, ArrivalsFile, 2, 2},
		{"arrivals missing column", map[string]string{ArrivalsFile: "index\n0\n"}, ErrMissingColumn, ArrivalsFile, 1, 0},

		{"truth time mismatch", map[string]string{TruthFile: truth("0,1000000,0,0,0,10,0\n1,1033334,0,0,0,10,0\n")}, ErrMismatch, TruthFile, 3, 2},
		{"truth gap", map[string]string{TruthFile: truth("0,1000000,0,0,0,10,0\n2,1066667,0,0,0,10,0\n")}, ErrIndex, TruthFile, 3, 1},
		{"truth NaN", map[string]string{TruthFile: truth("0,1000000,0,nan,0,10,0\n")}, ErrNotFinite, TruthFile, 2, 4},
	}
	for _, tc := range tests {
		t.Run(tc.name, func(t *testing.T) {
			dir := writeDir(t, tc.files)
			_, err := Open(dir)
			if err == nil {
				t.Fatal("Open succeeded, want an error")
			}
			if !errors.Is(err, tc.want) {
				t.Errorf("error %v does not wrap %v", err, tc.want)
			}
			var pe *ParseError
			if !errors.As(err, &pe) {
				t.Fatalf("error %T %v is not a *ParseError", err, err)
			}
			if pe.File != filepath.Join(dir, tc.file) || pe.Line != tc.line || pe.Column != tc.column {
				t.Errorf("at %s:%d:%d, want %s:%d:%d (%v)", pe.File, pe.Line, pe.Column, tc.file, tc.line, tc.column, err)
			}
			msg := err.Error()
			if !strings.Contains(msg, tc.file) {
				t.Errorf("message %q does not name %s", msg, tc.file)
			}
			if tc.line > 0 && !strings.Contains(msg, "line "+strconv.Itoa(tc.line)) {
				t.Errorf("message %q does not name line %d", msg, tc.line)
			}
		})
	}
}

func TestReadArrivals(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "lossy.csv")
	if err := os.WriteFile(p, []byte("index,t_arrival_us\n0,100\n7,\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	got, err := ReadArrivals(p)
	if err != nil {
		t.Fatal(err)
	}
	if want := []Arrival{{Index: 0, ArrivalUs: 100, Arrived: true}, {Index: 7, ArrivalUs: 0, Arrived: false}}; !reflect.DeepEqual(got, want) {
		t.Errorf("got %+v, want %+v", got, want)
	}
	// The same file against a 3-frame recording: index 7 is unknown.
	r, err := Open(writeDir(t, nil))
	if err != nil {
		t.Fatal(err)
	}
	err = r.LoadArrivals(p)
	var pe *ParseError
	if !errors.Is(err, ErrUnknownIndex) || !errors.As(err, &pe) || pe.Line != 3 || pe.File != p {
		t.Errorf("LoadArrivals error = %v, want ErrUnknownIndex at %s line 3", err, p)
	}
	// A standalone file has no warnings channel: an incomplete last line is an error.
	if err := os.WriteFile(p, []byte("index,t_arrival_us\n0,100\n1,x"), 0o644); err != nil {
		t.Fatal(err)
	}
	if _, err := ReadArrivals(p); !errors.Is(err, ErrSyntax) {
		t.Errorf("ReadArrivals of cut file = %v, want ErrSyntax", err)
	}
	if _, err := ReadArrivals(filepath.Join(dir, "absent.csv")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("ReadArrivals of absent file = %v", err)
	}
}
