package ros2

// The message types stopgap reads and writes, field for field as their ROS 2
// interface definitions declare them (ros2/common_interfaces, rcl_interfaces
// for builtin_interfaces); see schemas.go for the definitions. Each has
// UnmarshalCDR, which reads a whole CDR payload (and fails on trailing data),
// and AppendCDR, which appends a little-endian CDR payload, header included.
// Decoded byte slices (image data) alias the payload.

// Schema names of the supported types, as they appear in MCAP schema
// records of the ros2 profile.
const (
	TypeCompressedImage = "sensor_msgs/msg/CompressedImage"
	TypeImage           = "sensor_msgs/msg/Image"
	TypeCameraInfo      = "sensor_msgs/msg/CameraInfo"
	TypeOdometry        = "nav_msgs/msg/Odometry"
	TypeTwistStamped    = "geometry_msgs/msg/TwistStamped"
	TypeImu             = "sensor_msgs/msg/Imu"
	TypeTFMessage       = "tf2_msgs/msg/TFMessage"
)

// Time is builtin_interfaces/msg/Time.
type Time struct {
	Sec     int32  // seconds since the clock's epoch
	Nanosec uint32 // nanoseconds, 0..999999999
}

// Us returns the time in integer microseconds, truncating below 1 us.
func (t Time) Us() int64 { return int64(t.Sec)*1_000_000 + int64(t.Nanosec)/1000 }

// TimeFromUs is the inverse of [Time.Us] for whole microseconds. It is exact
// for times in the int32 seconds range (years 1901-2038).
func TimeFromUs(us int64) Time {
	sec := us / 1_000_000
	rem := us % 1_000_000
	if rem < 0 {
		sec--
		rem += 1_000_000
	}
	return Time{Sec: int32(sec), Nanosec: uint32(rem * 1000)}
}

// Header is std_msgs/msg/Header.
type Header struct {
	Stamp   Time
	FrameID string
}

func (h *Header) decode(d *cdrDecoder) {
	h.Stamp.Sec = d.int32("header.stamp.sec")
	h.Stamp.Nanosec = d.uint32("header.stamp.nanosec")
	if h.Stamp.Nanosec >= 1_000_000_000 {
		d.off -= 4
		d.fail("header.stamp.nanosec", "is 1e9 or more")
	}
	h.FrameID = d.string("header.frame_id")
}

func (h *Header) encode(e *cdrEncoder) {
	e.int32(h.Stamp.Sec)
	e.uint32(h.Stamp.Nanosec)
	e.string(h.FrameID)
}

// Vector3 is geometry_msgs/msg/Vector3 (also used for Point).
type Vector3 struct{ X, Y, Z float64 }

func (v *Vector3) decode(d *cdrDecoder, field string) {
	v.X = d.float64(field + ".x")
	v.Y = d.float64(field + ".y")
	v.Z = d.float64(field + ".z")
}

func (v *Vector3) encode(e *cdrEncoder) { e.float64(v.X); e.float64(v.Y); e.float64(v.Z) }

// Quaternion is geometry_msgs/msg/Quaternion: x, y, z, w (w the scalar).
type Quaternion struct{ X, Y, Z, W float64 }

func (q *Quaternion) decode(d *cdrDecoder, field string) {
	q.X = d.float64(field + ".x")
	q.Y = d.float64(field + ".y")
	q.Z = d.float64(field + ".z")
	q.W = d.float64(field + ".w")
}

func (q *Quaternion) encode(e *cdrEncoder) {
	e.float64(q.X)
	e.float64(q.Y)
	e.float64(q.Z)
	e.float64(q.W)
}

// Twist is geometry_msgs/msg/Twist: velocities in the message's frame, m/s
// and rad/s.
type Twist struct{ Linear, Angular Vector3 }

func (t *Twist) decode(d *cdrDecoder, field string) {
	t.Linear.decode(d, field+".linear")
	t.Angular.decode(d, field+".angular")
}

func (t *Twist) encode(e *cdrEncoder) { t.Linear.encode(e); t.Angular.encode(e) }

// CompressedImage is sensor_msgs/msg/CompressedImage.
type CompressedImage struct {
	Header Header
	Format string // "jpeg", "png", or e.g. "bgr8; jpeg compressed bgr8"
	Data   []byte // the encoded image
}

// UnmarshalCDR decodes payload into m.
func (m *CompressedImage) UnmarshalCDR(payload []byte) error {
	d := newCDRDecoder(payload)
	m.Header.decode(d)
	m.Format = d.string("format")
	m.Data = d.bytes("data")
	return d.end(TypeCompressedImage)
}

// AppendCDR appends m as a CDR_LE payload to dst.
func (m *CompressedImage) AppendCDR(dst []byte) []byte {
	e := newCDREncoder(dst)
	m.Header.encode(e)
	e.string(m.Format)
	e.bytes(m.Data)
	return e.buf
}

// Image is sensor_msgs/msg/Image.
type Image struct {
	Header      Header
	Height      uint32 // rows
	Width       uint32 // columns
	Encoding    string // e.g. "rgb8", "bgr8", "mono8"
	IsBigendian uint8
	Step        uint32 // bytes per row
	Data        []byte // Step*Height bytes
}

// UnmarshalCDR decodes payload into m.
func (m *Image) UnmarshalCDR(payload []byte) error {
	d := newCDRDecoder(payload)
	m.Header.decode(d)
	m.Height = d.uint32("height")
	m.Width = d.uint32("width")
	m.Encoding = d.string("encoding")
	m.IsBigendian = d.uint8("is_bigendian")
	m.Step = d.uint32("step")
	m.Data = d.bytes("data")
	return d.end(TypeImage)
}

// AppendCDR appends m as a CDR_LE payload to dst.
func (m *Image) AppendCDR(dst []byte) []byte {
	e := newCDREncoder(dst)
	m.Header.encode(e)
	e.uint32(m.Height)
	e.uint32(m.Width)
	e.string(m.Encoding)
	e.uint8(m.IsBigendian)
	e.uint32(m.Step)
	e.bytes(m.Data)
	return e.buf
}

// RegionOfInterest is sensor_msgs/msg/RegionOfInterest.
type RegionOfInterest struct {
	XOffset, YOffset, Height, Width uint32
	DoRectify                       bool
}

// CameraInfo is sensor_msgs/msg/CameraInfo.
type CameraInfo struct {
	Header          Header
	Height, Width   uint32
	DistortionModel string      // "plumb_bob", "rational_polynomial", "equidistant", ...
	D               []float64   // distortion coefficients; for plumb_bob k1 k2 p1 p2 k3
	K               [9]float64  // intrinsic matrix, row-major: fx 0 cx; 0 fy cy; 0 0 1
	R               [9]float64  // rectification rotation, row-major
	P               [12]float64 // projection matrix, row-major 3x4
	BinningX        uint32
	BinningY        uint32
	ROI             RegionOfInterest
}

// UnmarshalCDR decodes payload into m.
func (m *CameraInfo) UnmarshalCDR(payload []byte) error {
	d := newCDRDecoder(payload)
	m.Header.decode(d)
	m.Height = d.uint32("height")
	m.Width = d.uint32("width")
	m.DistortionModel = d.string("distortion_model")
	m.D = d.float64Seq("d")
	d.float64s("k", m.K[:])
	d.float64s("r", m.R[:])
	d.float64s("p", m.P[:])
	m.BinningX = d.uint32("binning_x")
	m.BinningY = d.uint32("binning_y")
	m.ROI.XOffset = d.uint32("roi.x_offset")
	m.ROI.YOffset = d.uint32("roi.y_offset")
	m.ROI.Height = d.uint32("roi.height")
	m.ROI.Width = d.uint32("roi.width")
	m.ROI.DoRectify = d.bool("roi.do_rectify")
	return d.end(TypeCameraInfo)
}

// AppendCDR appends m as a CDR_LE payload to dst.
func (m *CameraInfo) AppendCDR(dst []byte) []byte {
	e := newCDREncoder(dst)
	m.Header.encode(e)
	e.uint32(m.Height)
	e.uint32(m.Width)
	e.string(m.DistortionModel)
	e.float64Seq(m.D)
	e.float64s(m.K[:])
	e.float64s(m.R[:])
	e.float64s(m.P[:])
	e.uint32(m.BinningX)
	e.uint32(m.BinningY)
	e.uint32(m.ROI.XOffset)
	e.uint32(m.ROI.YOffset)
	e.uint32(m.ROI.Height)
	e.uint32(m.ROI.Width)
	e.bool(m.ROI.DoRectify)
	return e.buf
}

// Odometry is nav_msgs/msg/Odometry. The pose is in Header.FrameID (e.g.
// "odom"), the twist in ChildFrameID (the vehicle's base frame).
type Odometry struct {
	Header          Header
	ChildFrameID    string
	Position        Vector3 // pose.pose.position, metres
	Orientation     Quaternion
	PoseCovariance  [36]float64
	Twist           Twist
	TwistCovariance [36]float64
}

// UnmarshalCDR decodes payload into m.
func (m *Odometry) UnmarshalCDR(payload []byte) error {
	d := newCDRDecoder(payload)
	m.Header.decode(d)
	m.ChildFrameID = d.string("child_frame_id")
	m.Position.decode(d, "pose.pose.position")
	m.Orientation.decode(d, "pose.pose.orientation")
	d.float64s("pose.covariance", m.PoseCovariance[:])
	m.Twist.decode(d, "twist.twist")
	d.float64s("twist.covariance", m.TwistCovariance[:])
	return d.end(TypeOdometry)
}

// AppendCDR appends m as a CDR_LE payload to dst.
func (m *Odometry) AppendCDR(dst []byte) []byte {
	e := newCDREncoder(dst)
	m.Header.encode(e)
	e.string(m.ChildFrameID)
	m.Position.encode(e)
	m.Orientation.encode(e)
	e.float64s(m.PoseCovariance[:])
	m.Twist.encode(e)
	e.float64s(m.TwistCovariance[:])
	return e.buf
}

// TwistStamped is geometry_msgs/msg/TwistStamped.
type TwistStamped struct {
	Header Header
	Twist  Twist
}

// UnmarshalCDR decodes payload into m.
func (m *TwistStamped) UnmarshalCDR(payload []byte) error {
	d := newCDRDecoder(payload)
	m.Header.decode(d)
	m.Twist.decode(d, "twist")
	return d.end(TypeTwistStamped)
}

// AppendCDR appends m as a CDR_LE payload to dst.
func (m *TwistStamped) AppendCDR(dst []byte) []byte {
	e := newCDREncoder(dst)
	m.Header.encode(e)
	m.Twist.encode(e)
	return e.buf
}

// Imu is sensor_msgs/msg/Imu. A covariance whose first element is -1 marks
// a quantity the sensor does not provide (the message's own convention).
type Imu struct {
	Header                       Header
	Orientation                  Quaternion
	OrientationCovariance        [9]float64
	AngularVelocity              Vector3 // rad/s
	AngularVelocityCovariance    [9]float64
	LinearAcceleration           Vector3 // m/s^2
	LinearAccelerationCovariance [9]float64
}

// UnmarshalCDR decodes payload into m.
func (m *Imu) UnmarshalCDR(payload []byte) error {
	d := newCDRDecoder(payload)
	m.Header.decode(d)
	m.Orientation.decode(d, "orientation")
	d.float64s("orientation_covariance", m.OrientationCovariance[:])
	m.AngularVelocity.decode(d, "angular_velocity")
	d.float64s("angular_velocity_covariance", m.AngularVelocityCovariance[:])
	m.LinearAcceleration.decode(d, "linear_acceleration")
	d.float64s("linear_acceleration_covariance", m.LinearAccelerationCovariance[:])
	return d.end(TypeImu)
}

// AppendCDR appends m as a CDR_LE payload to dst.
func (m *Imu) AppendCDR(dst []byte) []byte {
	e := newCDREncoder(dst)
	m.Header.encode(e)
	m.Orientation.encode(e)
	e.float64s(m.OrientationCovariance[:])
	m.AngularVelocity.encode(e)
	e.float64s(m.AngularVelocityCovariance[:])
	m.LinearAcceleration.encode(e)
	e.float64s(m.LinearAccelerationCovariance[:])
	return e.buf
}

// TransformStamped is geometry_msgs/msg/TransformStamped: the pose of
// ChildFrameID in Header.FrameID (p_parent = R p_child + Translation).
type TransformStamped struct {
	Header       Header
	ChildFrameID string
	Translation  Vector3 // metres
	Rotation     Quaternion
}

// TFMessage is tf2_msgs/msg/TFMessage, the type of /tf and /tf_static.
type TFMessage struct {
	Transforms []TransformStamped
}

// maxTransforms bounds the transforms accepted in one TFMessage.
const maxTransforms = 4096

// UnmarshalCDR decodes payload into m.
func (m *TFMessage) UnmarshalCDR(payload []byte) error {
	d := newCDRDecoder(payload)
	// Each transform takes at least 4+4+4 (stamp, empty frame id) + 4
	// (child id) + 7*8 bytes.
	n := d.seqLen("transforms", 72)
	if n > maxTransforms {
		d.fail("transforms", "more than 4096 transforms")
	}
	m.Transforms = nil
	for i := 0; i < n && d.err == nil; i++ {
		var t TransformStamped
		t.Header.decode(d)
		t.ChildFrameID = d.string("transforms.child_frame_id")
		t.Translation.decode(d, "transforms.transform.translation")
		t.Rotation.decode(d, "transforms.transform.rotation")
		m.Transforms = append(m.Transforms, t)
	}
	return d.end(TypeTFMessage)
}

// AppendCDR appends m as a CDR_LE payload to dst.
func (m *TFMessage) AppendCDR(dst []byte) []byte {
	e := newCDREncoder(dst)
	e.uint32(uint32(len(m.Transforms)))
	for i := range m.Transforms {
		t := &m.Transforms[i]
		t.Header.encode(e)
		e.string(t.ChildFrameID)
		t.Translation.encode(e)
		t.Rotation.encode(e)
	}
	return e.buf
}
