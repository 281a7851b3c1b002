package main

import (
	"context"
	"flag"
	"fmt"
	"io"
	"os"
	"text/tabwriter"

	"stopgap/stream/recording"
	"stopgap/stream/ros2"
)

func runImport(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("import", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var in, out string
	var list, quiet, logJSON bool
	var opts ros2.ImportOptions
	var mf mountFlags
	fs.StringVar(&in, "mcap", "", "ROS 2 recording `file` (MCAP, CDR messages) to read (required)")
	fs.StringVar(&out, "out", "", "recording `directory` to create (required unless --list)")
	fs.BoolVar(&list, "list", false, "only list the file's topics, types and message counts")
	fs.StringVar(&opts.ImageTopic, "image-topic", "", "sensor_msgs/msg/CompressedImage or Image topic (default: the only one)")
	fs.StringVar(&opts.CameraInfoTopic, "camera-info-topic", "", "sensor_msgs/msg/CameraInfo topic (default: the only one)")
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
	opts.Logger = newLogger(stderr, logJSON, 0)
	if !quiet {
		opts.Progress = progressBar(stderr, "import")
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
	fmt.Fprintf(stdout, ", camera from %s\n", sum.CameraInfoTopic)
	return nil
}

func runExportMCAP(ctx context.Context, args []string, stdout, stderr io.Writer) error {
	fs := flag.NewFlagSet("export", flag.ContinueOnError)
	fs.SetOutput(stderr)
	var drive, out, base string
	fs.StringVar(&drive, "drive", "", "recording `directory` to export (required)")
	fs.StringVar(&out, "out", "", "MCAP `file` to create; must not exist (required)")
	fs.StringVar(&base, "base-frame", ros2.DefaultBaseFrame, "name of the vehicle frame in the transforms")
	fs.Usage = func() {
		fmt.Fprintln(stderr, "usage: stopgap export --drive DIR --out FILE.mcap")
		fmt.Fprintln(stderr, "\nWrites a recording as a ROS 2 MCAP file (CompressedImage, CameraInfo,")
		fmt.Fprintln(stderr, "Odometry, Imu, /tf_static) for general-purpose robotics viewers.")
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
	rec, err := recording.Open(drive)
	if err != nil {
		return err
	}
	return writeMCAPFile(out, func(mw *ros2.MCAPWriter) error {
		return ros2.ExportRecording(ctx, rec, base, mw)
	}, stdout)
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
