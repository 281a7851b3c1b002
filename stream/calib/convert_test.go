package calib

import (
	"errors"
	"testing"
)

func TestFromKD(t *testing.T) {
	k := [9]float64{500, 0, 320, 0, 510, 240, 0, 0, 1}
	for _, tc := range []struct {
		name  string
		model string
		d     []float64
		want  [5]float64
		err   error
	}{
		{"plumb_bob 5", "plumb_bob", []float64{0.1, 0.2, 0.3, 0.4, 0.5}, [5]float64{0.1, 0.2, 0.3, 0.4, 0.5}, nil},
		{"plumb_bob 4 (OpenCV's shortest)", "plumb_bob", []float64{0.1, 0.2, 0.3, 0.4}, [5]float64{0.1, 0.2, 0.3, 0.4, 0}, nil},
		{"OpenCV 8 with zero k4..k6", "plumb_bob", []float64{0.1, 0.2, 0.3, 0.4, 0.5, 0, 0, 0}, [5]float64{0.1, 0.2, 0.3, 0.4, 0.5}, nil},
		{"rational with zero k4..k6", "rational_polynomial", []float64{0.1, 0.2, 0.3, 0.4, 0.5, 0, 0, 0}, [5]float64{0.1, 0.2, 0.3, 0.4, 0.5}, nil},
		{"rational with k4", "rational_polynomial", []float64{0.1, 0.2, 0.3, 0.4, 0.5, 0.6, 0, 0}, [5]float64{}, ErrValue},
		{"fisheye", "equidistant", []float64{0.1, 0.2, 0.3, 0.4}, [5]float64{}, ErrValue},
		{"fisheye without distortion", "equidistant", []float64{0, 0, 0, 0}, [5]float64{}, nil},
		{"none", "", nil, [5]float64{}, nil},
	} {
		t.Run(tc.name, func(t *testing.T) {
			cam, _, err := FromKD(640, 480, k, tc.model, tc.d)
			if !errors.Is(err, tc.err) || (tc.err == nil) != (err == nil) {
				t.Fatalf("err = %v, want %v", err, tc.err)
			}
			if err != nil {
				return
			}
			got := [5]float64{cam.K1, cam.K2, cam.P1, cam.P2, cam.K3}
			if got != tc.want || cam.Fx != 500 || cam.Fy != 510 || cam.Cx != 320 || cam.Cy != 240 {
				t.Fatalf("got %+v", cam)
			}
		})
	}
	if _, key, err := FromKD(640, 480, [9]float64{500, 1, 320, 0, 510, 240, 0, 0, 1}, "", nil); !errors.Is(err, ErrValue) || key != "camera_matrix" {
		t.Fatalf("skew: key %q err %v", key, err)
	}
}
