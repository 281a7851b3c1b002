package e2e

import (
	"context"
	"fmt"
	"math"
	"os"
	"slices"
	"strconv"
	"strings"
	"sync"
	"testing"
	"time"

	"stopgap/internal/display"
	"stopgap/stream/recording"
	"stopgap/stream/simvehicle"
)

// capacityEnv lists the vehicle counts BenchmarkCapacity1280x720 runs,
// comma separated (default "1,2,4"); capacitySizeEnv, WIDTHxHEIGHT,
// replaces the camera size (default 1280x720), e.g. to check the benchmark
// itself on a machine too busy for real-time 720p.
const (
	capacityEnv     = "STOPGAP_CAPACITY_N"
	capacitySizeEnv = "STOPGAP_CAPACITY_SIZE"
)

// Kept-up thresholds of one stream over the measuring window (a design
// choice of this project): the viewer received at least 97 % of the frames
// the vehicle sent, at least 95 % of the console's frames were LIVE, and
// the vehicle skipped at most 3 % of its camera frames for lack of CPU.
const (
	keptUpDelivered = 0.97
	keptUpLive      = 0.95
	keptUpSkipped   = 0.03
)

// capStream is one vehicle -> relay process -> viewer chain.
type capStream struct {
	relay  *child
	veh    *simvehicle.Vehicle
	view   *viewer
	mu     sync.Mutex
	handed map[int64]time.Time // capture time (us) -> when the frame was handed to the link
	frames []simFrame
}

// BenchmarkCapacity1280x720 runs N vehicles at once, each with its own relay
// process (the deployment this project chose: one relay process per
// vehicle, see DEVELOPERS.md) and its own console viewer, for N in
// STOPGAP_CAPACITY_N. Vehicles (simulated, 1280x720 at 30 fps, VP8 encode
// in this process) and viewers (Go WebRTC clients) run in the benchmark
// process; the relays are child processes of the test binary, so their CPU
// is measured apart (/proc/PID/stat). Over a 6 s window it reports for each
// N (STOPGAP_CAPACITY_SIZE changes the camera size):
//
//   - kept-up-streams: streams that kept up (see keptUpDelivered,
//     keptUpLive, keptUpSkipped) out of N; min-delivered, min-live-share and
//     max-skipped the worst stream's figures;
//   - relay-cores: CPU of all relay processes / wall time, and
//     relay-cores-per-stream;
//   - veh-viewer-cores: CPU of this process (vehicles and viewers) / wall;
//   - live-added-p50-ms, live-added-p99-ms: over the LIVE frames of all
//     streams, from the vehicle handing the frame's packets to its link to
//     the viewer receiving that tick's meta message: loopback both ways,
//     RTP assembly, decode, the display schedule, encode, packetisation,
//     SRTP and SCTP. The vehicle's encode is not included;
//   - relay-rss-mb: mean resident memory of one relay process.
//
// The egress mode is STOPGAP_E2E_EGRESS (egress_test.go).
func BenchmarkCapacity1280x720(b *testing.B) {
	mode := requireEgress(b)
	ns := []int{1, 2, 4}
	if v := os.Getenv(capacityEnv); v != "" {
		ns = nil
		for _, f := range strings.Split(v, ",") {
			n, err := strconv.Atoi(strings.TrimSpace(f))
			if err != nil || n < 1 {
				b.Fatalf("%s=%q: want a comma separated list of vehicle counts >= 1", capacityEnv, v)
			}
			ns = append(ns, n)
		}
	}
	w, h := 1280, 720
	if v := os.Getenv(capacitySizeEnv); v != "" {
		if _, err := fmt.Sscanf(v, "%dx%d", &w, &h); err != nil || w < 16 || h < 16 || w%2 != 0 || h%2 != 0 {
			b.Fatalf("%s=%q: want WIDTHxHEIGHT, even, at least 16x16", capacitySizeEnv, v)
		}
	}
	dir := b.TempDir()
	drive := renderDrive(b, dir, w, h, 3)
	rec, err := recording.Open(drive)
	if err != nil {
		b.Fatal(err)
	}
	for _, n := range ns {
		b.Run(fmt.Sprintf("N=%d", n), func(b *testing.B) {
			for range b.N {
				runCapacity(b, rec, drive, n, mode)
			}
		})
	}
}

func runCapacity(b *testing.B, rec *recording.Recording, drive string, n int, mode string) {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	streams := make([]*capStream, n)
	var stops []func()
	defer func() {
		for _, s := range stops {
			s()
		}
	}()
	for i := range streams {
		s := &capStream{handed: map[int64]time.Time{}}
		s.relay = startChild(b, "relay", childDriveEnv+"="+drive)
		v, err := dialViewer(ctx, s.relay.ready, consoleToken)
		if err != nil {
			b.Fatal(err)
		}
		s.view = v
		stops = append(stops, func() { v.Close() })
		veh, stop := publishVehicle(b, rec, s.relay.ready, func(fi simvehicle.FrameInfo) {
			at := time.Now()
			s.mu.Lock()
			s.handed[fi.CaptureUs] = at
			s.frames = append(s.frames, simFrame{captureUs: fi.CaptureUs, ts: fi.RTPTimestamp})
			s.mu.Unlock()
		})
		s.veh = veh
		stops = append(stops, stop)
		streams[i] = s
	}
	for i, s := range streams {
		deadline := time.Now().Add(30 * time.Second)
		for {
			m, f := s.view.snapshot()
			if countState(m, time.Time{}, display.StateLive) > 30 {
				break
			}
			if time.Now().After(deadline) {
				b.Fatalf("stream %d: no LIVE frames at the viewer after 30 s: %d metas, %d frames; vehicle %+v",
					i, len(m), len(f), s.veh.Stats())
			}
			time.Sleep(10 * time.Millisecond)
		}
	}
	time.Sleep(2 * time.Second) // past the first keyframes and the latency estimate

	type mark struct {
		metas, frames int
		veh           simvehicle.Stats
		cpu           time.Duration
	}
	relayCPU := func() time.Duration {
		var sum time.Duration
		for _, s := range streams {
			c, err := procCPU(s.relay.pid())
			if err != nil {
				b.Fatal(err)
			}
			sum += c
		}
		return sum
	}
	marks := make([]mark, n)
	for i, s := range streams {
		m, f := s.view.snapshot()
		marks[i] = mark{metas: len(m), frames: len(f), veh: s.veh.Stats()}
	}
	rc0, self0, wall0 := relayCPU(), cpuTime(b), time.Now()
	time.Sleep(6 * time.Second)
	rc1, self1, wall1 := relayCPU(), cpuTime(b), time.Now()
	wall := wall1.Sub(wall0)
	time.Sleep(200 * time.Millisecond) // the window's last frames reach the viewers

	var lat []float64
	kept := 0
	minDelivered, minLive, maxSkipped := math.Inf(1), math.Inf(1), 0.0
	var rss float64
	for i, s := range streams {
		metas, frames := s.view.snapshot()
		vs := s.veh.Stats()
		sent := float64(vs.FramesEncoded - marks[i].veh.FramesEncoded)
		camera := sent + float64(vs.FramesSkipped-marks[i].veh.FramesSkipped)
		var window []metaEvent
		for _, m := range metas[marks[i].metas:] {
			if !m.at.After(wall1) {
				window = append(window, m)
			}
		}
		var ticks []int64
		live := 0
		for _, m := range window {
			if m.meta.State == display.StateLive {
				live++
				ticks = append(ticks, m.meta.TimeUs)
			}
		}
		s.mu.Lock()
		offset := modeOffsetUs(ticks, s.frames)
		period := s.veh.FramePeriod().Microseconds()
		for _, m := range window {
			if m.meta.State != display.StateLive {
				continue
			}
			capUs := m.meta.TimeUs - offset
			best, bestD := int64(0), int64(math.MaxInt64)
			for _, f := range s.frames {
				if d := abs64(f.captureUs - capUs); d < bestD {
					best, bestD = f.captureUs, d
				}
			}
			if bestD <= period/4 {
				lat = append(lat, float64(m.at.Sub(s.handed[best]).Microseconds())/1000)
			}
		}
		s.mu.Unlock()
		delivered := float64(len(frames)-marks[i].frames) / max(sent, 1)
		liveShare := float64(live) / max(float64(len(window)), 1)
		skipped := 1 - sent/max(camera, 1)
		ok := delivered >= keptUpDelivered && liveShare >= keptUpLive && skipped <= keptUpSkipped
		if ok {
			kept++
		}
		minDelivered, minLive, maxSkipped = min(minDelivered, delivered), min(minLive, liveShare), max(maxSkipped, skipped)
		r, err := procRSS(s.relay.pid())
		if err != nil {
			b.Fatal(err)
		}
		rss += float64(r) / float64(n)
		b.Logf("stream %d: vehicle sent %v of %v camera frames, viewer got %d frames (%.3f), %d metas, LIVE share %.3f, kept up %v",
			i, sent, camera, len(frames)-marks[i].frames, delivered, len(window), liveShare, ok)
	}
	slices.Sort(lat)
	relayCores := float64(rc1-rc0) / float64(wall)
	b.ReportMetric(float64(kept), "kept-up-streams")
	b.ReportMetric(minDelivered, "min-delivered")
	b.ReportMetric(minLive, "min-live-share")
	b.ReportMetric(maxSkipped, "max-skipped")
	b.ReportMetric(relayCores, "relay-cores")
	b.ReportMetric(relayCores/float64(n), "relay-cores-per-stream")
	b.ReportMetric(float64(self1-self0)/float64(wall), "veh-viewer-cores")
	b.ReportMetric(quantile(lat, 0.5), "live-added-p50-ms")
	b.ReportMetric(quantile(lat, 0.99), "live-added-p99-ms")
	b.ReportMetric(rss/(1<<20), "relay-rss-mb")
	b.Logf("N=%d egress %s: window %v, %d LIVE latencies matched", n, mode, wall.Round(time.Millisecond), len(lat))
}
