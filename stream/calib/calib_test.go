package calib

import (
	"errors"
	"fmt"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"stopgap/internal/camera"
	"stopgap/stream/recording"
)

// The calibration sample's own output, shipped by Debian's opencv-doc.
const openCVSample = "/usr/share/doc/opencv-doc/examples/data/left_intrinsics.yml"

// wantSample is the camera of openCVSample: the values as printed in the
// file (camera_matrix and the five distortion_coefficients).
var wantSample = camera.Camera{
	Width: 640, Height: 480,
	Fx: 5.3591573396163199e+02, Fy: 5.3591573396163199e+02, Cx: 3.4228315473308373e+02, Cy: 2.3557082909788173e+02,
	K1: -2.6637260909660682e-01, K2: -3.8588898922304653e-02, P1: 1.7831947042852964e-03, P2: -2.8122100441115472e-04, K3: 2.3839153080878486e-01,
}

func TestReadFile(t *testing.T) {
	for _, tc := range []struct {
		path   string
		format Format
		want   camera.Camera
	}{
		{openCVSample, FormatOpenCVYAML, wantSample},
		// Written by cv::FileStorage from the same file (testdata/opencv_convert.cpp).
		{"testdata/left_intrinsics.xml", FormatOpenCVXML, wantSample},
		// The layout of the ROS camera calibration tools (hand-written).
		{"testdata/ros_camera_info.yaml", FormatROSYAML, camera.Camera{Width: 1280, Height: 720,
			Fx: 905.5, Fy: 903.75, Cx: 641.25, Cy: 362.5, K1: -0.31, K2: 0.12, P1: 0.0004, P2: -0.0002}},
	} {
		t.Run(filepath.Base(tc.path), func(t *testing.T) {
			cam, format, err := ReadFile(tc.path)
			if err != nil {
				t.Fatal(err)
			}
			if format != tc.format || cam != tc.want {
				t.Fatalf("got %v %+v\nwant %v %+v", format, cam, tc.format, tc.want)
			}
		})
	}
}

func TestParseErrors(t *testing.T) {
	sample, err := os.ReadFile(openCVSample)
	if err != nil {
		t.Fatal(err)
	}
	ros, err := os.ReadFile("testdata/ros_camera_info.yaml")
	if err != nil {
		t.Fatal(err)
	}
	xmlSample, err := os.ReadFile("testdata/left_intrinsics.xml")
	if err != nil {
		t.Fatal(err)
	}
	aruco, err := os.ReadFile("/usr/share/doc/opencv-doc/examples/aruco/tutorial_camera_params.yml")
	if err != nil {
		t.Fatal(err)
	}
	replace := func(b []byte, old, new string) []byte {
		if !strings.Contains(string(b), old) {
			t.Fatalf("fixture lacks %q", old)
		}
		return []byte(strings.Replace(string(b), old, new, 1))
	}
	for _, tc := range []struct {
		name string
		data []byte
		want error
		key  string
		line int
	}{
		// opencv-doc's ArUco example has no image size: say so.
		{"no image size", aruco, ErrMissing, "image_width, image_height", 0},
		{"no camera matrix", replace(ros, "camera_matrix:", "camera_matrx:"), ErrMissing, "camera_matrix", 0},
		{"no distortion", replace(ros, "distortion_coefficients:", "distortion:"), ErrMissing, "distortion_coefficients", 0},
		{"fisheye", replace(ros, "plumb_bob", "equidistant"), ErrValue, "distortion_coefficients", 10},
		{"short data", replace(ros, "0, 0, 1]", "0, 1]"), ErrValue, "camera_matrix.data", 7},
		{"not a number", replace(ros, "641.25, 0", "641.25, x"), ErrValue, "camera_matrix.data[3]", 7},
		{"skew", replace(ros, "905.5, 0, 641.25, 0, 903.75", "905.5, 2, 641.25, 0, 903.75"), ErrValue, "camera_matrix", 5},
		{"zero width", replace(ros, "image_width: 1280", "image_width: 0"), ErrValue, "image_width", 1},
		{"OpenCV dt", replace(sample, "dt: d", "dt: u"), ErrValue, "camera_matrix.dt", 11},
		{"OpenCV count mismatch", replace(sample, "rows: 5", "rows: 6"), ErrValue, "distortion_coefficients.data", 21},
		{"rational with k4", replace(replace(ros, "plumb_bob", "rational_polynomial"), "cols: 5\n  data: [-0.31, 0.12, 0.0004, -0.0002, 0]", "cols: 8\n  data: [-0.31, 0.12, 0.0004, -0.0002, 0, 0.1, 0, 0]"), ErrValue, "distortion_coefficients", 10},
		{"rational, k4..k6 zero", replace(replace(ros, "plumb_bob", "rational_polynomial"), "cols: 5\n  data: [-0.31, 0.12, 0.0004, -0.0002, 0]", "cols: 8\n  data: [-0.31, 0.12, 0.0004, -0.0002, 0, 0, 0, 0]"), nil, "", 0},
		{"XML missing data", replace(xmlSample, "<rows>3</rows>", "<rows>4</rows>"), ErrValue, "camera_matrix", 11},
		{"XML wrong root", replace(replace(xmlSample, "<opencv_storage>", "<storage>"), "</opencv_storage>", "</storage>"), ErrFormat, "storage", 2},
		{"XML broken", xmlSample[:200], ErrFormat, "", 0},
		{"empty", nil, ErrFormat, "", 0},
		{"YAML list", []byte("- 1\n- 2\n"), ErrFormat, "", 0},
	} {
		t.Run(tc.name, func(t *testing.T) {
			_, _, err := Parse("cal.yml", tc.data)
			if tc.want == nil {
				if err != nil {
					t.Fatal(err)
				}
				return
			}
			var pe *ParseError
			if !errors.As(err, &pe) || !errors.Is(err, tc.want) {
				t.Fatalf("err = %v, want a *ParseError wrapping %v", err, tc.want)
			}
			if pe.File != "cal.yml" || pe.Key != tc.key || (tc.line > 0 && pe.Line != tc.line) {
				t.Fatalf("err = %v: file %q key %q line %d, want key %q line %d", err, pe.File, pe.Key, pe.Line, tc.key, tc.line)
			}
		})
	}
}

// ExampleReadFile converts OpenCV's calibration sample output into a
// camera.json (with the mount set by hand).
func ExampleReadFile() {
	cam, format, err := ReadFile(openCVSample)
	if err != nil {
		fmt.Println(err)
		return
	}
	cam.HeightM, cam.PitchDeg, cam.XOffsetM = 1.4, 5, 1.5
	path := filepath.Join(os.TempDir(), "camera-example.json")
	defer os.Remove(path)
	if err := recording.WriteCameraFile(path, cam); err != nil {
		fmt.Println(err)
		return
	}
	back, err := camera.ReadFile(path)
	fmt.Println(format, back == cam, err)
	// Output: OpenCV YAML true <nil>
}
