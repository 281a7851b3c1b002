// Package simvehicle is a simulated vehicle for the live relay: it plays a
// recording directory (package stopgap/stream/recording, e.g. one written by
// bench/simdrive) in real time and publishes it over WHIP like a vehicle
// would, through an emulated lossy link.
//
// # Pipeline
//
// Per frame: JPEG file -> I420 (BT.601 limited range) -> real-time VP8
// encoder (stream/vp8) -> RFC 7741 packetiser (stream/rtpvp8) -> Link
// (delay line) -> whip.Publisher.WriteRTP -> NACK buffer -> Link wire
// filter (Gilbert-Elliott loss and scripted outages) -> network.
// Per telemetry row: telemetry.Encode -> Link (same delay line, outages)
// -> whip.Publisher.SendTelemetry.
//
// A keyframe request (RTCP PLI or FIR) from the relay makes the next frame a
// keyframe (vp8.Encoder.ForceKeyframe).
//
// # Clocks
//
// The vehicle clock is the injectable Clock (SystemClock by default). When
// playback starts at vehicle time S, a recording time t (microseconds, the
// recording's own clock) is played at S + (t - t0), where t0 is the earliest
// frame or telemetry time of the recording, plus one loop length per
// completed loop when Config.Loop is set. Telemetry messages carry that
// vehicle time in Unix microseconds (t_us), and the RTP timestamp of a frame
// is a random base plus the same time at 90 kHz, so the two are on one clock.
//
// RTCP sender reports are sent by whip.Publish itself (pion's report
// interceptor, PublishConfig.SenderReportInterval). They pair the system
// clock with the RTP timestamp of the latest packet handed to the
// Publisher, advanced by the time since it was handed over. Because the
// emulated delay is applied before the Publisher (see Link), the mapping of
// an RTP timestamp through a sender report gives capture time + encode time
// + the emulated one-way delay of that packet, not the capture time alone.
//
// # Loop seam
//
// With Config.Loop the drive restarts from its first frame: the picture and
// the telemetry jump back to the start of the drive, which no real vehicle
// does. A prediction across the seam is wrong; the relay should show that as
// a low-quality prediction or STALE, never as LIVE.
package simvehicle
