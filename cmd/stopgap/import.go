package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"text/tabwriter"

	"gocv.io/x/gocv"

	"stopgap/bench"
	"stopgap/stream/calib"
	"stopgap/stream/recording"
	"stopgap/stream/ros2"
)

func runImport(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("import", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var in, out string
	var list, quiet, logJSON bool
	var calibration string
	var opts ros2.ImportOptions
	var mf mountFlags
	fs.StringVar(&in, "mcap", "", "ROS 2 recording `file` (MCAP, CDR messages) to read (required)")
	fs.StringVar(&out, "out", "", "recording `directory` to create (required unless --list)")
	fs.BoolVar(&list, "list", false, "only list the file's topics, types and message counts")
	fs.StringVar(&opts.ImageTopic, "image-topic", "", "sensor_msgs/msg/CompressedImage or Image topic (default: the only one)")
	fs.StringVar(&opts.CameraInfoTopic, "camera-info-topic", "", "sensor_msgs/msg/CameraInfo topic (default: the only one)")
	fs.StringVar(&calibration, "calibration", "", "camera calibration `file` (OpenCV YAML/XML or ROS camera_info YAML) to use instead of a CameraInfo topic")
	fs.StringVar(&opts.TelemetryTopic, "telemetry-topic", "", "nav_msgs/msg/Odometry or geometry_msgs/msg/TwistStamped topic (default: the only one)")
	fs.StringVar(&opts.ImuTopic, "imu-topic", "", "sensor_msgs/msg/Imu topic for yaw rate and acceleration (default: the only one, if any; - for none)")
	fs.StringVar(&opts.TFStaticTopic, "tf-static-topic", ros2.DefaultTFStaticTopic, "static transforms topic the camera mount is read from")
	fs.StringVar(&opts.BaseFrame, "base-frame", ros2.DefaultBaseFrame, "vehicle frame (origin on the ground under the rotation centre)")
	mf.register(fs) // any mount flag replaces the mount from the transforms
	fs.BoolVar(&quiet, "quiet", false, "no progress bar")
	fs.BoolVar(&logJSON, "log-json", false, "write logs as JSON")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap import --mcap FILE (--list | --out DIR) [flags]")
		fmt.Fprintln(stderr, "\nConverts a ROS 2 recording (MCAP) into a stopgap recording: frames from an")
		fmt.Fprintln(stderr, "image topic, the camera from CameraInfo and the mount from /tf_static (or the")
		fmt.Fprintln(stderr, "mount flags), telemetry from Odometry or TwistStamped (+ Imu yaw rate).")
		fmt.Fprintln(stderr)
		fs.PrintDefaults()
	}
	if err := parse(fs, args); err != nil {
		return err
	}
	if in == "" || (out == "" && !list) {
		fmt.Fprintln(stderr, "stopgap import: --mcap and one of --list or --out are required")
		fs.Usage()
		return errUsage
	}
	if list {
		topics, err := ros2.ListTopics(ctx, in)
		if err != nil {
			return err
		}
		tw := tabwriter.NewWriter(stdout, 2, 8, 2, ' ', 0)
		fmt.Fprintln(tw, "topic\ttype\tencoding\tmessages\tseconds\timport")
		for _, t := range topics {
			use := "-"
			if t.Supported() {
				use = "yes"
			}
			fmt.Fprintf(tw, "%s\t%s\t%s\t%d\t%.1f\t%s\n", t.Topic, t.Type, t.Encoding, t.Messages, float64(t.LastUs-t.FirstUs)/1e6, use)
		}
		return tw.Flush()
	}
	opts.Mount = mf.given(fs)
	if calibration != "" {
		cam, _, err := calib.ReadFile(calibration)
		if err != nil {
			return fmt.Errorf("--calibration: %w", err)
		}
		opts.Intrinsics = &cam
	}
	opts.Logger = newLogger(stderr, logJSON, 0)
	if !quiet {
		opts.Progress = progressBar(stderr, "read MiB") // three passes over the file
	}
	sum, err := ros2.Import(ctx, in, out, opts)
	if err != nil {
		return err
	}
	fmt.Fprintf(stdout, "recording written: %s\n", out)
	fmt.Fprintf(stdout, "frames %d from %s, telemetry %d from %s", sum.Frames, sum.ImageTopic, sum.TelemetrySamples, sum.TelemetryTopic)
	if sum.ImuTopic != "" {
		fmt.Fprintf(stdout, " (yaw rate from %s)", sum.ImuTopic)
	}
	if sum.CameraInfoTopic != "" {
		fmt.Fprintf(stdout, ", camera from %s\n", sum.CameraInfoTopic)
	} else {
		fmt.Fprintf(stdout, ", camera from %s\n", calibration)
	}
	return nil
}

func runExportMCAP(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("export", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var drive, out, base, report string
	var quality int
	fs.StringVar(&drive, "drive", "", "recording `directory` to export (required)")
	fs.StringVar(&out, "out", "", "MCAP `file` to create; must not exist (required)")
	fs.StringVar(&base, "base-frame", ros2.DefaultBaseFrame, "name of the vehicle frame in the transforms")
	fs.StringVar(&report, "replay-report", "", "also replay the drive (replay flags below) into this report `directory` and write each tick's state ("+ros2.TickStateTopic+") and every frame the operator would have seen in a gap ("+ros2.ShownImageTopic+", labelled)")
	fs.IntVar(&quality, "jpeg-quality", 90, "JPEG quality of the exported shown frames, 1..100")
	var rf replayFlags
	rf.register(fs)
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap export --drive DIR --out FILE.mcap [--replay-report DIR [replay flags]]")
		fmt.Fprintln(stderr, "\nWrites a recording as a ROS 2 MCAP file (CompressedImage, CameraInfo,")
		fmt.Fprintln(stderr, "Odometry, Imu, /tf_static) for general-purpose robotics viewers; with")
		fmt.Fprintln(stderr, "--replay-report, the replay's states and shown frames beside it.")
		fmt.Fprintln(stderr)
		fs.PrintDefaults()
	}
	if err := parse(fs, args); err != nil {
		return err
	}
	if drive == "" || out == "" {
		fmt.Fprintln(stderr, "stopgap export: --drive and --out are required")
		fs.Usage()
		return errUsage
	}
	if quality < 1 || quality > 100 {
		return fmt.Errorf("--jpeg-quality %d: want 1..100", quality)
	}
	rec, err := recording.Open(drive)
	if err != nil {
		return err
	}
	var cfg bench.ReplayConfig
	if report != "" {
		if cfg, err = rf.config(drive, report, stderr); err != nil {
			return err
		}
		fmt.Fprintln(stderr, safetyCaution)
	}
	var sum bench.Summary
	err = writeMCAPFile(out, func(mw *ros2.MCAPWriter) error {
		if err := ros2.ExportRecording(ctx, rec, base, mw); err != nil {
			return err
		}
		if report == "" {
			return nil
		}
		params := []int{gocv.IMWriteJpegQuality, quality}
		cfg.Shown = func(row bench.TickRow, shown gocv.Mat) error {
			var jpeg []byte
			if shown.Ptr() != nil && !shown.Empty() {
				buf, err := gocv.IMEncodeWithParams(gocv.JPEGFileExt, shown, params)
				if err != nil {
					return fmt.Errorf("encoding the shown frame: %w", err)
				}
				defer buf.Close()
				jpeg = buf.GetBytes()
			}
			return mw.WriteTick(ros2.TickState{Tick: row.Tick, CaptureUs: row.TargetUs, State: row.State,
				AgeMs: row.AgeMs, Confidence: row.Confidence}, jpeg)
		}
		sum, err = bench.Replay(ctx, cfg)
		return err
	}, stdout)
	if err != nil {
		return err
	}
	if report != "" {
		printSummary(stdout, sum, report)
	}
	return nil
}

// writeMCAPFile creates out (refusing an existing file), lets fill write
// into it, and removes it again if anything fails, so that no file that
// looks complete is left behind.
func writeMCAPFile(out string, fill func(*ros2.MCAPWriter) error, stdout io.Writer) (err error) {
	f, err := os.OpenFile(out, os.O_WRONLY|os.O_CREATE|os.O_EXCL, 0o644)
	if err != nil {
		return fmt.Errorf("%w (choose another --out)", err)
	}
	defer func() {
		if err != nil {
			f.Close()
			os.Remove(out)
		}
	}()
	mw, err := ros2.NewMCAPWriter(f)
	if err != nil {
		return err
	}
	if err := fill(mw); err != nil {
		return err
	}
	if err := mw.Close(); err != nil {
		return err
	}
	if err := f.Sync(); err != nil {
		return err
	}
	if err := f.Close(); err != nil {
		return err
	}
	fmt.Fprintf(stdout, "MCAP written: %s\n", out)
	return nil
}
