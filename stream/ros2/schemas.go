package ros2

import "strings"

// Message definitions written into MCAP schema records (encoding "ros2msg"):
// the type's own fields, then each type it uses, after a separator line of
// 80 '=' and a "MSG: package/Type" line, as ROS 2 recorders write them.
// Field lists follow the ROS 2 interface definitions (common_interfaces,
// rcl_interfaces), comments left out.

const msgSeparator = "================================================================================\n"

var msgDefs = map[string]string{
	"builtin_interfaces/Time":           "int32 sec\nuint32 nanosec\n",
	"std_msgs/Header":                   "builtin_interfaces/Time stamp\nstring frame_id\n",
	"geometry_msgs/Vector3":             "float64 x\nfloat64 y\nfloat64 z\n",
	"geometry_msgs/Point":               "float64 x\nfloat64 y\nfloat64 z\n",
	"geometry_msgs/Quaternion":          "float64 x 0\nfloat64 y 0\nfloat64 z 0\nfloat64 w 1\n",
	"geometry_msgs/Pose":                "Point position\nQuaternion orientation\n",
	"geometry_msgs/PoseWithCovariance":  "Pose pose\nfloat64[36] covariance\n",
	"geometry_msgs/Twist":               "Vector3 linear\nVector3 angular\n",
	"geometry_msgs/TwistWithCovariance": "Twist twist\nfloat64[36] covariance\n",
	"geometry_msgs/Transform":           "Vector3 translation\nQuaternion rotation\n",
	"geometry_msgs/TransformStamped":    "std_msgs/Header header\nstring child_frame_id\nTransform transform\n",
	"sensor_msgs/RegionOfInterest":      "uint32 x_offset\nuint32 y_offset\nuint32 height\nuint32 width\nbool do_rectify\n",

	TypeCompressedImage: "std_msgs/Header header\nstring format\nuint8[] data\n",
	TypeImage:           "std_msgs/Header header\nuint32 height\nuint32 width\nstring encoding\nuint8 is_bigendian\nuint32 step\nuint8[] data\n",
	TypeCameraInfo: "std_msgs/Header header\nuint32 height\nuint32 width\nstring distortion_model\nfloat64[] d\n" +
		"float64[9] k\nfloat64[9] r\nfloat64[12] p\nuint32 binning_x\nuint32 binning_y\nRegionOfInterest roi\n",
	TypeOdometry:     "std_msgs/Header header\nstring child_frame_id\ngeometry_msgs/PoseWithCovariance pose\ngeometry_msgs/TwistWithCovariance twist\n",
	TypeTwistStamped: "std_msgs/Header header\nTwist twist\n",
	TypeImu: "std_msgs/Header header\ngeometry_msgs/Quaternion orientation\nfloat64[9] orientation_covariance\n" +
		"geometry_msgs/Vector3 angular_velocity\nfloat64[9] angular_velocity_covariance\n" +
		"geometry_msgs/Vector3 linear_acceleration\nfloat64[9] linear_acceleration_covariance\n",
	TypeTFMessage: "geometry_msgs/TransformStamped[] transforms\n",
}

// msgDeps lists, for each type written, the types its definition uses, in
// the order they are appended.
var msgDeps = map[string][]string{
	TypeCompressedImage: {"std_msgs/Header", "builtin_interfaces/Time"},
	TypeImage:           {"std_msgs/Header", "builtin_interfaces/Time"},
	TypeCameraInfo:      {"std_msgs/Header", "builtin_interfaces/Time", "sensor_msgs/RegionOfInterest"},
	TypeOdometry: {"std_msgs/Header", "builtin_interfaces/Time", "geometry_msgs/PoseWithCovariance",
		"geometry_msgs/Pose", "geometry_msgs/Point", "geometry_msgs/Quaternion",
		"geometry_msgs/TwistWithCovariance", "geometry_msgs/Twist", "geometry_msgs/Vector3"},
	TypeTwistStamped: {"std_msgs/Header", "builtin_interfaces/Time", "geometry_msgs/Twist", "geometry_msgs/Vector3"},
	TypeImu:          {"std_msgs/Header", "builtin_interfaces/Time", "geometry_msgs/Quaternion", "geometry_msgs/Vector3"},
	TypeTFMessage: {"geometry_msgs/TransformStamped", "std_msgs/Header", "builtin_interfaces/Time",
		"geometry_msgs/Transform", "geometry_msgs/Vector3", "geometry_msgs/Quaternion"},
}

// schemaText returns the ros2msg definition of typ with its dependencies.
func schemaText(typ string) []byte {
	var b strings.Builder
	b.WriteString(msgDefs[typ])
	for _, dep := range msgDeps[typ] {
		b.WriteString(msgSeparator)
		b.WriteString("MSG: " + dep + "\n")
		b.WriteString(msgDefs[dep])
	}
	return []byte(b.String())
}
