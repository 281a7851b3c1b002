package relay

import (
	"runtime"
	"slices"
	"syscall"
	"testing"
	"time"

	"github.com/pion/rtp"

	"stopgap/internal/display"
	"stopgap/predictor"
	"stopgap/stream/rtpvp8"
	"stopgap/stream/vp8"
	"stopgap/stream/whip"
)

// threadCPU returns the calling thread's user + system CPU time
// (getrusage(2), RUSAGE_THREAD, Linux).
func threadCPU(b *testing.B) time.Duration {
	const rusageThread = 1 // RUSAGE_THREAD, linux/resource.h
	var ru syscall.Rusage
	if err := syscall.Getrusage(rusageThread, &ru); err != nil {
		b.Fatal(err)
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// BenchmarkLiveFrame720p measures the relay's whole per-frame work for one
// LIVE 1280x720 frame, from its RTP packets to the console, once with
// pass-through and once with always-transcode, in the same run: RTP
// assembly, the pass-through gate and console.ForwardFrame (pass-through),
// VP8 decode, the display loop's LIVE tick, and (transcode) I420 to BGR,
// the copy into the output frame, the VP8 encode and console.WriteFrame. A
// frame that passed through is converted to BGR only when a gap follows
// (see deferred; BenchmarkDeferredFlush720p measures that cost, paid on a
// gap's first tick), so no conversion is counted here in that mode. The work runs on the benchmark's
// goroutine, locked to one thread, so its CPU time is measured with
// RUSAGE_THREAD and does not depend on what else the machine runs, unlike
// the loopback benchmark's real-time figures. It reports:
//
//   - cpu-ms/frame: that thread's CPU time per frame (at 30 fps, /33.3 ms
//     gives cores per stream);
//   - fwd-p50-us, fwd-p99-us (pass-through): the wall time from the frame's
//     last packet handed to the assembler to console.ForwardFrame returning
//     (FrameTrace: WrittenAt - LastPacketAt), the relay's share of a LIVE
//     packet's latency; wall time, so a loaded machine inflates it.
//
// No viewer is connected: the per-viewer RTP packetising (or rewriting of
// forwarded packets) runs on the viewer's goroutine in either mode and is
// left out of both. The parent logs the ratio of the two modes (target:
// pass-through at most a third of transcode). The frames are a moving
// textured sequence (movingSequence), encoded once at 1 Mbit/s with a
// keyframe every 30 frames.
func BenchmarkLiveFrame720p(b *testing.B) {
	prev := predictor.SetOpenCVThreads(1)
	defer predictor.SetOpenCVThreads(prev)
	const w, h, n = 1280, 720, 30
	seq := movingSequence(b, n, w, h)
	enc, err := vp8.NewEncoder(vp8.EncoderConfig{Width: w, Height: h, FrameRateHz: testFPS, BitrateBps: 1_000_000})
	if err != nil {
		b.Fatal(err)
	}
	var frames [][]byte
	for i, m := range seq {
		px, err := m.DataPtrUint8()
		if err != nil {
			b.Fatal(err)
		}
		if i == 0 {
			enc.ForceKeyframe()
		}
		f, _, err := enc.EncodeBGR(nil, px, captureUs(i))
		if err != nil {
			b.Fatal(err)
		}
		frames = append(frames, slices.Clone(f))
		m.Close()
	}
	enc.Close()
	res := map[bool]float64{}
	for _, transcode := range []bool{false, true} {
		name := "mode=passthru"
		if transcode {
			name = "mode=transcode"
		}
		b.Run(name, func(b *testing.B) { res[transcode] = benchLiveFrame(b, frames, w, h, transcode) })
	}
	if res[false] > 0 && res[true] > 0 {
		b.Logf("CPU per LIVE frame, pass-through / transcode in this run: %.2f / %.2f ms = %.2f (target <= 0.33)",
			res[false], res[true], res[false]/res[true])
	}
}

func benchLiveFrame(b *testing.B, frames [][]byte, w, h int, transcode bool) float64 {
	cam := predictor.Camera{Width: w, Height: h, Fx: 1000, Fy: 1000, Cx: float64(w) / 2, Cy: float64(h) / 2, HeightM: 1.4, PitchDeg: 5}
	r, err := New(Config{Camera: cam, IngestToken: testIngestToken, ConsoleToken: testConsoleToken, Logger: quietLogger(),
		Whip: whip.Config{Network: whip.Network{LoopbackOnly: true}}, AlwaysTranscode: transcode, FrameQueue: 2, LatencyMs: 50})
	if err != nil {
		b.Fatal(err)
	}
	defer r.shutdown()
	v := newFakeVehicle(b, &fakeClock{}, 0, nil)
	p, err := newPipeline(r, v)
	if err != nil {
		b.Fatal(err)
	}
	defer p.close()
	pkz, err := rtpvp8.NewPacketizer(rtpvp8.PacketizerConfig{PayloadType: 96, SSRC: 0x1234})
	if err != nil {
		b.Fatal(err)
	}
	var pkts []rtp.Packet
	fwd := make([]time.Duration, 0, 4096)
	tracing := false
	r.TraceFrames(func(tr FrameTrace) {
		if tracing && tr.Forwarded {
			fwd = append(fwd, tr.WrittenAt.Sub(tr.LastPacketAt))
		}
	})
	i := 0
	// frame pushes frame i's packets and runs its LIVE tick.
	frame := func() {
		pkts, err = pkz.Packetize(pkts[:0], frames[i%len(frames)], rtpTS(i))
		if err != nil {
			b.Fatal(err)
		}
		for j := range pkts {
			p.in.mu.Lock()
			err := p.in.asm.Push(&pkts[j], time.Now())
			p.in.mu.Unlock()
			if err != nil {
				b.Fatal(err)
			}
		}
		ev := <-p.frames
		ev.readyUs = ev.captureUs + 51_000 // in time for its tick (latency 50 ms, allowance 20 ms)
		p.onFrame(ev)
		i++
	}
	runtime.LockOSThread()
	defer runtime.UnlockOSThread()
	for range len(frames) { // warm-up: one keyframe interval
		frame()
	}
	live0 := r.met.ticks[display.StateLive].Load()
	tracing = true
	b.ResetTimer()
	c0 := threadCPU(b)
	for range b.N {
		frame()
	}
	cpu := threadCPU(b) - c0
	b.StopTimer()
	tracing = false
	if got := r.met.ticks[display.StateLive].Load() - live0; got != uint64(b.N) {
		b.Fatalf("%d LIVE ticks for %d frames", got, b.N)
	}
	perFrame := float64(cpu.Microseconds()) / 1000 / float64(b.N)
	b.ReportMetric(perFrame, "cpu-ms/frame")
	if !transcode {
		if len(fwd) < b.N/2 {
			b.Fatalf("only %d of %d frames passed through", len(fwd), b.N)
		}
		slices.Sort(fwd)
		b.ReportMetric(float64(fwd[len(fwd)/2].Microseconds()), "fwd-p50-us")
		b.ReportMetric(float64(fwd[(len(fwd)*99+99)/100-1].Microseconds()), "fwd-p99-us")
	}
	return perFrame
}
