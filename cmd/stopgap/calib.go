package main

import (
	"context"
	"errors"
	"flag"
	"fmt"
	"io"
	iofs "io/fs"
	"os"

	"stopgap/stream/calib"
	"stopgap/stream/recording"
	"stopgap/stream/ros2"
)

// mountFlags are the camera mount flags shared by "import" and "camera".
type mountFlags struct {
	m ros2.Mount
}

func (f *mountFlags) register(fs *flag.FlagSet) {
	fs.Float64Var(&f.m.HeightM, "height-m", 0, "camera mount: height of the camera centre above the road, m")
	fs.Float64Var(&f.m.PitchDeg, "pitch-deg", 0, "camera mount: downward tilt of the optical axis, degrees")
	fs.Float64Var(&f.m.RollDeg, "roll-deg", 0, "camera mount: roll about the optical axis, degrees, positive turns the right side down")
	fs.Float64Var(&f.m.XOffsetM, "x-offset-m", 0, "camera mount: camera centre ahead of the vehicle origin, m")
	fs.Float64Var(&f.m.YOffsetM, "y-offset-m", 0, "camera mount: camera centre left of the vehicle origin, m")
}

// given returns the mount if any mount flag was set on fs, else nil.
func (f *mountFlags) given(fs *flag.FlagSet) *ros2.Mount {
	var set bool
	fs.Visit(func(fl *flag.Flag) {
		switch fl.Name {
		case "height-m", "pitch-deg", "roll-deg", "x-offset-m", "y-offset-m":
			set = true
		}
	})
	if !set {
		return nil
	}
	m := f.m
	return &m
}

func runCamera(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("camera", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var in, out string
	var overwrite bool
	var mf mountFlags
	fs.StringVar(&in, "calibration", "", "calibration `file`: OpenCV FileStorage (.yml/.yaml/.xml) or ROS camera_info YAML (required)")
	fs.StringVar(&out, "out", "", "camera.json `file` to write (required)")
	fs.BoolVar(&overwrite, "overwrite", false, "replace an existing --out file")
	mf.register(fs)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap camera --calibration FILE --out camera.json --height-m H --pitch-deg P [flags]")
		fmt.Fprintln(stderr, "\nWrites a camera.json from a camera calibration file (OpenCV's calibration")
		fmt.Fprintln(stderr, "sample output, YAML or XML, or a ROS camera_info YAML) and the mount flags.")
		fmt.Fprintln(stderr)
		fs.PrintDefaults()
	}
	if err := parse(fs, args); err != nil {
		return err
	}
	if in == "" || out == "" {
		fmt.Fprintln(stderr, "stopgap camera: --calibration and --out are required")
		fs.Usage()
		return errUsage
	}
	m := mf.given(fs)
	if m == nil {
		fmt.Fprintln(stderr, "stopgap camera: give the camera mount: at least --height-m (and --pitch-deg, --roll-deg, --x-offset-m, --y-offset-m as measured); a calibration file has no mount")
		return errUsage
	}
	if !overwrite {
		if _, err := os.Stat(out); err == nil {
			return fmt.Errorf("%s exists; choose another --out or pass --overwrite", out)
		} else if !errors.Is(err, iofs.ErrNotExist) {
			return err
		}
	}
	cam, format, err := calib.ReadFile(in)
	if err != nil {
		return err
	}
	cam.HeightM, cam.PitchDeg, cam.RollDeg, cam.XOffsetM, cam.YOffsetM = m.HeightM, m.PitchDeg, m.RollDeg, m.XOffsetM, m.YOffsetM
	if err := recording.WriteCameraFile(out, cam); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "camera written: %s (%dx%d, fx %.2f fy %.2f, from %s)\n", out, cam.Width, cam.Height, cam.Fx, cam.Fy, format)
	return nil
}
