// Package telemetry encodes and decodes the vehicle telemetry message that
// travels from the vehicle to the operator station on a WebRTC data channel,
// or in UDP datagrams from cameras that do not speak WebRTC.
//
// # Wire format
//
// One message is one UTF-8 JSON object (RFC 8259) of at most
// [MaxMessageBytes] octets: one data channel message or one UDP datagram.
//
//	{"t_us":1712345678901234,"speed_mps":12.5,"yaw_rate_rps":-0.031,
//	 "accel_mps2":0.4,"steer_rad":-0.02,"seq":4711}
//
// Keys (exact, case-sensitive):
//
//	t_us          required  integer, microseconds on the VEHICLE clock when
//	                        the values were measured; 0 <= t_us <= 2^53-1
//	speed_mps     required  number, longitudinal speed in m/s, negative
//	                        when reversing
//	yaw_rate_rps  required  number, yaw rate in rad/s, positive turning
//	                        left (ISO 8855: z up, counter-clockwise seen
//	                        from above)
//	accel_mps2    optional  number, longitudinal acceleration in m/s^2
//	steer_rad     optional  number, front road-wheel angle in rad,
//	                        positive to the left
//	seq           optional  integer 0..4294967295, sender's message
//	                        counter (wraps), for loss and reorder counts
//
// Decoding rules: unknown keys are ignored, so a newer sender can add
// fields; a known key with a value of the wrong type (string, null, object,
// a fraction where an integer is required) is rejected, as are missing
// required keys, any key given twice, numbers outside the sanity bounds
// ([MaxAbsSpeedMps] and friends), invalid UTF-8, anything but an object at
// the top level, and anything but white space after it. An optional key is
// absent by being left out; null is not accepted for it. Every rejection is
// a [*DecodeError] whose [Reason] can be counted.
//
// The sanity bounds reject garbage and gross unit mistakes only; they are
// deliberately looser than the physical limits the filter package applies,
// so that plausible-looking but impossible values are still counted there.
//
// The numeric fields use the units of the name (SI; time in microseconds).
package telemetry
