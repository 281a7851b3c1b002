package ros2

import (
	"context"
	"fmt"
	"io"
	"os"

	"github.com/foxglove/mcap/go/mcap"

	"stopgap/stream/recording"
)

// Topic and frame names the exporter writes. A team's own names can be
// chosen on import with the topic flags.
const (
	ExportImageTopic      = "/camera/image/compressed"
	ExportCameraInfoTopic = "/camera/camera_info"
	ExportOdometryTopic   = "/odom"
	ExportImuTopic        = "/imu"
	ExportCameraFrame     = "camera_optical_frame"
	ExportOdomFrame       = "odom"
)

// cdrMessage is a message this package can serialise.
type cdrMessage interface {
	AppendCDR(dst []byte) []byte
}

// MCAPWriter writes ROS 2 messages (CDR) and JSON messages into an MCAP file
// of the ros2 profile, with CRCs and chunk indexes so that general-purpose
// viewers can seek in it. It is not safe for concurrent use.
type MCAPWriter struct {
	w        *mcap.Writer
	schemas  map[string]uint16
	channels map[string]uint16
	seq      map[uint16]uint32
	buf      []byte
}

// NewMCAPWriter starts an MCAP file on out (LZ4-compressed chunks). Call
// Close to write the summary and footer; a file without them is refused by
// the importer as truncated.
func NewMCAPWriter(out io.Writer) (*MCAPWriter, error) {
	w, err := mcap.NewWriter(out, &mcap.WriterOptions{
		IncludeCRC: true, Chunked: true, ChunkSize: 4 << 20, Compression: mcap.CompressionLZ4,
	})
	if err != nil {
		return nil, fmt.Errorf("ros2: %w", err)
	}
	if err := w.WriteHeader(&mcap.Header{Profile: "ros2", Library: "stopgap"}); err != nil {
		return nil, fmt.Errorf("ros2: %w", err)
	}
	return &MCAPWriter{w: w, schemas: map[string]uint16{}, channels: map[string]uint16{}, seq: map[uint16]uint32{}}, nil
}

// channel returns the channel id of topic, declaring schema and channel on
// first use.
func (mw *MCAPWriter) channel(topic, schemaName, schemaEncoding, msgEncoding string, schema []byte) (uint16, error) {
	if id, ok := mw.channels[topic]; ok {
		return id, nil
	}
	sid, ok := mw.schemas[schemaName]
	if !ok {
		sid = uint16(len(mw.schemas) + 1)
		if err := mw.w.WriteSchema(&mcap.Schema{ID: sid, Name: schemaName, Encoding: schemaEncoding, Data: schema}); err != nil {
			return 0, fmt.Errorf("ros2: %w", err)
		}
		mw.schemas[schemaName] = sid
	}
	id := uint16(len(mw.channels))
	if err := mw.w.WriteChannel(&mcap.Channel{ID: id, SchemaID: sid, Topic: topic, MessageEncoding: msgEncoding, Metadata: map[string]string{}}); err != nil {
		return 0, fmt.Errorf("ros2: %w", err)
	}
	mw.channels[topic] = id
	return id, nil
}

func (mw *MCAPWriter) write(id uint16, tUs int64, data []byte) error {
	ns := uint64(tUs) * 1000
	mw.seq[id]++
	if err := mw.w.WriteMessage(&mcap.Message{ChannelID: id, Sequence: mw.seq[id], LogTime: ns, PublishTime: ns, Data: data}); err != nil {
		return fmt.Errorf("ros2: %w", err)
	}
	return nil
}

// Write appends m, a message of ROS 2 type typ (one of the Type constants),
// on topic with log time tUs (microseconds, >= 0).
func (mw *MCAPWriter) Write(topic, typ string, tUs int64, m cdrMessage) error {
	if _, ok := msgDefs[typ]; !ok {
		return fmt.Errorf("ros2: %w: cannot write type %s", ErrTopic, typ)
	}
	id, err := mw.channel(topic, typ, "ros2msg", "cdr", schemaText(typ))
	if err != nil {
		return err
	}
	mw.buf = m.AppendCDR(mw.buf[:0])
	return mw.write(id, tUs, mw.buf)
}

// WriteJSON appends a JSON message on topic, described by a JSON Schema
// (schemaName names it, jsonSchema is its text).
func (mw *MCAPWriter) WriteJSON(topic, schemaName string, jsonSchema []byte, tUs int64, data []byte) error {
	id, err := mw.channel(topic, schemaName, "jsonschema", "json", jsonSchema)
	if err != nil {
		return err
	}
	return mw.write(id, tUs, data)
}

// Close writes the summary section and the footer. It does not close the
// underlying writer.
func (mw *MCAPWriter) Close() error {
	if err := mw.w.Close(); err != nil {
		return fmt.Errorf("ros2: %w", err)
	}
	return nil
}

// ExportRecording writes recording rec as ROS 2 messages: each frame's
// image as CompressedImage on ExportImageTopic with a CameraInfo beside it
// (plumb_bob, the camera's intrinsics), the mount as a static transform
// from baseFrame to ExportCameraFrame on DefaultTFStaticTopic, and each
// telemetry row as an Odometry (speed and yaw rate in the twist; the pose is
// left at the origin: we have none) and an Imu (yaw rate and, if recorded,
// acceleration; orientation marked unknown). Steering angles and arrival
// times have no place in these types and are not written. Frames must be
// image files (a video recording is an error); lost frames are skipped.
// Log times are the stamps.
func ExportRecording(ctx context.Context, rec *recording.Recording, baseFrame string, mw *MCAPWriter) error {
	if baseFrame == "" {
		baseFrame = DefaultBaseFrame
	}
	cam := rec.Camera
	var start int64
	if len(rec.Frames) > 0 {
		start = rec.Frames[0].CaptureUs
	}
	if len(rec.Telemetry) > 0 && rec.Telemetry[0].TimeUs < start {
		start = rec.Telemetry[0].TimeUs
	}
	t, q := TransformFromMount(Mount{XOffsetM: cam.XOffsetM, YOffsetM: cam.YOffsetM, HeightM: cam.HeightM, PitchDeg: cam.PitchDeg, RollDeg: cam.RollDeg})
	tf := TFMessage{Transforms: []TransformStamped{{
		Header: Header{Stamp: TimeFromUs(start), FrameID: baseFrame}, ChildFrameID: ExportCameraFrame,
		Translation: t, Rotation: q,
	}}}
	if err := mw.Write(DefaultTFStaticTopic, TypeTFMessage, start, &tf); err != nil {
		return err
	}
	info := CameraInfoFromCamera(cam)
	info.Header.FrameID = ExportCameraFrame
	// Merge frames and telemetry in time order, so that log times increase.
	ti := 0
	writeTel := func(upTo int64) error {
		for ; ti < len(rec.Telemetry) && rec.Telemetry[ti].TimeUs <= upTo; ti++ {
			if err := writeTelemetry(mw, rec.Telemetry[ti], baseFrame); err != nil {
				return err
			}
		}
		return nil
	}
	for i, f := range rec.Frames {
		if err := ctx.Err(); err != nil {
			return fmt.Errorf("ros2: export stopped at frame %d: %w", i, err)
		}
		if err := writeTel(f.CaptureUs); err != nil {
			return err
		}
		if f.NoImage {
			continue
		}
		p, err := rec.FramePath(i)
		if err != nil {
			return fmt.Errorf("ros2: export: %w", err)
		}
		data, err := os.ReadFile(p)
		if err != nil {
			return fmt.Errorf("ros2: export frame %d: %w", i, err)
		}
		stamp := TimeFromUs(f.CaptureUs)
		info.Header.Stamp = stamp
		if err := mw.Write(ExportCameraInfoTopic, TypeCameraInfo, f.CaptureUs, &info); err != nil {
			return err
		}
		format := "jpeg"
		if len(data) > 4 && string(data[1:4]) == "PNG" {
			format = "png"
		}
		img := CompressedImage{Header: Header{Stamp: stamp, FrameID: ExportCameraFrame}, Format: format, Data: data}
		if err := mw.Write(ExportImageTopic, TypeCompressedImage, f.CaptureUs, &img); err != nil {
			return err
		}
	}
	return writeTel(1<<62 - 1)
}

func writeTelemetry(mw *MCAPWriter, r recording.TelemetryRow, baseFrame string) error {
	stamp := TimeFromUs(r.TimeUs)
	odo := Odometry{
		Header: Header{Stamp: stamp, FrameID: ExportOdomFrame}, ChildFrameID: baseFrame,
		Orientation: Quaternion{W: 1},
		Twist:       Twist{Linear: Vector3{X: r.SpeedMps}, Angular: Vector3{Z: r.YawRateRps}},
	}
	if err := mw.Write(ExportOdometryTopic, TypeOdometry, r.TimeUs, &odo); err != nil {
		return err
	}
	imu := Imu{Header: Header{Stamp: stamp, FrameID: baseFrame}, Orientation: Quaternion{W: 1}, AngularVelocity: Vector3{Z: r.YawRateRps}}
	imu.OrientationCovariance[0] = -1 // unknown, by the message's convention
	if r.HasAccel {
		imu.LinearAcceleration.X = r.AccelMps2
	} else {
		imu.LinearAccelerationCovariance[0] = -1
	}
	return mw.Write(ExportImuTopic, TypeImu, r.TimeUs, &imu)
}

// CameraInfoFromCamera returns a CameraInfo with cam's size and intrinsics,
// the plumb_bob distortion model, an identity rectification and P = [K|0].
func CameraInfoFromCamera(cam recording.Camera) CameraInfo {
	ci := CameraInfo{
		Width: uint32(cam.Width), Height: uint32(cam.Height), DistortionModel: "plumb_bob",
		D: []float64{cam.K1, cam.K2, cam.P1, cam.P2, cam.K3},
		K: [9]float64{cam.Fx, 0, cam.Cx, 0, cam.Fy, cam.Cy, 0, 0, 1},
		R: [9]float64{1, 0, 0, 0, 1, 0, 0, 0, 1},
		P: [12]float64{cam.Fx, 0, cam.Cx, 0, 0, cam.Fy, cam.Cy, 0, 0, 0, 1, 0},
	}
	return ci
}
