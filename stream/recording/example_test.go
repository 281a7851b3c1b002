package recording_test

import (
	"errors"
	"fmt"
	"log"
	"os"
	"path/filepath"

	"stopgap/stream/recording"
)

// Example records two frames with telemetry and reads them back.
func Example() {
	tmp, err := os.MkdirTemp("", "recording-example")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(tmp)
	dir := filepath.Join(tmp, "drive")

	cam := recording.Camera{Width: 1280, Height: 720, Fx: 640, Fy: 640, Cx: 640, Cy: 360, HeightM: 1.4, PitchDeg: 5}
	w, err := recording.Create(dir, cam)
	if err != nil {
		log.Fatal(err)
	}
	for i := 0; i < 2; i++ {
		tUs := int64(i) * 33333
		if err := w.WriteTelemetry(recording.TelemetryRow{TimeUs: tUs, SpeedMps: 10, YawRateRps: 0.05}); err != nil {
			log.Fatal(err)
		}
		jpeg := []byte{0xFF, 0xD8, 0xFF, 0xD9} // the caller's encoded image
		if err := w.WriteFrame(i, tUs, jpeg, "jpg"); err != nil {
			log.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		log.Fatal(err)
	}

	r, err := recording.Open(dir)
	if err != nil {
		log.Fatal(err)
	}
	for _, f := range r.Frames {
		fmt.Println(f.Index, f.CaptureUs, f.File)
	}
	fmt.Println(len(r.Telemetry), "telemetry rows,", len(r.Warnings), "warnings")
	// Output:
	// 0 0 frames/000000.jpg
	// 1 33333 frames/000001.jpg
	// 2 telemetry rows, 0 warnings
}

// ExampleParseError shows how a bad file is reported.
func ExampleParseError() {
	tmp, err := os.MkdirTemp("", "recording-example")
	if err != nil {
		log.Fatal(err)
	}
	defer os.RemoveAll(tmp)
	write := func(name, content string) {
		if err := os.WriteFile(filepath.Join(tmp, name), []byte(content), 0o644); err != nil {
			log.Fatal(err)
		}
	}
	write("camera.json", `{"width":640,"height":360,"fx":320,"fy":320,"cx":320,"cy":180,"height_m":1.4,"pitch_deg":5,"roll_deg":0,"x_offset_m":1.5,"y_offset_m":0}`)
	write("frames.csv", "index,t_capture_us\n0,0\n1,0\n")
	write("video.ivf", "DKIF")
	write("telemetry.csv", "t_us,speed_mps,yaw_rate_rps\n")

	_, err = recording.Open(tmp)
	var pe *recording.ParseError
	if errors.As(err, &pe) {
		fmt.Println(filepath.Base(pe.File), pe.Line, pe.Column, errors.Is(err, recording.ErrNotIncreasing))
	}
	// Output: frames.csv 3 2 true
}
