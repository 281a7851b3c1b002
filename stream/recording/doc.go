// Package recording reads and writes the stopgap recording directory: one
// drive's video frames, vehicle telemetry and (optionally) receiver arrival
// times and ground truth, in plain CSV and JSON files so that a recording can
// be inspected and edited with ordinary tools.
//
// # Directory layout
//
//	camera.json     camera intrinsics and mounting (see [Camera])
//	frames.csv      index,t_capture_us,file[,rtp_timestamp]   one row per frame, file relative to the directory
//	                or index,t_capture_us          with a single video.<ext> file in the directory
//	telemetry.csv   t_us,speed_mps,yaw_rate_rps[,accel_mps2][,steer_rad][,t_arrival_us]
//	arrivals.csv    index,t_arrival_us[,t_deadline_us][,t_capture_us][,rtp_timestamp]
//	                optional; blank t_arrival_us = never arrived
//	shown.csv       tick,state,age_ms,confidence,cutoff   a live session's decisions (ShownFile)
//	truth.csv       index,t_capture_us,x_m,y_m,yaw_rad,speed_mps,yaw_rate_rps   optional
//
// # Conventions
//
// All times are integer microseconds. t_capture_us and t_us are on the
// VEHICLE clock; t_arrival_us is on the RECEIVER clock. Units are SI and are
// carried in the column names. Vehicle axes follow ISO 8855 (x forward,
// y left, z up, positive yaw rate turns left). Truth poses (x_m, y_m,
// yaw_rad) are the vehicle origin in a fixed world frame whose axes coincide
// with the vehicle axes at the start of the drive.
//
// # CSV dialect
//
// Comma separated, one header line, LF or CRLF line ends, an optional UTF-8
// byte order mark, no quoting (a '"' anywhere is an error, so file names
// must not contain commas, quotes or line breaks). Spaces around fields are
// trimmed. Columns are found by header name in any order; unknown columns
// are ignored with a warning; a missing required column is an error.
// Empty lines are errors. Optional columns (accel_mps2, steer_rad,
// t_arrival_us) may be left blank in a row, meaning "not measured".
//
// # Strictness and crash tolerance
//
// [Open] rejects anything it cannot read unambiguously with a [*ParseError]
// naming the file, line and column: malformed numbers, NaN or infinities,
// capture or sample times that do not strictly increase, duplicate or
// non-consecutive frame indices, missing frame files, arrivals for unknown
// frames and invalid camera parameters.
//
// The one exception is the trace a killed [Writer] leaves: if the last line
// of a CSV file has no trailing newline AND fails to parse, it is dropped and
// a warning is recorded in [Recording.Warnings]. A last line without a
// newline that does parse is kept. Rows of arrivals.csv and truth.csv for
// frames after the last frame are dropped with a warning when they form a
// trailing run at the end of the file (frames.csv lost its last lines); an
// unknown index followed by a known one is an error. Telemetry after the
// last frame is normal.
//
// The [Writer] makes this trace small: each frame image is written to a
// temporary name, synced and renamed into place before its CSV line is
// appended with a single write, so every complete frames.csv line refers to
// a complete image. Image files without a CSV line (a kill between the two
// steps) are simply not part of the recording.
//
// # Pairing a session with an onboard recording
//
// [PairFrames] pairs the rows of a live session (its arrivals) with the
// frames of the vehicle's own recording of the same drive, by RTP timestamp
// where both sides have one and otherwise by capture time on the vehicle
// clock within a tolerance; [PairTelemetry] pairs telemetry rows by t_us.
//
// This package is pure Go (no cgo) and does not decode images or video.
package recording
