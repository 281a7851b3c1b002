package e2e

import (
	"bufio"
	"context"
	"math"
	"net/http"
	"slices"
	"strconv"
	"strings"
	"syscall"
	"testing"
	"time"

	"stopgap/stream/console"
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
// loopback with a perfect link, for 4 s per iteration, and reports:
//
//   - e2e-p50-ms, e2e-p99-ms: for LIVE ticks, from the last input packet of a
//     frame leaving the vehicle (wire filter) to its meta message reaching the
//     viewer (sent right after the output frame): relay decode + processing +
//     egress encode + loopback both ways;
//   - added-p50-ms, added-p99-ms: the same minus the relay's mean decode and
//     encode times (the relay's added latency without the codec);
//   - relay-added-mean-ms: the relay's own measure (last packet to
//     WriteFrame without decode and encode, /metrics sum/count);
//   - decode-ms, encode-ms: the relay's mean VP8 decode (+ I420->BGR) and
//     encode per frame; vehicle-encode-ms: the vehicle's encoder;
//   - cpu-cores: process CPU time / wall time (getrusage), vehicle and
//     viewer included;
//   - kept-up: output frames received by the viewer / frames the vehicle sent.
//
// Target: added-p99-ms below one frame period (33.3 ms).
func BenchmarkLoopback1280x720(b *testing.B) {
	r := startRig(b, rigOptions{width: 1280, height: 720, driveS: 3, cacheFrames: true})
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	v, err := dialViewer(ctx, r.base, consoleToken)
	if err != nil {
		b.Fatal(err)
	}
	defer v.Close()
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
		vs0 := r.veh.Stats()
		cpu0, wall0 := cpuTime(b), time.Now()

		time.Sleep(4 * time.Second)

		cpu1, wall1 := cpuTime(b), time.Now()
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

		// LIVE ticks: a meta's t_us is the relay's tick time, the capture time
		// mapped through the sender reports (= capture + vehicle encode, plus
		// any timeline shift). Find that constant offset as the most common
		// difference to the vehicle's capture times, then match each LIVE
		// meta to the vehicle frame at t_us - offset.
		var liveMetas []metaEvent
		for _, me := range metas[len(metas0):] {
			if me.meta.State == console.StateLive {
				liveMetas = append(liveMetas, me)
			}
		}
		live := len(liveMetas)
		offsetUs := modeOffsetUs(liveMetas, vframes)
		var e2e []float64
		unmatched := 0
		for _, me := range liveMetas {
			best, bestD := -1, int64(math.MaxInt64)
			for i, f := range vframes {
				d := me.meta.TimeUs - offsetUs - f.captureUs
				if d < 0 {
					d = -d
				}
				if d < bestD {
					best, bestD = i, d
				}
			}
			if best < 0 || bestD > period.Microseconds()/4 {
				unmatched++
				continue
			}
			in, ok := lastPkt[vframes[best].ts]
			if !ok {
				unmatched++
				continue
			}
			e2e = append(e2e, float64(me.at.Sub(in).Microseconds())/1000)
		}
		slices.Sort(e2e)
		mean := func(name string) float64 {
			n := m1[name+"_count"] - m0[name+"_count"]
			if n <= 0 {
				return math.NaN()
			}
			return 1000 * (m1[name+"_sum"] - m0[name+"_sum"]) / n
		}
		dec, enc := mean("decode_seconds"), mean("encode_seconds")
		framesIn := float64(vs1.FramesEncoded - vs0.FramesEncoded)
		framesOut := float64(len(frames) - len(frames0))
		b.ReportMetric(quantile(e2e, 0.5), "e2e-p50-ms")
		b.ReportMetric(quantile(e2e, 0.99), "e2e-p99-ms")
		b.ReportMetric(quantile(e2e, 0.5)-dec-enc, "added-p50-ms")
		b.ReportMetric(quantile(e2e, 0.99)-dec-enc, "added-p99-ms")
		b.ReportMetric(mean("relay_added_latency_seconds"), "relay-added-mean-ms")
		b.ReportMetric(dec, "decode-ms")
		b.ReportMetric(enc, "encode-ms")
		b.ReportMetric(float64((vs1.EncodeTotal-vs0.EncodeTotal).Microseconds())/1000/max(framesIn, 1), "vehicle-encode-ms")
		b.ReportMetric(float64(cpu1-cpu0)/float64(wall1.Sub(wall0)), "cpu-cores")
		b.ReportMetric(framesOut/max(framesIn, 1), "kept-up")
		b.ReportMetric(float64(live)/max(float64(len(metas)-len(metas0)), 1), "live-share")
		b.Logf("window %v: vehicle frames %v, viewer frames %v, metas %d (LIVE %d, matched %d, unmatched %d), vehicle skipped %d, tick time - capture time %.1f ms",
			wall1.Sub(wall0).Round(time.Millisecond), framesIn, framesOut, len(metas)-len(metas0), live, len(e2e), unmatched,
			vs1.FramesSkipped-vs0.FramesSkipped, float64(offsetUs)/1000)
		b.Logf("relay %+v", r.relay.Stats())
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
// +-200 ms) between the LIVE metas' tick times and the vehicle's capture
// times, refined to the median of the differences in that bin and its
// neighbours.
func modeOffsetUs(metas []metaEvent, frames []simFrame) int64 {
	bins := map[int64]int{}
	for _, me := range metas {
		for _, f := range frames {
			if d := me.meta.TimeUs - f.captureUs; d > -200_000 && d < 200_000 {
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
	for _, me := range metas {
		for _, f := range frames {
			if d := me.meta.TimeUs - f.captureUs; abs64(d/1000-best) <= 1 {
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
