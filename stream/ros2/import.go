package ros2

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"image"
	"image/color"
	"image/jpeg"
	"image/png"
	"io/fs"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strings"

	"github.com/foxglove/mcap/go/mcap"

	"stopgap/internal/camera"
	"stopgap/stream/calib"
	"stopgap/stream/recording"
)

// DefaultBaseFrame is the vehicle frame the camera mount is resolved in
// when ImportOptions.BaseFrame is empty (REP 105's name for the frame
// rigidly attached to the vehicle). Its origin should be on the ground
// under the rotation centre, as stopgap's vehicle origin is.
const DefaultBaseFrame = "base_link"

// DefaultTFStaticTopic is the topic static transforms are read from.
const DefaultTFStaticTopic = "/tf_static"

// imuMaxAgeUs is how old the newest IMU sample may be and still give a
// telemetry row its yaw rate and acceleration: 100 ms, a design choice
// (IMUs publish at 100 Hz or more; an older sample is a dropout).
const imuMaxAgeUs = 100_000

// ImportOptions selects what the importer reads. Empty topics are chosen
// automatically: the one topic of the needed type, an error if there are
// several (name one) or none.
type ImportOptions struct {
	// ImageTopic carries sensor_msgs/msg/CompressedImage (JPEG or PNG) or
	// sensor_msgs/msg/Image (rgb8, bgr8, rgba8, bgra8 or mono8).
	ImageTopic string
	// CameraInfoTopic carries sensor_msgs/msg/CameraInfo; its first
	// message gives the intrinsics and its frame_id the camera frame.
	CameraInfoTopic string
	// TelemetryTopic carries nav_msgs/msg/Odometry or
	// geometry_msgs/msg/TwistStamped: speed from twist.linear.x, yaw rate
	// from twist.angular.z, in the vehicle's base frame (REP 103).
	TelemetryTopic string
	// ImuTopic carries sensor_msgs/msg/Imu; "" takes the only Imu topic if
	// there is one, "-" uses none. When used, each telemetry row takes its
	// yaw rate (angular_velocity.z) and, if given, its longitudinal
	// acceleration (linear_acceleration.x) from the newest IMU sample at
	// most 100 ms older. The IMU frame must have the base frame's axes.
	ImuTopic string
	// TFStaticTopic carries tf2_msgs/msg/TFMessage; "" means
	// DefaultTFStaticTopic. Ignored when Mount is set.
	TFStaticTopic string
	// BaseFrame is the vehicle frame; "" means DefaultBaseFrame.
	BaseFrame string
	// Intrinsics, if not nil, is the camera (size, intrinsics, distortion;
	// its mount is ignored), e.g. read from a calibration file with
	// package stopgap/stream/calib; then no CameraInfo topic is read, and
	// the camera frame for the mount is the images' header.frame_id. It is
	// checked with Camera.ValidateIntrinsics before the mount is added.
	Intrinsics *camera.Camera
	// Mount, if not nil, is the camera mount; otherwise it is derived from
	// the static transforms from BaseFrame to the camera's frame.
	Mount *Mount
	// Progress, if set, is called as the file is read, with the MiB read
	// so far over the three passes and their total (three times the file's
	// size).
	Progress func(done, total int)
	// Logger receives what was tolerated (dropped duplicate samples);
	// nil means slog.Default().
	Logger *slog.Logger
}

// ImportSummary says what an import wrote.
type ImportSummary struct {
	ImageTopic, CameraInfoTopic, TelemetryTopic, ImuTopic string
	Frames                                                int // frames written
	TelemetrySamples                                      int // telemetry rows written
	DroppedDuplicates                                     int // telemetry samples dropped for a repeated stamp
	Camera                                                recording.Camera
}

// Import converts the MCAP file at path into a new recording directory out
// (package stopgap/stream/recording). The file is read three times: once to
// check every record and count the topics, once for the camera, telemetry
// and transforms, once to write the frames. Nothing appears at out unless
// the import succeeds: the recording is written beside it under a temporary
// name and renamed at the end. It fails with recording.ErrExists if out
// exists and is not empty.
func Import(ctx context.Context, path, out string, opts ImportOptions) (ImportSummary, error) {
	log := opts.Logger
	if log == nil {
		log = slog.Default()
	}
	if err := checkFreshDir(out); err != nil {
		return ImportSummary{}, err
	}
	var read func(int)
	finish := func() {}
	if opts.Progress != nil {
		st, err := os.Stat(path)
		if err != nil {
			return ImportSummary{}, fmt.Errorf("ros2: %w", err)
		}
		const mib = 1 << 20
		total := int((3*st.Size() + mib - 1) / mib)
		var done int64
		last := -1
		read = func(n int) {
			done += int64(n)
			if d := min(int(done/mib), total); d != last {
				last = d
				opts.Progress(d, total)
			}
		}
		finish = func() { opts.Progress(total, total) }
	}
	topics, err := listTopics(ctx, path, read)
	if err != nil {
		return ImportSummary{}, err
	}
	sum := ImportSummary{}
	if sum.ImageTopic, err = pickTopic(topics, opts.ImageTopic, "--image-topic", TypeCompressedImage, TypeImage); err != nil {
		return sum, err
	}
	if opts.Intrinsics == nil {
		if sum.CameraInfoTopic, err = pickTopic(topics, opts.CameraInfoTopic, "--camera-info-topic", TypeCameraInfo); err != nil {
			return sum, err
		}
	}
	if sum.TelemetryTopic, err = pickTopic(topics, opts.TelemetryTopic, "--telemetry-topic", TypeOdometry, TypeTwistStamped); err != nil {
		return sum, err
	}
	if opts.ImuTopic != "-" && (opts.ImuTopic != "" || hasType(topics, TypeImu)) {
		// Optional: only an explicit choice or several candidates can fail.
		if sum.ImuTopic, err = pickTopic(topics, opts.ImuTopic, "--imu-topic", TypeImu); err != nil {
			return sum, err
		}
	}
	tfTopic := opts.TFStaticTopic
	if tfTopic == "" {
		tfTopic = DefaultTFStaticTopic
	}
	base := opts.BaseFrame
	if base == "" {
		base = DefaultBaseFrame
	}

	// Second pass: camera, telemetry, IMU, transforms, frame times.
	var (
		info      *CameraInfo
		imgFrame  string // header.frame_id of the first image
		tel       []recording.TelemetryRow
		imu       []imuSample
		tfs       []TransformStamped
		nFrames   int
		lastFrame int64
	)
	err = scanMCAPProgress(ctx, path, read, func(ch *mcap.Channel, s *mcap.Schema, m *mcap.Message) error {
		if ch.Topic == "" {
			return nil // never selected (the optional IMU topic may be "")
		}
		switch ch.Topic {
		case sum.CameraInfoTopic:
			if info != nil {
				return nil
			}
			var ci CameraInfo
			if err := ci.UnmarshalCDR(m.Data); err != nil {
				return err
			}
			ci.D = append([]float64(nil), ci.D...)
			info = &ci
		case sum.TelemetryTopic:
			row, err := telemetryRow(s.Name, m.Data)
			if err != nil {
				return err
			}
			tel = append(tel, row)
		case sum.ImuTopic:
			var im Imu
			if err := im.UnmarshalCDR(m.Data); err != nil {
				return err
			}
			imu = append(imu, imuSample{tUs: im.Header.Stamp.Us(), yawRps: im.AngularVelocity.Z,
				accel: im.LinearAcceleration.X, hasAccel: im.LinearAccelerationCovariance[0] != -1})
		case tfTopic:
			if s == nil || s.Name != TypeTFMessage {
				return nil
			}
			var tf TFMessage
			if err := tf.UnmarshalCDR(m.Data); err != nil {
				return err
			}
			tfs = append(tfs, tf.Transforms...)
		case sum.ImageTopic:
			h, err := imageHeader(s.Name, m.Data)
			if err != nil {
				return err
			}
			t := h.Stamp.Us()
			if nFrames == 0 {
				imgFrame = h.FrameID
			}
			if nFrames > 0 && t <= lastFrame {
				return fmt.Errorf("%w: image stamp %d us is not after the previous image's %d us; frames must be in capture order", ErrMessage, t, lastFrame)
			}
			lastFrame = t
			nFrames++
		}
		return nil
	})
	if err != nil {
		return sum, err
	}
	var cam recording.Camera
	camFrame := imgFrame
	switch {
	case opts.Intrinsics != nil:
		cam = *opts.Intrinsics
		if err := cam.ValidateIntrinsics(); err != nil {
			return sum, fmt.Errorf("ros2: %s: the given intrinsics: %w", path, err)
		}
	case info == nil:
		return sum, fmt.Errorf("ros2: %s: %w: %s has no message", path, ErrTopic, sum.CameraInfoTopic)
	default:
		if cam, err = cameraFromInfo(info); err != nil {
			return sum, fmt.Errorf("ros2: %s: first message on %s: %w", path, sum.CameraInfoTopic, err)
		}
		camFrame = info.Header.FrameID
	}
	mount := opts.Mount
	if mount == nil {
		mt, err := mountFromTF(tfs, base, camFrame)
		if err != nil {
			return sum, fmt.Errorf("ros2: %s: %s: %w", path, tfTopic, err)
		}
		mount = &mt
	}
	cam.XOffsetM, cam.YOffsetM, cam.HeightM = mount.XOffsetM, mount.YOffsetM, mount.HeightM
	cam.PitchDeg, cam.RollDeg = mount.PitchDeg, mount.RollDeg
	// With its mount the camera is complete; a recording holds only such.
	if err := cam.Validate(); err != nil {
		return sum, fmt.Errorf("ros2: %s: camera with its mount: %w", path, err)
	}
	sum.Camera = cam
	tel, sum.DroppedDuplicates = sortTelemetry(tel)
	if sum.DroppedDuplicates > 0 {
		log.Warn("telemetry samples with a repeated stamp dropped", "topic", sum.TelemetryTopic, "count", sum.DroppedDuplicates)
	}
	mergeIMU(tel, imu)

	// Third pass: write into a temporary directory beside out.
	tmp, err := os.MkdirTemp(filepath.Dir(filepath.Clean(out)), "."+filepath.Base(out)+".import-")
	if err != nil {
		return sum, fmt.Errorf("ros2: %w", err)
	}
	done := false
	defer func() {
		if !done {
			os.RemoveAll(tmp)
		}
	}()
	w, err := recording.Create(filepath.Join(tmp, "rec"), cam)
	if err != nil {
		return sum, fmt.Errorf("ros2: %w", err)
	}
	defer func() {
		if w != nil {
			w.Close()
		}
	}()
	for _, row := range tel {
		if err := w.WriteTelemetry(row); err != nil {
			return sum, fmt.Errorf("ros2: %s: telemetry at %d us: %w", sum.TelemetryTopic, row.TimeUs, err)
		}
	}
	sum.TelemetrySamples = len(tel)
	var pngBuf bytes.Buffer
	err = scanMCAPProgress(ctx, path, read, func(ch *mcap.Channel, s *mcap.Schema, m *mcap.Message) error {
		if ch.Topic != sum.ImageTopic {
			return nil
		}
		t, data, ext, err := frameBytes(s.Name, m.Data, cam, &pngBuf)
		if err != nil {
			return err
		}
		if err := w.WriteFrame(sum.Frames, t, data, ext); err != nil {
			return err
		}
		sum.Frames++
		return nil
	})
	if err != nil {
		return sum, err
	}
	err = w.Close()
	w = nil
	if err != nil {
		return sum, fmt.Errorf("ros2: %w", err)
	}
	if err := os.Remove(out); err != nil && !errors.Is(err, fs.ErrNotExist) {
		return sum, fmt.Errorf("ros2: %w", err)
	}
	if err := os.Rename(filepath.Join(tmp, "rec"), out); err != nil {
		return sum, fmt.Errorf("ros2: %w", err)
	}
	done = true
	os.RemoveAll(tmp)
	finish()
	return sum, nil
}

// checkFreshDir fails if out exists and is not an empty directory.
func checkFreshDir(out string) error {
	entries, err := os.ReadDir(out)
	if errors.Is(err, fs.ErrNotExist) {
		return nil
	}
	if err != nil {
		return fmt.Errorf("ros2: output %s: %w", out, err)
	}
	if len(entries) > 0 {
		return fmt.Errorf("ros2: output %s exists and is not empty; choose another directory: %w", out, recording.ErrExists)
	}
	return nil
}

// pickTopic returns the topic named by want, checking its type, or the only
// topic of one of types.
func pickTopic(topics []TopicInfo, want, flag string, types ...string) (string, error) {
	okType := func(t TopicInfo) bool {
		for _, typ := range types {
			if t.Type == typ && t.Encoding == "cdr" {
				return true
			}
		}
		return false
	}
	if want != "" {
		for _, t := range topics {
			if t.Topic == want {
				if !okType(t) {
					return "", fmt.Errorf("ros2: %w: %s %s is %s (%s encoding); want %s in cdr encoding", ErrTopic, flag, want, t.Type, t.Encoding, strings.Join(types, " or "))
				}
				return want, nil
			}
		}
		return "", fmt.Errorf("ros2: %w: %s %s: no such topic in the file (list them with --list)", ErrTopic, flag, want)
	}
	var found []string
	for _, t := range topics {
		if okType(t) {
			found = append(found, t.Topic)
		}
	}
	switch len(found) {
	case 1:
		return found[0], nil
	case 0:
		return "", fmt.Errorf("ros2: %w: no topic of type %s in the file (list them with --list)", ErrTopic, strings.Join(types, " or "))
	default:
		return "", fmt.Errorf("ros2: %w: several topics of type %s (%s): choose one with %s", ErrTopic, strings.Join(types, " or "), strings.Join(found, ", "), flag)
	}
}

// hasType reports whether any topic carries typ in CDR.
func hasType(topics []TopicInfo, typ string) bool {
	for _, t := range topics {
		if t.Type == typ && t.Encoding == "cdr" {
			return true
		}
	}
	return false
}

// telemetryRow decodes an Odometry or TwistStamped message into a row: the
// twist is in the vehicle's base frame (REP 103 = ISO 8855 axes).
func telemetryRow(typ string, data []byte) (recording.TelemetryRow, error) {
	var h Header
	var tw Twist
	switch typ {
	case TypeOdometry:
		var m Odometry
		if err := m.UnmarshalCDR(data); err != nil {
			return recording.TelemetryRow{}, err
		}
		h, tw = m.Header, m.Twist
	case TypeTwistStamped:
		var m TwistStamped
		if err := m.UnmarshalCDR(data); err != nil {
			return recording.TelemetryRow{}, err
		}
		h, tw = m.Header, m.Twist
	default:
		return recording.TelemetryRow{}, fmt.Errorf("%w: telemetry of type %s", ErrTopic, typ)
	}
	speed, _, _ := VehicleFromROS(tw.Linear)
	_, _, yawRate := VehicleFromROS(tw.Angular)
	if math.IsNaN(speed) || math.IsInf(speed, 0) || math.IsNaN(yawRate) || math.IsInf(yawRate, 0) {
		return recording.TelemetryRow{}, fmt.Errorf("%w: twist at %d us is not finite (linear.x %v, angular.z %v)", ErrMessage, h.Stamp.Us(), speed, yawRate)
	}
	return recording.TelemetryRow{TimeUs: h.Stamp.Us(), SpeedMps: speed, YawRateRps: yawRate}, nil
}

type imuSample struct {
	tUs      int64
	yawRps   float64
	accel    float64
	hasAccel bool
}

// sortTelemetry orders rows by time and drops later rows with a repeated
// stamp, returning how many were dropped.
func sortTelemetry(rows []recording.TelemetryRow) ([]recording.TelemetryRow, int) {
	sort.SliceStable(rows, func(i, j int) bool { return rows[i].TimeUs < rows[j].TimeUs })
	out := rows[:0]
	dropped := 0
	for i, r := range rows {
		if i > 0 && r.TimeUs == rows[i-1].TimeUs {
			dropped++
			continue
		}
		out = append(out, r)
	}
	return out, dropped
}

// mergeIMU gives each row the yaw rate and acceleration of the newest IMU
// sample at most imuMaxAgeUs older than the row (REP 103 axes: z up, so
// angular_velocity.z is the yaw rate, positive to the left).
func mergeIMU(rows []recording.TelemetryRow, imu []imuSample) {
	if len(imu) == 0 {
		return
	}
	sort.SliceStable(imu, func(i, j int) bool { return imu[i].tUs < imu[j].tUs })
	j := -1
	for i := range rows {
		for j+1 < len(imu) && imu[j+1].tUs <= rows[i].TimeUs {
			j++
		}
		if j < 0 || rows[i].TimeUs-imu[j].tUs > imuMaxAgeUs {
			continue
		}
		s := imu[j]
		if math.IsNaN(s.yawRps) || math.IsInf(s.yawRps, 0) {
			continue
		}
		rows[i].YawRateRps = s.yawRps
		if s.hasAccel && !math.IsNaN(s.accel) && !math.IsInf(s.accel, 0) {
			rows[i].AccelMps2, rows[i].HasAccel = s.accel, true
		}
	}
}

// imageHeader decodes only what the second pass needs of an image message.
func imageHeader(typ string, data []byte) (Header, error) {
	switch typ {
	case TypeCompressedImage:
		var m CompressedImage
		err := m.UnmarshalCDR(data)
		return m.Header, err
	case TypeImage:
		var m Image
		err := m.UnmarshalCDR(data)
		return m.Header, err
	}
	return Header{}, fmt.Errorf("%w: images of type %s", ErrTopic, typ)
}

// frameBytes returns an image message's capture time and encoded image for
// the recording: compressed images as they are (JPEG or PNG, told by their
// signature), raw images encoded to PNG in pngBuf (lossless). It checks the
// size against the camera.
func frameBytes(typ string, data []byte, cam recording.Camera, pngBuf *bytes.Buffer) (int64, []byte, string, error) {
	switch typ {
	case TypeCompressedImage:
		var m CompressedImage
		if err := m.UnmarshalCDR(data); err != nil {
			return 0, nil, "", err
		}
		var ext string
		var cfg image.Config
		var err error
		switch {
		case bytes.HasPrefix(m.Data, []byte{0xFF, 0xD8, 0xFF}):
			ext = "jpg"
			cfg, err = jpeg.DecodeConfig(bytes.NewReader(m.Data))
		case bytes.HasPrefix(m.Data, []byte("\x89PNG\r\n\x1a\n")):
			ext = "png"
			cfg, err = png.DecodeConfig(bytes.NewReader(m.Data))
		default:
			return 0, nil, "", fmt.Errorf("%w: compressed image (format %q) is neither JPEG nor PNG", ErrMessage, m.Format)
		}
		if err != nil {
			return 0, nil, "", fmt.Errorf("%w: compressed image at %d us: %v", ErrMessage, m.Header.Stamp.Us(), err)
		}
		if cfg.Width != cam.Width || cfg.Height != cam.Height {
			return 0, nil, "", fmt.Errorf("%w: image at %d us is %dx%d but the camera is %dx%d", ErrMessage, m.Header.Stamp.Us(), cfg.Width, cfg.Height, cam.Width, cam.Height)
		}
		return m.Header.Stamp.Us(), m.Data, ext, nil
	case TypeImage:
		var m Image
		if err := m.UnmarshalCDR(data); err != nil {
			return 0, nil, "", err
		}
		img, err := rawImage(&m)
		if err != nil {
			return 0, nil, "", fmt.Errorf("%w: image at %d us: %v", ErrMessage, m.Header.Stamp.Us(), err)
		}
		if int(m.Width) != cam.Width || int(m.Height) != cam.Height {
			return 0, nil, "", fmt.Errorf("%w: image at %d us is %dx%d but the camera is %dx%d", ErrMessage, m.Header.Stamp.Us(), m.Width, m.Height, cam.Width, cam.Height)
		}
		pngBuf.Reset()
		if err := (&png.Encoder{CompressionLevel: png.BestSpeed}).Encode(pngBuf, img); err != nil {
			return 0, nil, "", err
		}
		return m.Header.Stamp.Us(), pngBuf.Bytes(), "png", nil
	}
	return 0, nil, "", fmt.Errorf("%w: images of type %s", ErrTopic, typ)
}

// rawImage wraps a sensor_msgs/Image in an image.Image, for the 8-bit
// encodings of REP 104's list that a colour camera sends.
func rawImage(m *Image) (image.Image, error) {
	w, h := int(m.Width), int(m.Height)
	if w <= 0 || h <= 0 || w > camera.MaxImageSide || h > camera.MaxImageSide {
		return nil, fmt.Errorf("size %dx%d out of range", w, h)
	}
	var ch int
	switch m.Encoding {
	case "mono8":
		ch = 1
	case "rgb8", "bgr8":
		ch = 3
	case "rgba8", "bgra8":
		ch = 4
	default:
		return nil, fmt.Errorf("encoding %q is not supported; use mono8, rgb8, bgr8, rgba8 or bgra8", m.Encoding)
	}
	step := int(m.Step)
	if step < w*ch || len(m.Data) < step*(h-1)+w*ch {
		return nil, fmt.Errorf("step %d and %d data bytes do not hold %dx%d %s", m.Step, len(m.Data), w, h, m.Encoding)
	}
	if ch == 1 {
		g := image.NewGray(image.Rect(0, 0, w, h))
		for y := range h {
			copy(g.Pix[y*w:(y+1)*w], m.Data[y*step:])
		}
		return g, nil
	}
	img := image.NewNRGBA(image.Rect(0, 0, w, h))
	bgr := strings.HasPrefix(m.Encoding, "bgr")
	for y := range h {
		row := m.Data[y*step:]
		for x := range w {
			p := row[x*ch:]
			c := color.NRGBA{p[0], p[1], p[2], 255}
			if bgr {
				c.R, c.B = c.B, c.R
			}
			img.SetNRGBA(x, y, c)
		}
	}
	return img, nil
}

// cameraFromInfo converts the size and intrinsics of a CameraInfo with
// the calibration files' converter (calib.FromKD: K to fx fy cx cy, D to
// OpenCV's k1 k2 p1 p2 k3). The mount is left zero.
func cameraFromInfo(ci *CameraInfo) (recording.Camera, error) {
	if ci.Width == 0 || ci.Height == 0 || ci.Width > camera.MaxImageSide || ci.Height > camera.MaxImageSide {
		return recording.Camera{}, fmt.Errorf("%w: width %d, height %d: the camera info has no usable image size", ErrMessage, ci.Width, ci.Height)
	}
	if ci.BinningX > 1 || ci.BinningY > 1 {
		return recording.Camera{}, fmt.Errorf("%w: binning %dx%d: binned images are not supported", ErrMessage, ci.BinningX, ci.BinningY)
	}
	cam, field, err := calib.FromKD(int(ci.Width), int(ci.Height), ci.K, ci.DistortionModel, ci.D)
	if err != nil {
		name := map[string]string{"camera_matrix": "k", "distortion_coefficients": "d"}[field]
		return recording.Camera{}, fmt.Errorf("%w: field %s (distortion_model %q): %w", ErrMessage, name, ci.DistortionModel, err)
	}
	return cam, nil
}

// mountFromTF resolves the pose of camFrame in base by chaining the static
// transforms (child -> parent) and converts it to a mount.
func mountFromTF(tfs []TransformStamped, base, camFrame string) (Mount, error) {
	if camFrame == "" {
		return Mount{}, fmt.Errorf("%w: the camera's messages have no header.frame_id; give the mount with flags", ErrMount)
	}
	parent := map[string]TransformStamped{}
	for _, t := range tfs {
		parent[t.ChildFrameID] = t
	}
	// Walk from the camera up to base: T_base_cam = T_base_a ... T_z_cam.
	t, q := Vector3{}, Quaternion{W: 1}
	frame := camFrame
	for hops := 0; frame != base; hops++ {
		p, ok := parent[frame]
		if !ok || hops > 64 {
			return Mount{}, fmt.Errorf("%w: no static transform chain from %s to the camera frame %s (stopped at %s); record /tf_static, choose --base-frame, or give the mount with flags", ErrMount, base, camFrame, frame)
		}
		t, q = composeTransforms(p.Translation, p.Rotation, t, q)
		frame = p.Header.FrameID
	}
	return MountFromTransform(t, q)
}
