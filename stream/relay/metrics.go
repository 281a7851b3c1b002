package relay

import (
	"fmt"
	"io"
	"math"
	rtmetrics "runtime/metrics"
	"sort"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"stopgap/internal/display"
	"stopgap/stream/passthru"
)

// histogram is a fixed-bucket Prometheus histogram of durations in seconds.
type histogram struct {
	mu      sync.Mutex
	bounds  []float64 // upper bounds, seconds, ascending
	counts  []uint64  // per bucket (not cumulative); len(bounds)+1 with +Inf last
	sum     float64
	samples uint64
}

// durationBuckets are the histogram bounds in seconds: 0.5 ms to 1 s, roughly
// 1-2-5 steps (common practice for latency histograms).
var durationBuckets = []float64{0.0005, 0.001, 0.002, 0.005, 0.01, 0.02, 0.05, 0.1, 0.2, 0.5, 1}

func newHistogram() *histogram {
	return &histogram{bounds: durationBuckets, counts: make([]uint64, len(durationBuckets)+1)}
}

// observe adds one duration. Negative durations count as zero.
func (h *histogram) observe(d time.Duration) {
	s := d.Seconds()
	if s < 0 || math.IsNaN(s) {
		s = 0
	}
	i := sort.SearchFloat64s(h.bounds, s) // first bound >= s
	h.mu.Lock()
	h.counts[i]++
	h.sum += s
	h.samples++
	h.mu.Unlock()
}

// quantile returns an upper-bound estimate of quantile q in seconds (the
// bucket bound), or 0 without samples.
func (h *histogram) quantile(q float64) float64 {
	h.mu.Lock()
	defer h.mu.Unlock()
	if h.samples == 0 {
		return 0
	}
	target := uint64(math.Ceil(q * float64(h.samples)))
	var cum uint64
	for i, c := range h.counts {
		cum += c
		if cum >= target {
			if i < len(h.bounds) {
				return h.bounds[i]
			}
			return math.Inf(1)
		}
	}
	return math.Inf(1)
}

func (h *histogram) write(w io.Writer, name, help string) {
	h.mu.Lock()
	defer h.mu.Unlock()
	fmt.Fprintf(w, "# HELP %s %s\n# TYPE %s histogram\n", name, help, name)
	var cum uint64
	for i, b := range h.bounds {
		cum += h.counts[i]
		fmt.Fprintf(w, "%s_bucket{le=\"%g\"} %d\n", name, b, cum)
	}
	cum += h.counts[len(h.bounds)]
	fmt.Fprintf(w, "%s_bucket{le=\"+Inf\"} %d\n%s_sum %g\n%s_count %d\n", name, cum, name, h.sum, name, h.samples)
}

// labelled is a set of counters keyed by one label value.
type labelled struct {
	mu sync.Mutex
	m  map[string]uint64
}

func (l *labelled) inc(v string) { l.add(v, 1) }

func (l *labelled) add(v string, n uint64) {
	l.mu.Lock()
	if l.m == nil {
		l.m = map[string]uint64{}
	}
	l.m[v] += n
	l.mu.Unlock()
}

func (l *labelled) total() uint64 {
	l.mu.Lock()
	defer l.mu.Unlock()
	var t uint64
	for _, v := range l.m {
		t += v
	}
	return t
}

func (l *labelled) write(w io.Writer, name, label, help string) {
	l.mu.Lock()
	defer l.mu.Unlock()
	fmt.Fprintf(w, "# HELP %s %s\n# TYPE %s counter\n", name, help, name)
	keys := make([]string, 0, len(l.m))
	for k := range l.m {
		keys = append(keys, k)
	}
	sort.Strings(keys)
	for _, k := range keys {
		fmt.Fprintf(w, "%s{%s=%q} %d\n", name, label, k, l.m[k])
	}
}

// MetricPrefix starts the name of every metric the relay exports, so that
// they sort together and cannot clash with another exporter's (Prometheus
// naming practice: one application prefix; counters end in _total, units
// are base units such as seconds).
const MetricPrefix = "stopgap_"

// metrics are the relay's counters, histograms and gauges. Safe for
// concurrent use.
type metrics struct {
	framesIn, losses, keyframeRequestsFailed          atomic.Uint64
	keyframeRequests                                  [keyReasonCount]atomic.Uint64          // by keyframeReason
	ticks                                             [len(display.States) + 1]atomic.Uint64 // by display.State
	lateFrames, decodeErrors, framesDropped, overruns atomic.Uint64
	framesWaiting                                     atomic.Uint64 // ticks not drawn: a newer frame waited (pipeline.Missing)
	framesMovedOn, framesResumed                      atomic.Uint64
	framesSuperseded                                  atomic.Uint64
	telemetryIn, recordErrors, sessions               atomic.Uint64
	telemetryRejected, rtpDropped                     labelled

	// Loss repair (see ingest.RepairStats), summed over sessions; repairRTTUs
	// is the latest session's round-trip estimate.
	repairGaps, repairRepaired, repairGaveUp, repairCancelled, repairSkipped, repairRTTUs atomic.Uint64

	// The latest tick sent to the console: its state (display.State as
	// an int, 0 before the first tick) and its picture age in microseconds.
	stateNow   atomic.Int32
	pictureAge atomic.Int64

	addedLatency, decode, encode, synth *histogram
}

// keyframeRequestsSent returns the keyframe requests sent, every reason.
func (m *metrics) keyframeRequestsSent() uint64 {
	var n uint64
	for i := range m.keyframeRequests {
		n += m.keyframeRequests[i].Load()
	}
	return n
}

func newMetrics() *metrics {
	return &metrics{addedLatency: newHistogram(), decode: newHistogram(), encode: newHistogram(), synth: newHistogram()}
}

// tick counts a tick decided in state st and makes it the latest: its
// state and picture age are the current ones. A NOT_SHOWN tick keeps the
// picture age of the tick before it (the picture on screen did not change).
func (m *metrics) tick(st display.State, ageMs float64) {
	if st.Valid() {
		m.ticks[st].Add(1)
	}
	m.stateNow.Store(int32(st))
	if st != display.StateNotShown {
		m.pictureAge.Store(int64(math.Round(ageMs * 1000)))
	}
}

// writeText writes the metrics in the Prometheus text exposition format
// (version 0.0.4). Every name starts with MetricPrefix; state label values
// are the lower-case String names of display.State (every state, one series each).
func (m *metrics) writeText(w io.Writer, active int, pt passthru.Stats) {
	const p = MetricPrefix
	counter := func(name, help string, v uint64) {
		name = p + name + "_total"
		fmt.Fprintf(w, "# HELP %s %s\n# TYPE %s counter\n%s %d\n", name, help, name, name, v)
	}
	gauge := func(name, help string, v float64) {
		name = p + name
		fmt.Fprintf(w, "# HELP %s %s\n# TYPE %s gauge\n%s %g\n", name, help, name, name, v)
	}
	counter("frames_in", "Video frames received complete and decoded.", m.framesIn.Load())
	counter("tick_overruns", "Ticks decided but not drawn (not_shown) because the display loop was more than a period behind their deadline: the machine is too busy for the relay.", m.overruns.Load())
	counter("ticks_not_drawn_frame_waiting", "Ticks without a frame decided but not drawn (not_shown) because a newer real frame already waited for the display loop: the machine is too busy for the relay.", m.framesWaiting.Load())
	fmt.Fprintf(w, "# HELP %[1]sticks_total Display ticks decided, by state.\n# TYPE %[1]sticks_total counter\n", p)
	for _, st := range display.States {
		fmt.Fprintf(w, "%sticks_total{state=%q} %d\n", p, strings.ToLower(st.String()), m.ticks[st].Load())
	}
	now := display.State(m.stateNow.Load())
	fmt.Fprintf(w, "# HELP %[1]sframe_state State of the latest display tick: 1 for its state, 0 for the others (all 0 before the first tick).\n# TYPE %[1]sframe_state gauge\n", p)
	for _, st := range display.States {
		v := 0
		if st == now {
			v = 1
		}
		fmt.Fprintf(w, "%sframe_state{state=%q} %d\n", p, strings.ToLower(st.String()), v)
	}
	gauge("picture_age_seconds", "Picture age of the latest display tick: time from the capture of the newest real frame on screen to the tick.", float64(m.pictureAge.Load())/1e6)
	counter("frames_forwarded", "Video frames passed through to the console untouched (pass-through mode).", pt.Forwarded)
	fmt.Fprintf(w, "# HELP %[1]spassthru_stops_total Runs of passed-through frames ended, by reason (the relay's encoder took over until the next vehicle keyframe).\n# TYPE %[1]spassthru_stops_total counter\n", p)
	for r := passthru.StopInvalid + 1; int(r) < len(pt.Stops); r++ {
		fmt.Fprintf(w, "%spassthru_stops_total{reason=%q} %d\n", p, r.String(), pt.Stops[r])
	}
	counter("passthru_own_refused", "Frames of the relay's own not sent because a newer real frame had passed through already (a filled tick becomes not_shown, a transcoded one superseded).", pt.RefusedOwn)
	counter("passthru_keyframes_waited", "Vehicle keyframes that waited for the relay to finish writing a frame of its own before they passed through.", pt.WaitedKeyframes)
	counter("losses", "Frame losses: assembler loss events and decode errors.", m.losses.Load())
	counter("decode_errors", "Frames the VP8 decoder could not decode.", m.decodeErrors.Load())
	fmt.Fprintf(w, "# HELP %[1]skeyframe_requests_total Keyframe requests (RTCP PLI) sent to the vehicle, by reason.\n# TYPE %[1]skeyframe_requests_total counter\n", p)
	for r := keyReasonInvalid + 1; r < keyReasonCount; r++ {
		fmt.Fprintf(w, "%skeyframe_requests_total{reason=%q} %d\n", p, r.String(), m.keyframeRequests[r].Load())
	}
	counter("keyframe_requests_failed", "Keyframe requests that could not be sent (no track yet, rate limit, closed session).", m.keyframeRequestsFailed.Load())
	counter("repair_gaps", "Missing RTP packets asked for with a NACK (each once).", m.repairGaps.Load())
	counter("repair_repaired", "Missing RTP packets that arrived after all (retransmission or reordering).", m.repairRepaired.Load())
	counter("repair_gave_up", "Missing RTP packets no longer asked for: NACK cap or repair window reached.", m.repairGaveUp.Load())
	counter("repair_skipped", "Missing RTP packets never asked for: a gap after an outage or too large to repair.", m.repairSkipped.Load())
	counter("repair_cancelled", "Missing RTP packets no longer asked for because a keyframe was requested.", m.repairCancelled.Load())
	gauge("repair_rtt_seconds", "Smoothed NACK-to-retransmission round trip of the latest session.", float64(m.repairRTTUs.Load())/1e6)
	counter("late_frames", "Frames decoded after their display deadline (held, not shown).", m.lateFrames.Load())
	counter("frames_moved_on", "Frames shown LIVE on the first open tick because their own tick was already handled (sender capture jitter, or the first frame after an outage).", m.framesMovedOn.Load())
	counter("frames_resumed", "Frames of frames_moved_on shown late after an outage: the picture on screen had passed the age cap.", m.framesResumed.Load())
	counter("frames_superseded", "LIVE frames not sent because a newer vehicle keyframe had passed through to the console while they waited for the display loop (only their meta is sent).", m.framesSuperseded.Load())
	counter("frames_dropped", "Decoded frames dropped because the display loop was behind.", m.framesDropped.Load())
	counter("telemetry_in", "Telemetry samples accepted by the filter.", m.telemetryIn.Load())
	counter("record_errors", "Recording writes that failed.", m.recordErrors.Load())
	counter("sessions", "Ingest sessions served.", m.sessions.Load())
	m.telemetryRejected.write(w, p+"telemetry_rejected_total", "reason", "Telemetry messages rejected, by reason (decode_* by the decoder, filter_* by the filter, queue_full, too_late: arrived later than the filter history after it was taken).")
	m.rtpDropped.write(w, p+"rtp_dropped_total", "reason", "RTP packets not used, by reason.")
	gauge("active_sessions", "Ingest sessions being served now.", float64(active))
	m.addedLatency.write(w, p+"added_latency_seconds", "Time from the last packet of a LIVE frame to its hand-over to the console: ForwardFrame when passed through, else WriteFrame excluding decode and encode.")
	m.decode.write(w, p+"decode_seconds", "VP8 decode per frame, plus the I420 to BGR conversion for frames converted at once (not passed through, or recording or video ego-motion on).")
	m.encode.write(w, p+"encode_seconds", "VP8 encode per output frame.")
	m.synth.write(w, p+"synth_seconds", "Gap filler time per PREDICTED or STALE tick.")
	writeRuntime(w)
}

// runtimeSeries are the Go runtime's own figures the exposition carries:
// what the relay's process costs the machine besides its codec work (every
// goroutine started and every OS thread is scheduling work; see DEVELOPERS,
// the relay's CPU record). Each maps a runtime/metrics name to ours.
var runtimeSeries = []struct {
	runtimeName, name, help string
	counter                 bool
}{
	{"/sched/goroutines:goroutines", "process_goroutines", "Goroutines in the relay's process now.", false},
	{"/sched/goroutines-created:goroutines", "process_goroutines_created", "Goroutines started since the process started (a per-message goroutine of a library shows here as a steady rate).", true},
	{"/sched/threads/total:threads", "process_threads", "OS threads of the relay's process now.", false},
	{"/gc/cycles/total:gc-cycles", "process_gc_cycles", "Garbage collections since the process started.", true},
}

// writeRuntime writes runtimeSeries; a series the running Go does not know is
// left out rather than written as zero.
func writeRuntime(w io.Writer) {
	samples := make([]rtmetrics.Sample, len(runtimeSeries))
	for i, s := range runtimeSeries {
		samples[i].Name = s.runtimeName
	}
	rtmetrics.Read(samples)
	for i, s := range runtimeSeries {
		if samples[i].Value.Kind() != rtmetrics.KindUint64 {
			continue
		}
		name, typ := MetricPrefix+s.name, "gauge"
		if s.counter {
			name, typ = name+"_total", "counter"
		}
		fmt.Fprintf(w, "# HELP %s %s\n# TYPE %s %s\n%s %d\n", name, s.help, name, typ, name, samples[i].Value.Uint64())
	}
}
