package relay

import (
	"fmt"
	"io"
	"math"
	"sort"
	"sync"
	"sync/atomic"
	"time"
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

// metrics are the relay's counters and histograms. Safe for concurrent use.
type metrics struct {
	framesIn, losses, keyframeRequests, keyframeRequestsFailed atomic.Uint64
	ticksLive, ticksPredicted, ticksStale                      atomic.Uint64
	lateFrames, decodeErrors, framesDropped                    atomic.Uint64
	framesMovedOn                                              atomic.Uint64
	telemetryIn, recordErrors, sessions                        atomic.Uint64
	telemetryRejected, rtpDropped                              labelled

	// Loss repair (see whip.RepairStats), summed over sessions; repairRTTUs
	// is the latest session's round-trip estimate.
	repairGaps, repairRepaired, repairGaveUp, repairCancelled, repairSkipped, repairRTTUs atomic.Uint64

	addedLatency, decode, encode, synth *histogram
}

func newMetrics() *metrics {
	return &metrics{addedLatency: newHistogram(), decode: newHistogram(), encode: newHistogram(), synth: newHistogram()}
}

// writeText writes the metrics in the Prometheus text exposition format
// (version 0.0.4).
func (m *metrics) writeText(w io.Writer, active int) {
	counter := func(name, help string, v uint64) {
		fmt.Fprintf(w, "# HELP %s %s\n# TYPE %s counter\n%s %d\n", name, help, name, name, v)
	}
	counter("frames_in", "Video frames received complete and decoded.", m.framesIn.Load())
	fmt.Fprintf(w, "# HELP ticks Display ticks sent to the console, by state.\n# TYPE ticks counter\n")
	fmt.Fprintf(w, "ticks{state=\"live\"} %d\nticks{state=\"predicted\"} %d\nticks{state=\"stale\"} %d\n",
		m.ticksLive.Load(), m.ticksPredicted.Load(), m.ticksStale.Load())
	counter("losses", "Frame losses: assembler loss events and decode errors.", m.losses.Load())
	counter("keyframe_requests", "Keyframe requests (RTCP PLI) sent to the vehicle.", m.keyframeRequests.Load())
	counter("repair_gaps", "Missing RTP packets asked for with a NACK (each once).", m.repairGaps.Load())
	counter("repair_repaired", "Missing RTP packets that arrived after all (retransmission or reordering).", m.repairRepaired.Load())
	counter("repair_gave_up", "Missing RTP packets no longer asked for: NACK cap or repair window reached.", m.repairGaveUp.Load())
	counter("repair_skipped", "Missing RTP packets never asked for: a gap after an outage or too large to repair.", m.repairSkipped.Load())
	counter("repair_cancelled", "Missing RTP packets no longer asked for because a keyframe was requested.", m.repairCancelled.Load())
	fmt.Fprintf(w, "# HELP repair_rtt_seconds Smoothed NACK-to-retransmission round trip of the latest session.\n# TYPE repair_rtt_seconds gauge\nrepair_rtt_seconds %g\n", float64(m.repairRTTUs.Load())/1e6)
	counter("late_frames", "Frames decoded after their display deadline (held, not shown).", m.lateFrames.Load())
	counter("frames_moved_on", "Frames shown LIVE on the first open tick because their own tick was already handled (sender capture jitter).", m.framesMovedOn.Load())
	counter("frames_dropped", "Decoded frames dropped because the display loop was behind.", m.framesDropped.Load())
	counter("telemetry_in", "Telemetry samples accepted by the filter.", m.telemetryIn.Load())
	counter("record_errors", "Recording writes that failed.", m.recordErrors.Load())
	counter("sessions", "Ingest sessions served.", m.sessions.Load())
	m.telemetryRejected.write(w, "telemetry_rejected", "reason", "Telemetry messages rejected, by reason (decode_* by the decoder, filter_* by the filter, queue_full, too_late: arrived later than the filter history after it was taken).")
	m.rtpDropped.write(w, "rtp_dropped", "reason", "RTP packets not used, by reason.")
	fmt.Fprintf(w, "# HELP active_sessions Ingest sessions being served now.\n# TYPE active_sessions gauge\nactive_sessions %d\n", active)
	m.addedLatency.write(w, "relay_added_latency_seconds", "Time from the last packet of a LIVE frame to console WriteFrame, excluding decode and encode.")
	m.decode.write(w, "decode_seconds", "VP8 decode plus I420 to BGR conversion per frame.")
	m.encode.write(w, "encode_seconds", "VP8 encode per output frame.")
	m.synth.write(w, "synth_seconds", "Gap filler time per PREDICTED or STALE tick.")
}
