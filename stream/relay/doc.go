// Package relay is the live core of stopgap: it takes one vehicle's video and
// telemetry from the WHIP ingest (package stopgap/stream/whip), decodes the
// video, keeps the motion filter up to date, and sends the operator console
// (package stopgap/stream/console) one labelled frame per display tick:
// LIVE when the real frame is here, otherwise PREDICTED or STALE from the
// gap filler (package stopgap/predictor).
//
// # Pass-through
//
// By default a LIVE frame is not re-encoded: the ingest forwards the
// vehicle's packets to the console (Console.ForwardFrame) as soon as the
// frame is complete and its VP8 header checks out, then decodes it for the
// gap filler; the display loop sends only its meta. The relay's encoder makes
// the PREDICTED and STALE frames, starting with a keyframe, and the LIVE ones
// until the vehicle's next keyframe, from which frames pass through again.
// A real frame still waiting to be encoded when a newer vehicle keyframe
// has passed through is not encoded (superseded): its tick is LIVE and only
// its meta goes out, since the console shows a newer real picture already.
// The rule and its reasons are in package stopgap/stream/passthru.
// Config.AlwaysTranscode encodes every frame instead.
//
// A frame that passed through is kept in the decoder's I420 form: the gap
// filler needs it as BGR only if a gap follows, so the two newest such
// frames are converted and handed to it on the first tick of a gap (or
// before a frame the relay encodes, or a late one), in capture order, and
// the filler then holds what it would have held had each been handed over
// at once. With recording or video ego-motion on, every frame is converted
// at once, since both read each one.
//
// # Display schedule
//
// The relay decides nothing about a tick itself: its display loop drives
// the one decision core, stopgap/stream/cadence's Clock, with real time, as
// the offline replay (stopgap/bench) drives it with virtual time. Tick k
// stands for frame k, whose capture time on the display grid (locked to the
// vehicle's capture times, following its rate and phase) is g_k on the
// vehicle clock. Its deadline on the receiver clock is
//
//	d_k = g_k + L + allowance
//
// where L is the nominal capture-to-arrival latency (receiver clock minus
// vehicle clock, so it includes the clock offset): Config.LatencyMs, or,
// when that is 0, the running median of (ready - capture) over the frames
// so far, frozen after cadence.LatencyFrames frames and logged. Frame k is
// LIVE if it was decoded by d_k, and it is shown as soon as it is decoded
// (no waiting for the deadline). Otherwise, at d_k, the tick is missing and
// the Filler fills it (target g_k) from the newest frame that arrived by
// d_k, with the operator's cutoff read once for that tick (the value
// recorded). A frame that arrives after its deadline becomes the held frame
// for later gaps but is not shown. Telemetry reaches the filter before the
// first tick whose deadline it arrived by. See cadence.Clock for the rule.
//
// # Capture times
//
// The capture time of a frame is its RTP timestamp mapped through the latest
// RTCP sender report (RFC 3550 section 6.4.1; the vehicle's sender report NTP
// time is the vehicle clock). Before the first sender report the first frame's
// RTP timestamp is anchored to its arrival time (logged); when the first report
// arrives the session's timeline is shifted onto the vehicle clock (logged),
// and the held frame is dropped because its capture time is on the old
// timeline. A frame's tick is the grid's (cadence.Grid.Observe); Config.FPS
// only sets the grid's starting period.
//
// # Losses
//
// A missing packet is first repaired: the WHIP session NACKs it at once and at
// the measured round trip (ingest.RepairStats), and the assembler waits for it
// as long as it is asked for (whip.Session.RepairSpan), even past the frame's
// deadline, since the frames after it reference it. A Loss from the RTP
// assembler (repair failed) or a decode error makes the frame missing: the
// decoder is told (Lost) and a keyframe request (RTCP PLI) is sent at once,
// repeated every KeyframeRetry (200 ms, common receiver practice) while the
// decoder waits for a keyframe, and sent at once when the link returns after a
// silence of KeyframeRetry (the requests sent meanwhile were lost): on the
// first video packet, or earlier on the sender's first telemetry message
// after a telemetry silence of its own. No repeat goes out while a keyframe
// that began arriving after the last request is still being assembled
// (rtpvp8.Assembler.KeyframeArriving). The WebRTC read loop is never blocked: the
// ingest queues are bounded and drop and count.
//
// # Recording
//
// With Config.RecordDir the relay writes a recording directory (package
// stopgap/stream/recording): camera.json; one frames.csv row per display tick
// with t_capture_us = c_k and the JPEG image if the frame arrived (also when
// it came late), a blank file field if it never did; arrivals.csv rows
// index,t_arrival_us,t_deadline_us (arrival = decoded, receiver clock, or one
// microsecond after the deadline for a frame decoded in time that reached the
// display loop only after its tick was filled; blank = never arrived), plus
// t_capture_us (c_k again) and rtp_timestamp (the RTP timestamp the frame
// arrived with, blank if it never did), which pair the session with the
// vehicle's onboard recording; telemetry.csv with t_arrival_us; and ShownFile (shown.csv)
// with what the relay showed. Rows are written by a separate goroutine so JPEG
// encoding and fsyncs never delay the display. Recording starts at the first
// tick whose capture time is on the vehicle clock (after the first sender
// report); ticks before it are shown but not recorded. Replaying the directory
// with its arrivals (stopgap replay --arrivals DIR/arrivals.csv) makes the
// same LIVE/PREDICTED/STALE decisions: the replay uses each tick's recorded
// deadline (t_deadline_us) rather than estimating the latency, and both give
// the filter the telemetry that arrived by each tick's deadline.
//
// # Safety
//
// Every missing tick produces a PREDICTED or STALE frame, labelled in the
// pixels by the predictor: the console never shows an unlabelled frozen
// picture. Predicted frames move the static scene only; anything that moved
// during the gap is not in them.
//
// # Operations
//
// Relay.Handler serves the WHIP ingest at /whip, the operator console at /,
// /healthz (JSON, no token: it reveals only liveness counters) and /metrics
// (Prometheus text exposition format, bearer token of the console required).
package relay
