package e2e

import (
	"context"
	"fmt"
	"net/http"
	"os"
	"runtime"
	"runtime/pprof"
	"slices"
	"testing"
	"time"

	"stopgap/internal/lossmodel"
	"stopgap/stream/simvehicle"
)

// Settings of BenchmarkSoak from the environment: how long it runs (a Go
// duration, default 3m) and the camera size (default 320x180).
// With soakProfileEnv set to a path prefix, the heap profiles at the first
// and the last sample are written to PREFIX.first.pprof and
// PREFIX.last.pprof (go tool pprof -base FIRST LAST shows what grew).
const (
	soakDurationEnv = "STOPGAP_SOAK_DURATION"
	soakSizeEnv     = "STOPGAP_SOAK_SIZE"
	soakProfileEnv  = "STOPGAP_SOAK_HEAPPROFILE"
)

// writeHeapProfile writes the heap profile to path.
func writeHeapProfile(b *testing.B, path string) {
	f, err := os.Create(path)
	if err != nil {
		b.Fatal(err)
	}
	defer f.Close()
	if err := pprof.Lookup("heap").WriteTo(f, 0); err != nil {
		b.Fatal(err)
	}
}

// soakFlatPct is how far the resources may drift over a soak, percent of
// their value after the warm-up (the figure).
const soakFlatPct = 5

// soakSample is one reading of the process's resources.
type soakSample struct {
	at         time.Duration
	goroutines int
	heap       uint64 // live heap after GC, bytes
	files      int
}

// BenchmarkSoak runs the relay, a simulated vehicle and a console viewer
// in this process for STOPGAP_SOAK_DURATION under 10 % Gilbert-Elliott
// packet loss (mean burst 50 ms) with a 1 s outage every 20 s, and samples
// goroutines, the live heap after GC and open files every 10 s. After a
// 30 s warm-up the median of the first three samples is the baseline and
// the median of the last three the end; it reports:
//
//   - soak-s: how long it ran;
//   - goroutines-drift-pct, heap-drift-pct, files-drift-pct: end against
//     baseline, percent (must stay within soakFlatPct);
//   - added-p50-ms, added-p99-ms: the relay's own added latency of LIVE
//     frames (last packet to WriteFrame without decode and encode; upper
//     bounds of its /metrics histogram buckets) over the whole run; budget:
//     p99 below one frame period, the loopback benchmark's target;
//   - live-share: LIVE ticks / all ticks (the rest are PREDICTED or STALE).
//
// The egress mode is STOPGAP_E2E_EGRESS (egress_test.go).
func BenchmarkSoak(b *testing.B) {
	mode := requireEgress(b)
	dur := 3 * time.Minute
	if v := os.Getenv(soakDurationEnv); v != "" {
		d, err := time.ParseDuration(v)
		if err != nil || d < time.Minute {
			b.Fatalf("%s=%q: want a duration of at least 1m", soakDurationEnv, v)
		}
		dur = d
	}
	w, h := 320, 180
	if v := os.Getenv(soakSizeEnv); v != "" {
		if _, err := fmt.Sscanf(v, "%dx%d", &w, &h); err != nil || w < 16 || h < 16 || w%2 != 0 || h%2 != 0 {
			b.Fatalf("%s=%q: want WIDTHxHEIGHT, even, at least 16x16", soakSizeEnv, v)
		}
	}
	for range b.N {
		r := startRig(b, rigOptions{width: w, height: h, driveS: 4, cacheFrames: true,
			link: simvehicle.LinkConfig{
				Loss:    lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.10, BurstMs: 50, Seed: 11},
				Outages: []simvehicle.Outage{{At: 10 * time.Second, Duration: time.Second, Every: 20 * time.Second}},
			}})
		ctx, cancel := context.WithTimeout(context.Background(), dur+time.Minute)
		v, err := dialViewer(ctx, r.base, consoleToken)
		if err != nil {
			cancel()
			b.Fatal(err)
		}
		const warmUp, every = 30 * time.Second, 10 * time.Second
		start := time.Now()
		var samples []soakSample
		for t := time.Duration(0); t <= dur; t += every {
			time.Sleep(time.Until(start.Add(t)))
			// The rig and the viewer keep every packet, frame and meta for
			// other tests; drop them (keeping the capacity) so only the
			// relay, the vehicle and the viewer themselves are measured, and
			// close idle HTTP connections, which time out after 90 s anyway.
			r.mu.Lock()
			r.wire, r.frames, r.plis = r.wire[:0], r.frames[:0], r.plis[:0]
			r.mu.Unlock()
			v.mu.Lock()
			v.metas, v.frameEnds = v.metas[:0], v.frameEnds[:0]
			v.mu.Unlock()
			http.DefaultClient.CloseIdleConnections()
			if t < warmUp {
				continue
			}
			samples = append(samples, soakSample{at: time.Since(start), goroutines: runtime.NumGoroutine(),
				heap: heapAfterGC(), files: openFiles(b)})
			if p := os.Getenv(soakProfileEnv); p != "" && len(samples) == 1 {
				writeHeapProfile(b, p+".first.pprof")
			}
		}
		ran := time.Since(start)
		if p := os.Getenv(soakProfileEnv); p != "" {
			writeHeapProfile(b, p+".last.pprof")
		}
		st := r.relay.Stats()
		link := r.veh.Stats().Link
		period := r.veh.FramePeriod()
		v.Close()
		cancel()
		r.stop()
		if len(samples) < 6 {
			b.Fatalf("%d samples after the warm-up; run longer", len(samples))
		}
		med := func(s []soakSample, f func(soakSample) float64) float64 {
			vals := make([]float64, len(s))
			for i, x := range s {
				vals[i] = f(x)
			}
			slices.Sort(vals)
			return vals[len(vals)/2]
		}
		drift := func(f func(soakSample) float64) float64 {
			base, end := med(samples[:3], f), med(samples[len(samples)-3:], f)
			return 100 * (end - base) / base
		}
		gd := drift(func(s soakSample) float64 { return float64(s.goroutines) })
		hd := drift(func(s soakSample) float64 { return float64(s.heap) })
		fd := drift(func(s soakSample) float64 { return float64(s.files) })
		ticks := st.TicksLive + st.TicksPredicted + st.TicksStale
		live := float64(st.TicksLive) / float64(max(ticks, 1))
		b.ReportMetric(ran.Seconds(), "soak-s")
		b.ReportMetric(gd, "goroutines-drift-pct")
		b.ReportMetric(hd, "heap-drift-pct")
		b.ReportMetric(fd, "files-drift-pct")
		b.ReportMetric(st.AddedLatencyP50Ms, "added-p50-ms")
		b.ReportMetric(st.AddedLatencyP99Ms, "added-p99-ms")
		b.ReportMetric(live, "live-share")
		for _, s := range samples {
			b.Logf("t=%v goroutines %d heap %d B open files %d", s.at.Round(time.Second), s.goroutines, s.heap, s.files)
		}
		b.Logf("egress %s, %dx%d, ran %v: packets on the wire %d, lost %d, in outages %d; relay %+v",
			mode, w, h, ran.Round(time.Second), link.PacketsWire, link.PacketsLost, link.PacketsOutage, st)
		for name, d := range map[string]float64{"goroutines": gd, "heap": hd, "open files": fd} {
			if d > soakFlatPct || d < -soakFlatPct {
				b.Errorf("%s drifted %+.1f %% over the soak, want within %d %%", name, d, soakFlatPct)
			}
		}
		if budget := float64(period.Microseconds()) / 1000; !(st.AddedLatencyP99Ms <= budget) {
			b.Errorf("relay added latency p99 %.1f ms, budget one frame period (%.1f ms)", st.AddedLatencyP99Ms, budget)
		}
	}
}
