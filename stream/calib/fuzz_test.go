package calib

import (
	"fmt"
	"os"
	"strconv"
	"strings"
	"testing"

	"stopgap/internal/camera"
)

// writeAs renders cam in format with every number in its shortest exact
// form, independently of the parser (the layouts of the package doc).
func writeAs(format Format, cam camera.Camera) []byte {
	g := func(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
	k := []string{g(cam.Fx), "0", g(cam.Cx), "0", g(cam.Fy), g(cam.Cy), "0", "0", "1"}
	d := []string{g(cam.K1), g(cam.K2), g(cam.P1), g(cam.P2), g(cam.K3)}
	switch format {
	case FormatOpenCVXML:
		return []byte(fmt.Sprintf(`<?xml version="1.0"?>
<opencv_storage>
<image_width>%d</image_width>
<image_height>%d</image_height>
<camera_matrix type_id="opencv-matrix"><rows>3</rows><cols>3</cols><dt>d</dt>
  <data>%s</data></camera_matrix>
<distortion_coefficients type_id="opencv-matrix"><rows>5</rows><cols>1</cols><dt>d</dt>
  <data>%s</data></distortion_coefficients>
</opencv_storage>
`, cam.Width, cam.Height, strings.Join(k, " "), strings.Join(d, " ")))
	case FormatOpenCVYAML:
		return []byte(fmt.Sprintf("%%YAML:1.0\n---\nimage_width: %d\nimage_height: %d\ncamera_matrix: !!opencv-matrix\n   rows: 3\n   cols: 3\n   dt: d\n   data: [ %s ]\ndistortion_coefficients: !!opencv-matrix\n   rows: 5\n   cols: 1\n   dt: d\n   data: [ %s ]\n",
			cam.Width, cam.Height, strings.Join(k, ", "), strings.Join(d, ", ")))
	default:
		return []byte(fmt.Sprintf("image_width: %d\nimage_height: %d\ncamera_matrix:\n  rows: 3\n  cols: 3\n  data: [%s]\ndistortion_model: plumb_bob\ndistortion_coefficients:\n  rows: 1\n  cols: 5\n  data: [%s]\n",
			cam.Width, cam.Height, strings.Join(k, ", "), strings.Join(d, ", ")))
	}
}

// FuzzParse feeds arbitrary files to the parser. Property (not enforced by
// the parser itself): a file it accepts describes a camera that, written
// out again in the same layout by writeAs, parses to the same camera, and
// the camera passes Camera.ValidateIntrinsics (a calibration has no mount).
func FuzzParse(f *testing.F) {
	for _, p := range []string{openCVSample, "testdata/left_intrinsics.xml", "testdata/ros_camera_info.yaml"} {
		b, err := os.ReadFile(p)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(b)
	}
	f.Add([]byte("image_width: 4\nimage_height: 4\ncamera_matrix: {rows: 3, cols: 3, data: [1,0,2,0,1,2,0,0,1]}\ndistortion_coefficients: {rows: 1, cols: 0, data: []}\n"))
	f.Add([]byte("<opencv_storage><image_width>1</image_width></opencv_storage>"))
	f.Fuzz(func(t *testing.T, data []byte) {
		cam, format, err := Parse("fuzz", data)
		if err != nil {
			if _, ok := err.(*ParseError); !ok {
				t.Fatalf("error %v is not a *ParseError", err)
			}
			return
		}
		if err := cam.ValidateIntrinsics(); err != nil {
			t.Fatalf("accepted an invalid camera: %v", err)
		}
		again, format2, err := Parse("again", writeAs(format, cam))
		if err != nil || format2 != format || again != cam {
			t.Fatalf("round trip through %v: %+v -> %+v (%v, %v)", format, cam, again, format2, err)
		}
	})
}
