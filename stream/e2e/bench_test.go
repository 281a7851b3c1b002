package e2e

import (
	"bufio"
	"context"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"runtime/pprof"
	"slices"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"

	"stopgap/internal/display"
	"stopgap/stream/relay"
	"stopgap/stream/simvehicle"
)

// cpuTime returns the process's user + system CPU time (getrusage(2)).
func cpuTime(b *testing.B) time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		b.Fatal(err)
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// scrapeMetrics reads the relay's /metrics and returns name -> value for
// the unlabelled samples.
func scrapeMetrics(b *testing.B, base string) map[string]float64 {
	req, _ := http.NewRequest(http.MethodGet, base+"/metrics", nil)
	req.Header.Set("Authorization", "Bearer "+consoleToken)
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		b.Fatal(err)
	}
	defer resp.Body.Close()
	if resp.StatusCode != http.StatusOK {
		b.Fatalf("/metrics: %s", resp.Status)
	}
	out := map[string]float64{}
	sc := bufio.NewScanner(resp.Body)
	for sc.Scan() {
		line := sc.Text()
		if strings.HasPrefix(line, "#") || strings.Contains(line, "{") {
			continue
		}
		name, val, ok := strings.Cut(line, " ")
		if !ok {
			continue
		}
		if f, err := strconv.ParseFloat(val, 64); err == nil {
			out[name] = f
		}
	}
	return out
}

func quantile(sorted []float64, q float64) float64 {
	if len(sorted) == 0 {
		return math.NaN()
	}
	i := int(math.Ceil(q*float64(len(sorted)))) - 1
	return sorted[max(0, min(i, len(sorted)-1))]
}

// BenchmarkLoopback1280x720 streams one 1280x720 30 fps drive from the
// simulated vehicle through the relay to a Go viewer of the console, all on
// loopback with a perfect link, for 4 s per iteration, once with LIVE frames
// passed through (mode=passthru, the default) and once with every frame
// through the relay's encoder (mode=transcode), one after the other in the
// same run; the parent logs the ratios of the two. Each output frame is
// traced in the relay (Relay.TraceFrames: its input's decode time, its encode
// time, when it was written) and matched to its arrival at the viewer (the
// marker packet of the output video frame) and, for LIVE frames, to the
// vehicle frame it shows (RTP timestamp, wire filter). It reports:
//
//   - e2e-p50-ms, e2e-p99-ms: for LIVE frames, from the last packet of the
//     input frame leaving the vehicle (wire filter) to the last packet of the
//     output video frame reaching the viewer. Included: loopback to the
//     relay, RTP assembly, VP8 decode and I420->BGR, the display schedule,
//     the copy through the gap filler, VP8 encode, RTP packetisation, SRTP,
//     loopback to the viewer and the viewer's read. Not included: the
//     vehicle's encode and anything after the viewer's packet read (its
//     decode and display);
//   - added-p50-ms, added-p99-ms: the same per frame minus that frame's own
//     relay decode and encode times (the relay's added latency without the
//     codec, to the viewer's socket); a frame that passed through had
//     neither on its path, so nothing is subtracted;
//   - fwd-p50-ms, fwd-p99-ms (pass-through): for LIVE frames that passed
//     through, the relay's own part: from the arrival of the frame's last
//     packet (the relay holds a frame's packets until it is complete) to
//     console.ForwardFrame returning, when every packet of the frame is
//     queued to the viewer's connection;
//   - forwarded-share: LIVE frames that passed through / LIVE frames;
//   - relay-added-mean-ms: the relay's own measure (last packet to
//     WriteFrame without decode and encode, /metrics sum/count);
//   - decode-ms, encode-ms: the relay's mean VP8 decode (+ I420->BGR) and
//     encode per frame; vehicle-encode-ms: the vehicle's encoder;
//   - cpu-cores: process CPU time / wall time (getrusage), vehicle and
//     viewer included; relay-cpu-cores: the same less the CPU time of the
//     vehicle's encoder thread (simvehicle Stats.EncodeCPU), i.e. the relay
//     plus the viewer's packet reads and both ends' SRTP;
//   - kept-up: output frames received by the viewer / frames the vehicle sent.
//
// With STOPGAP_E2E_PROFILE_DIR set, a CPU profile of the process over each
// mode's window is written there (loopback-<mode>.pprof).
//
// Targets: added-p99-ms below one frame period (33.3 ms); with
// pass-through, fwd-p99-ms at most 2 ms and relay-cpu-cores at most a third
// of mode=transcode's.
func BenchmarkLoopback1280x720(b *testing.B) {
	res := map[string]loopbackResult{}
	for _, mode := range []string{"passthru", "transcode"} {
		b.Run("mode="+mode, func(b *testing.B) { res[mode] = benchLoopback(b, mode == "transcode") })
	}
	pt, tc := res["passthru"], res["transcode"]
	if pt.relayCores > 0 && tc.relayCores > 0 {
		b.Logf("pass-through / transcode in this run: relay CPU %.3f / %.3f cores = %.2f (target <= 0.33); LIVE added p99 %.2f ms (forwarding p99 %.2f ms) vs %.2f ms without the codec",
			pt.relayCores, tc.relayCores, pt.relayCores/tc.relayCores, pt.addedP99, pt.fwdP99, tc.addedP99)
	}
}

func modeName(transcode bool) string {
	if transcode {
		return "transcode"
	}
	return "passthru"
}

// profileSelf starts, when profileDirEnv is set, a CPU profile of this
// process (relay, vehicle and viewer together) written to
// $STOPGAP_E2E_PROFILE_DIR/<name>.pprof when the returned stop is called.
// Without profileDirEnv it does nothing.
func profileSelf(b *testing.B, name string) (stop func()) {
	dir := os.Getenv(profileDirEnv)
	if dir == "" {
		return func() {}
	}
	path := filepath.Join(dir, name+".pprof")
	f, err := os.Create(path)
	if err != nil {
		b.Fatal(err)
	}
	if err := pprof.StartCPUProfile(f); err != nil {
		f.Close()
		b.Logf("no CPU profile: %v", err) // one already runs (-test.cpuprofile)
		return func() {}
	}
	return func() {
		pprof.StopCPUProfile()
		if err := f.Close(); err != nil {
			b.Fatal(err)
		}
		b.Logf("CPU profile of the window: %s", path)
	}
}

// loopbackResult are the figures one mode's last iteration reported.
type loopbackResult struct {
	relayCores, addedP99, fwdP99 float64
}

func benchLoopback(b *testing.B, transcode bool) loopbackResult {
	var res loopbackResult
	r := startRig(b, rigOptions{width: 1280, height: 720, driveS: 3, cacheFrames: true, alwaysTranscode: transcode})
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	v, err := dialViewer(ctx, r.base, consoleToken)
	if err != nil {
		b.Fatal(err)
	}
	defer v.Close()
	var traceMu sync.Mutex
	var traces []relay.FrameTrace
	r.relay.TraceFrames(func(tr relay.FrameTrace) {
		traceMu.Lock()
		traces = append(traces, tr)
		traceMu.Unlock()
	})
	defer r.relay.TraceFrames(nil)
	waitFor(b, "the viewer to receive LIVE frames", 15*time.Second, func() bool {
		m, f := v.snapshot()
		return len(m) > 30 && len(f) > 30
	})
	period := r.veh.FramePeriod()
	b.ResetTimer()
	for range b.N {
		m0 := scrapeMetrics(b, r.base)
		metas0, frames0 := v.snapshot()
		r.mu.Lock()
		vf0 := len(r.frames)
		r.mu.Unlock()
		traceMu.Lock()
		tr0 := len(traces)
		traceMu.Unlock()
		vs0 := r.veh.Stats()
		stopProfile := profileSelf(b, "loopback-"+modeName(transcode))
		cpu0, wall0 := cpuTime(b), time.Now()

		time.Sleep(4 * time.Second)

		cpu1, wall1 := cpuTime(b), time.Now()
		stopProfile()
		traceMu.Lock()
		window := append([]relay.FrameTrace(nil), traces[tr0:]...)
		traceMu.Unlock()
		time.Sleep(200 * time.Millisecond) // let the window's last frames reach the viewer
		m1 := scrapeMetrics(b, r.base)
		metas, frames := v.snapshot()
		vs1 := r.veh.Stats()
		r.mu.Lock()
		vframes := append([]simFrame(nil), toSimFrames(r.frames[vf0:])...)
		lastPkt := map[uint32]time.Time{}
		for _, w := range r.wire {
			if w.kept && w.marker {
				if _, seen := lastPkt[w.ts]; !seen {
					lastPkt[w.ts] = w.at
				}
			}
		}
		r.mu.Unlock()

		// Output frame -> its arrival at the viewer, then LIVE frames -> the
		// vehicle frame they show (tick time - offset = capture time).
		arrival, delivered := matchDeliveries(window, frames, period)
		var liveTicks []int64
		for _, tr := range window {
			if tr.State == display.StateLive {
				liveTicks = append(liveTicks, tr.TickUs)
			}
		}
		offsetUs := modeOffsetUs(liveTicks, vframes)
		var e2e, added, fwd []float64
		live, unmatched, forwarded, superseded := 0, 0, 0, 0
		for i, tr := range window {
			if tr.State != display.StateLive {
				continue
			}
			live++
			if tr.Superseded {
				superseded++ // no frame sent: the viewer had a newer one
				continue
			}
			if tr.Forwarded {
				forwarded++
				fwd = append(fwd, float64(tr.WrittenAt.Sub(tr.LastPacketAt).Microseconds())/1000)
			}
			best, bestD := -1, int64(math.MaxInt64)
			for j, f := range vframes {
				if d := abs64(tr.TickUs - offsetUs - f.captureUs); d < bestD {
					best, bestD = j, d
				}
			}
			if best < 0 || bestD > period.Microseconds()/4 || arrival[i].IsZero() {
				unmatched++
				continue
			}
			in, ok := lastPkt[vframes[best].ts]
			if !ok {
				unmatched++
				continue
			}
			d := arrival[i].Sub(in)
			e2e = append(e2e, float64(d.Microseconds())/1000)
			if !tr.Forwarded {
				d -= tr.Decode + tr.Encode
			}
			added = append(added, float64(d.Microseconds())/1000)
		}
		slices.Sort(e2e)
		slices.Sort(added)
		slices.Sort(fwd)
		mean := func(name string) float64 {
			n := m1[name+"_count"] - m0[name+"_count"]
			if n <= 0 {
				return math.NaN()
			}
			return 1000 * (m1[name+"_sum"] - m0[name+"_sum"]) / n
		}
		framesIn := float64(vs1.FramesEncoded - vs0.FramesEncoded)
		framesOut := float64(len(frames) - len(frames0))
		b.ReportMetric(quantile(e2e, 0.5), "e2e-p50-ms")
		b.ReportMetric(quantile(e2e, 0.99), "e2e-p99-ms")
		b.ReportMetric(quantile(added, 0.5), "added-p50-ms")
		b.ReportMetric(quantile(added, 0.99), "added-p99-ms")
		b.ReportMetric(mean("stopgap_added_latency_seconds"), "relay-added-mean-ms")
		b.ReportMetric(mean("stopgap_decode_seconds"), "decode-ms")
		b.ReportMetric(mean("stopgap_encode_seconds"), "encode-ms")
		b.ReportMetric(float64((vs1.EncodeTotal-vs0.EncodeTotal).Microseconds())/1000/max(framesIn, 1), "vehicle-encode-ms")
		wall := float64(wall1.Sub(wall0))
		b.ReportMetric(float64(cpu1-cpu0)/wall, "cpu-cores")
		res.relayCores = float64(cpu1-cpu0-(vs1.EncodeCPU-vs0.EncodeCPU)) / wall
		b.ReportMetric(res.relayCores, "relay-cpu-cores")
		res.addedP99, res.fwdP99 = quantile(added, 0.99), quantile(fwd, 0.99)
		if !transcode {
			b.ReportMetric(quantile(fwd, 0.5), "fwd-p50-ms")
			b.ReportMetric(res.fwdP99, "fwd-p99-ms")
			b.ReportMetric(float64(forwarded)/max(float64(live), 1), "forwarded-share")
		}
		b.ReportMetric(framesOut/max(framesIn, 1), "kept-up")
		b.ReportMetric(float64(live)/max(float64(len(window)), 1), "live-share")
		b.Logf("window %v: vehicle frames %v, relay output frames %d (delivered to the viewer %d; LIVE %d, matched %d, unmatched %d, superseded %d), viewer frames %v, metas %d, vehicle skipped %d, tick time - capture time %.1f ms",
			wall1.Sub(wall0).Round(time.Millisecond), framesIn, len(window), delivered, live, len(e2e), unmatched, superseded, framesOut,
			len(metas)-len(metas0), vs1.FramesSkipped-vs0.FramesSkipped, float64(offsetUs)/1000)
		b.Logf("relay %+v", r.relay.Stats())
		if len(e2e) < 10 || len(e2e) < live/2 {
			b.Errorf("only %d of %d LIVE frames matched to their input and their delivery: the latency figures do not describe the run (is the machine keeping up? see kept-up and the relay's dropped frames)", len(e2e), live)
		}
		if !transcode && forwarded < live/2 {
			b.Errorf("only %d of %d LIVE frames passed through: the pass-through figures do not describe the run", forwarded, live)
		}
	}
	return res
}

// matchDeliveries pairs the relay's output frames (traces, in the order
// written) with the viewer's frame arrivals (ends, in the order received).
// The console sends every frame in order, so trace i is viewer frame i + o
// for one offset o (the viewer joined mid-stream); o is the candidate, near
// the arrival closest to the first trace, under which most frames arrive
// within [-2 ms, period) of being written (the write returns after the
// packets left, so an arrival may precede it slightly). A pair outside that
// range is left zero: a frame lost or dropped on the way shifts every later
// pair by a period and shows up as unmatched rather than as a wrong delay.
// It returns the arrival per trace and the number matched.
func matchDeliveries(traces []relay.FrameTrace, ends []time.Time, period time.Duration) ([]time.Time, int) {
	out := make([]time.Time, len(traces))
	// A superseded tick sent no frame: it has no arrival to pair with.
	var sent []int
	for i, tr := range traces {
		if !tr.Superseded {
			sent = append(sent, i)
		}
	}
	if len(sent) == 0 || len(ends) == 0 {
		return out, 0
	}
	ok := func(d time.Duration) bool { return d >= -2*time.Millisecond && d < period }
	j0, best := 0, time.Duration(math.MaxInt64)
	for j, e := range ends {
		if d := e.Sub(traces[sent[0]].WrittenAt); d.Abs() < best {
			j0, best = j, d.Abs()
		}
	}
	bestO, bestN := 0, -1
	for o := j0 - 2; o <= j0+2; o++ {
		n := 0
		for k, i := range sent {
			if j := k + o; j >= 0 && j < len(ends) && ok(ends[j].Sub(traces[i].WrittenAt)) {
				n++
			}
		}
		if n > bestN {
			bestO, bestN = o, n
		}
	}
	for k, i := range sent {
		if j := k + bestO; j >= 0 && j < len(ends) && ok(ends[j].Sub(traces[i].WrittenAt)) {
			out[i] = ends[j]
		}
	}
	return out, bestN
}

// TestMatchDeliveries checks the pairing on made-up timelines: frames
// written every 33 ms and arriving 3 ms later, with the viewer having missed
// the first two; a frame dropped on the way makes the frames after it
// unmatched, not mismatched.
func TestMatchDeliveries(t *testing.T) {
	const period = 33 * time.Millisecond
	t0 := time.Unix(2000, 0)
	var traces []relay.FrameTrace
	var ends []time.Time
	for i := range 10 {
		w := t0.Add(time.Duration(i) * period)
		traces = append(traces, relay.FrameTrace{Seq: uint64(i + 1), WrittenAt: w})
		if i >= 2 {
			ends = append(ends, w.Add(3*time.Millisecond))
		}
	}
	got, n := matchDeliveries(traces, ends, period)
	if n != 8 || !got[0].IsZero() || !got[1].IsZero() {
		t.Fatalf("all delivered: %d matched, first two %v %v; want 8, zero, zero", n, got[0], got[1])
	}
	for i := 2; i < 10; i++ {
		if d := got[i].Sub(traces[i].WrittenAt); d != 3*time.Millisecond {
			t.Errorf("frame %d: delay %v, want 3ms", i, d)
		}
	}
	// Frame 6 never reaches the viewer.
	dropped := append(append([]time.Time(nil), ends[:4]...), ends[5:]...)
	got, n = matchDeliveries(traces, dropped, period)
	for i := 2; i < 10; i++ {
		if !got[i].IsZero() && got[i].Sub(traces[i].WrittenAt) != 3*time.Millisecond {
			t.Errorf("with frame 6 dropped, frame %d paired with a delay of %v", i, got[i].Sub(traces[i].WrittenAt))
		}
	}
	if n > 4 {
		t.Errorf("with frame 6 dropped, %d frames matched, want at most 4", n)
	}
	// Tick 6 superseded: no frame was sent for it, so none arrives, and
	// every other frame still pairs with its own arrival.
	traces[6].Superseded = true
	got, n = matchDeliveries(traces, dropped, period)
	if n != 7 || !got[6].IsZero() {
		t.Errorf("tick 6 superseded: %d matched, tick 6 paired with %v; want 7 and none", n, got[6])
	}
	for i := 2; i < 10; i++ {
		if i != 6 && got[i].Sub(traces[i].WrittenAt) != 3*time.Millisecond {
			t.Errorf("tick 6 superseded: frame %d paired with a delay of %v", i, got[i].Sub(traces[i].WrittenAt))
		}
	}
}

type simFrame struct {
	captureUs int64
	ts        uint32
}

func toSimFrames(fi []simvehicle.FrameInfo) []simFrame {
	out := make([]simFrame, len(fi))
	for i, f := range fi {
		out[i] = simFrame{captureUs: f.CaptureUs, ts: f.RTPTimestamp}
	}
	return out
}

// modeOffsetUs returns the most common difference (1 ms bins, within
// +-200 ms) between the LIVE frames' tick times and the vehicle's capture
// times, refined to the median of the differences in that bin and its
// neighbours.
func modeOffsetUs(tickUs []int64, frames []simFrame) int64 {
	bins := map[int64]int{}
	for _, t := range tickUs {
		for _, f := range frames {
			if d := t - f.captureUs; d > -200_000 && d < 200_000 {
				bins[d/1000]++
			}
		}
	}
	var best int64
	bestN := -1
	for k, n := range bins {
		if n > bestN || (n == bestN && abs64(k) < abs64(best)) {
			best, bestN = k, n
		}
	}
	var near []int64
	for _, t := range tickUs {
		for _, f := range frames {
			if d := t - f.captureUs; abs64(d/1000-best) <= 1 {
				near = append(near, d)
			}
		}
	}
	if len(near) == 0 {
		return 0
	}
	slices.Sort(near)
	return near[len(near)/2]
}

func abs64(v int64) int64 {
	if v < 0 {
		return -v
	}
	return v
}
