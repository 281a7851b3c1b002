// Package ros2 reads and writes ROS 2 recordings in MCAP files: the few
// message types stopgap needs, a small CDR codec for their payloads, the
// conversion between ROS axes and ours, an importer that turns an MCAP file
// into a recording directory (package stopgap/stream/recording) and an
// exporter that writes a recording, or a replay's shown frames and states,
// to MCAP.
//
// # Formats
//
//   - MCAP (the open container format with the "ros2" profile): read and
//     written with github.com/foxglove/mcap/go/mcap. Channels must use the
//     "cdr" message encoding and name their schema as ROS 2 does
//     ("sensor_msgs/msg/CompressedImage").
//   - CDR: the OMG Common Data Representation as DDS-RTPS carries it
//     (OMG DDS-RTPS 2.x, section 10 "Serialized Payload Representation";
//     OMG CORBA 3.x part 2, section 9.3 "CDR Transfer Syntax";
//     plain CDR, XCDR version 1, as DDS-XTypes 1.3 section 7.4 calls it):
//     a 4-byte encapsulation header (representation identifier 0x0000 for
//     big-endian CDR_BE or 0x0001 for little-endian CDR_LE, then 2 bytes of
//     options), then the fields in declaration order, each primitive aligned
//     to its own size (8 bytes for float64) counted from the first byte after
//     the header; strings are a uint32 length that includes the terminating
//     NUL, the bytes and the NUL; sequences are a uint32 element count and
//     the elements; fixed arrays are the elements alone.
//
// # Axes
//
// ROS body frames follow REP 103: x forward, y left, z up, the same as
// ISO 8855, which stopgap uses for the vehicle; so a twist's linear x is the
// longitudinal speed and its angular z the yaw rate, positive to the left,
// with no sign change ([VehicleFromROS]). Camera frames in ROS are
// "optical" frames (REP 103 suffix _optical): x right, y down, z forward,
// the same as OpenCV's and ours; the mount is the transform from the base
// frame to that optical frame ([MountFromTransform], [TransformFromMount]).
//
// Time: a ROS stamp (builtin_interfaces/Time: int32 sec, uint32 nanosec)
// maps to integer microseconds on the vehicle clock, truncating the
// nanoseconds below one microsecond ([Time.Us]).
package ros2
