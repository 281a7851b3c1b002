package e2e

import (
	"bufio"
	"cmp"
	"context"
	"maps"
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
	"stopgap/stream/console"
	"stopgap/stream/relay"
	"stopgap/stream/simvehicle"
	"stopgap/stream/vp8splice"
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
// marker packet of the output video frame) by identity: the console's
// number and RTP timestamp of the frame (console.Console.TraceSent, see
// matchDeliveries), so a frame lost or late on the way leaves only itself
// unmatched; LIVE frames are matched to the vehicle frame they show (RTP
// timestamp, wire filter). It reports:
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
	var sent []sentRecord // guarded by traceMu
	r.relay.Console().TraceSent(func(f console.SentFrame) {
		traceMu.Lock()
		sent = append(sent, sentRecord{num: f.Num, ts: f.RTPTimestamp, srcTS: f.SourceRTPTimestamp, fwd: f.Source == vp8splice.SourceForwarded})
		traceMu.Unlock()
	})
	defer r.relay.Console().TraceSent(nil)
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
		traceMu.Lock()
		sentWin := append([]sentRecord(nil), sent...)
		traceMu.Unlock()
		arrivals := v.arrivals()
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

		// LIVE frames -> the vehicle frame they show (its RTP timestamp,
		// FrameTrace.RTPTimestamp), then output frame -> its arrival at
		// the viewer (by identity too: matchDeliveries).
		byTS := make(map[uint32]int, len(vframes))
		for j, f := range vframes {
			byTS[f.ts] = j
		}
		vehicleFrame := make([]int, len(window)) // index in vframes, -1: none
		srcTS, hasSrc := make([]uint32, len(window)), make([]bool, len(window))
		var offsets []int64 // tick time - capture time, for the log
		for i, tr := range window {
			vehicleFrame[i] = -1
			if tr.State != display.StateLive {
				continue
			}
			if j, ok := byTS[tr.RTPTimestamp]; ok {
				vehicleFrame[i] = j
				srcTS[i], hasSrc[i] = tr.RTPTimestamp, true
				offsets = append(offsets, tr.TickUs-vframes[j].captureUs)
			}
		}
		slices.Sort(offsets)
		var offsetUs int64
		if len(offsets) > 0 {
			offsetUs = offsets[len(offsets)/2]
		}
		arrival, delivered := matchDeliveries(window, srcTS, hasSrc, sentWin, arrivals, period)
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
			best := vehicleFrame[i]
			if best < 0 || arrival[i].IsZero() {
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
		b.Logf("window %v: vehicle frames %v, relay output frames %d (delivered to the viewer %d; LIVE %d, matched %d, unmatched %d, superseded %d), viewer frames %v, metas %d, vehicle skipped %d, tick time - capture time (median) %.1f ms",
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

// sentRecord is one video frame the console sent to the viewer
// (console.Console.TraceSent).
type sentRecord struct {
	num   uint64 // console.SentFrame.Num: every frame the console got, in order
	ts    uint32 // its RTP timestamp in the viewer's stream
	srcTS uint32 // the vehicle's RTP timestamp of a forwarded frame
	fwd   bool   // forwarded (passed through), not encoded by the relay
}

// matchDeliveries pairs the relay's output frames (traces, in the order
// written) with their arrival at the viewer by identity, not by their order
// among the viewer's arrivals (a frame lost, late or not traced shifted
// every later pair of that pairing). The console's record of each frame it
// sent (sent) gives the frame's RTP timestamp in the viewer's stream, and
// arrivals (the viewer's, by that timestamp) its arrival:
//
//   - a frame that passed through is the console record that carries the
//     vehicle's RTP timestamp of the trace's frame (srcTS[i], valid where
//     hasSrc[i]; FrameTrace.RTPTimestamp);
//   - the relay's own frames reach the console in the order the display
//     loop writes them, which is the order of their traces: the k-th
//     encoded trace is encoded record k+o, o being the candidate near the
//     first one under which most frames arrive within [-2 ms, period) of
//     being written (the write returns after the packets left, so an
//     arrival may precede it slightly).
//
// Superseded ticks sent nothing. A pair whose arrival is more than 2 ms
// before the write is left zero. It returns the arrival per trace and the
// number matched.
func matchDeliveries(traces []relay.FrameTrace, srcTS []uint32, hasSrc []bool, sent []sentRecord, arrivals map[uint32]time.Time, period time.Duration) ([]time.Time, int) {
	out := make([]time.Time, len(traces))
	bySrc := map[uint32]sentRecord{}
	var enc []sentRecord
	for _, r := range sent {
		if r.fwd {
			bySrc[r.srcTS] = r
		} else {
			enc = append(enc, r)
		}
	}
	slices.SortFunc(enc, func(a, b sentRecord) int { return cmp.Compare(a.num, b.num) })
	var encIdx []int // traces of the relay's own frames
	for i, tr := range traces {
		switch {
		case tr.Superseded:
		case tr.Forwarded:
			if r, ok := bySrc[srcTS[i]]; ok && hasSrc[i] {
				out[i] = arrivals[r.ts]
			}
		default:
			encIdx = append(encIdx, i)
		}
	}
	if len(encIdx) > 0 && len(enc) > 0 {
		inRange := func(k, o int) (time.Time, bool) {
			j := k + o
			if j < 0 || j >= len(enc) {
				return time.Time{}, false
			}
			at, ok := arrivals[enc[j].ts]
			d := at.Sub(traces[encIdx[k]].WrittenAt)
			return at, ok && d >= -2*time.Millisecond && d < period
		}
		first := traces[encIdx[0]].WrittenAt
		near, best := 0, time.Duration(math.MaxInt64)
		for j, r := range enc {
			if at, ok := arrivals[r.ts]; ok && at.Sub(first).Abs() < best {
				near, best = j, at.Sub(first).Abs()
			}
		}
		bestO, bestN := 0, -1
		for o := near - 3; o <= near+3; o++ {
			n := 0
			for k := range encIdx {
				if _, ok := inRange(k, o); ok {
					n++
				}
			}
			if n > bestN {
				bestO, bestN = o, n
			}
		}
		for k, i := range encIdx {
			if j := k + bestO; j >= 0 && j < len(enc) {
				out[i] = arrivals[enc[j].ts]
			}
		}
	}
	matched := 0
	for i := range out {
		if !out[i].IsZero() && out[i].Sub(traces[i].WrittenAt) < -2*time.Millisecond {
			out[i] = time.Time{}
		}
		if !out[i].IsZero() {
			matched++
		}
	}
	return out, matched
}

// TestMatchDeliveries checks the pairing on made-up timelines: frames
// written every 33 ms and arriving 3 ms later, the viewer having joined
// after the first two, for forwarded and for encoded frames. A frame lost
// on the way leaves only itself unmatched (the pairing by order this
// replaced shifted every later pair), and so does a forwarded frame with no
// trace (late); a superseded tick sent nothing.
func TestMatchDeliveries(t *testing.T) {
	const period = 33 * time.Millisecond
	t0 := time.Unix(2000, 0)
	for _, forwarded := range []bool{true, false} {
		var traces []relay.FrameTrace
		var src []uint32
		var has []bool
		var sent []sentRecord
		arrivals := map[uint32]time.Time{}
		for i := range 10 {
			w := t0.Add(time.Duration(i) * period)
			traces = append(traces, relay.FrameTrace{Seq: uint64(i + 1), WrittenAt: w, Forwarded: forwarded})
			src = append(src, uint32(1000+3000*i))
			has = append(has, true)
			if i >= 2 {
				// The console's numbering started long before the window.
				r := sentRecord{num: uint64(500 + i), ts: uint32(77 + 3000*i), fwd: forwarded}
				if forwarded {
					r.srcTS = src[i]
				}
				sent = append(sent, r)
				arrivals[r.ts] = w.Add(3 * time.Millisecond)
			}
		}
		check := func(what string, got []time.Time, n, wantN int, skip ...int) {
			t.Helper()
			if n != wantN {
				t.Errorf("forwarded %v, %s: %d matched, want %d", forwarded, what, n, wantN)
			}
			for i := range traces {
				want := 3 * time.Millisecond
				if i < 2 || slices.Contains(skip, i) {
					if !got[i].IsZero() {
						t.Errorf("forwarded %v, %s: frame %d paired, want none", forwarded, what, i)
					}
					continue
				}
				if d := got[i].Sub(traces[i].WrittenAt); d != want {
					t.Errorf("forwarded %v, %s: frame %d delay %v, want %v", forwarded, what, i, d, want)
				}
			}
		}
		got, n := matchDeliveries(traces, src, has, sent, arrivals, period)
		check("all delivered", got, n, 8)
		// Frame 6 never reaches the viewer.
		lost := maps.Clone(arrivals)
		delete(lost, uint32(77+3000*6))
		got, n = matchDeliveries(traces, src, has, sent, lost, period)
		check("frame 6 lost", got, n, 7, 6)
		// Tick 5 superseded: it sent no frame, so the console numbered
		// the frames after it one lower.
		sup := slices.Clone(traces)
		sup[5].Superseded = true
		var sentSup []sentRecord
		arrSup := map[uint32]time.Time{}
		for _, r := range sent {
			k := int(r.num) - 500
			switch {
			case k == 5:
				continue
			case k > 5:
				r.num--
			}
			sentSup = append(sentSup, r)
			arrSup[r.ts] = arrivals[r.ts]
		}
		got, n = matchDeliveries(sup, src, has, sentSup, arrSup, period)
		check("tick 5 superseded", got, n, 7, 5)
		if !forwarded {
			continue
		}
		// A late vehicle frame passes through but gets no LIVE tick, so no
		// trace: the console's frame 504 (vehicle frame 4) has no trace,
		// and the frames after it still pair with their own arrivals.
		noTrace := slices.Clone(traces)
		noTrace[4] = relay.FrameTrace{WrittenAt: noTrace[4].WrittenAt, Forwarded: true}
		has4 := slices.Clone(has)
		has4[4] = false
		got, n = matchDeliveries(noTrace, src, has4, sent, arrivals, period)
		check("frame 4 not traced", got, n, 7, 4)
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
