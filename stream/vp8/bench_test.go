package vp8

import (
	"fmt"
	"syscall"
	"testing"
	"time"
)

// Benchmarks for the relay's budget: 30 fps encode + decode at 1280x720 on
// 2 cores means encode + decode + conversions must stay well under 33 ms of
// one core per frame. Run:
//
//	go test -run '^$' -bench . -benchtime 60x -cpu 1 ./stream/vp8
//
// Each benchmark reports ms/frame. The content is the simulated moving
// pattern with +-4 noise (harder to code than most camera scenes' smooth
// areas, easier than foliage).

const benchW, benchH = 1280, 720

// benchFrames returns n BGR pictures of the moving pattern.
func benchFrames(n int) [][]byte {
	out := make([][]byte, n)
	for i := range out {
		out[i] = make([]byte, benchW*benchH*3)
		synthBGR(out[i], benchW, benchH, i, 4, 3)
	}
	return out
}

// cpuNow returns the CPU time (user + system) used by this process so far.
// On a shared machine wall time per frame swings with other load; CPU time
// per frame is the figure to compare with the relay's core budget.
func cpuNow() time.Duration {
	var ru syscall.Rusage
	if err := syscall.Getrusage(syscall.RUSAGE_SELF, &ru); err != nil {
		return 0
	}
	return time.Duration(ru.Utime.Nano() + ru.Stime.Nano())
}

// reportMs reports wall ms/frame and CPU ms/frame since cpu0 (taken right
// after ResetTimer).
func reportMs(b *testing.B, cpu0 time.Duration) {
	b.ReportMetric(float64(b.Elapsed().Microseconds())/1000/float64(b.N), "ms/frame")
	b.ReportMetric(float64((cpuNow()-cpu0).Microseconds())/1000/float64(b.N), "cpu-ms/frame")
}

func BenchmarkEncode720p(b *testing.B) {
	frames := benchFrames(30)
	imgs := make([]*Image, len(frames))
	for i, f := range frames {
		imgs[i] = &Image{}
		if err := BGRToI420(imgs[i], f, benchW, benchH); err != nil {
			b.Fatal(err)
		}
	}
	for _, cpu := range []int{6, 8, 12, 16} {
		b.Run(fmt.Sprintf("cpu%d", cpu), func(b *testing.B) {
			e, err := NewEncoder(EncoderConfig{Width: benchW, Height: benchH, BitrateBps: 2_500_000, CPUUsed: cpu})
			if err != nil {
				b.Fatal(err)
			}
			defer e.Close()
			buf := make([]byte, 0, 1<<20)
			var bytes int
			b.ReportAllocs()
			b.ResetTimer()
			cpu0 := cpuNow()
			for i := 0; i < b.N; i++ {
				buf, _, err = e.Encode(buf, imgs[i%len(imgs)], int64(i)*33_333)
				if err != nil {
					b.Fatal(err)
				}
				bytes += len(buf)
			}
			reportMs(b, cpu0)
			b.ReportMetric(float64(bytes)*8*30/float64(b.N)/1e6, "Mbps@30fps")
			b.StopTimer()
			b.ReportMetric(meanPSNR(b, imgs, EncoderConfig{Width: benchW, Height: benchH, BitrateBps: 2_500_000, CPUUsed: cpu}), "dB")
		})
	}
}

// meanPSNR encodes imgs with a fresh encoder, decodes them and returns the
// mean luma PSNR (untimed quality figure for the speed settings).
func meanPSNR(b *testing.B, imgs []*Image, cfg EncoderConfig) float64 {
	e, err := NewEncoder(cfg)
	if err != nil {
		b.Fatal(err)
	}
	defer e.Close()
	d, err := NewDecoder()
	if err != nil {
		b.Fatal(err)
	}
	defer d.Close()
	out := &Image{}
	var sum float64
	for i, img := range imgs {
		f, _, err := e.Encode(nil, img, int64(i)*33_333)
		if err != nil {
			b.Fatal(err)
		}
		if err := d.Decode(f, out); err != nil {
			b.Fatal(err)
		}
		sum += psnrY(img, out)
	}
	return sum / float64(len(imgs))
}

func BenchmarkEncodeBGR720p(b *testing.B) {
	frames := benchFrames(30)
	e, err := NewEncoder(EncoderConfig{Width: benchW, Height: benchH, BitrateBps: 2_500_000})
	if err != nil {
		b.Fatal(err)
	}
	defer e.Close()
	buf := make([]byte, 0, 1<<20)
	b.ReportAllocs()
	b.ResetTimer()
	cpu0 := cpuNow()
	for i := 0; i < b.N; i++ {
		if buf, _, err = e.EncodeBGR(buf, frames[i%len(frames)], int64(i)*33_333); err != nil {
			b.Fatal(err)
		}
	}
	reportMs(b, cpu0)
}

func BenchmarkDecode720p(b *testing.B) {
	// 60 frames with a keyframe every 30, decoded in a loop, so the
	// measured mix matches the stream (1 keyframe per second).
	s := encodeStream(b, EncoderConfig{Width: benchW, Height: benchH, BitrateBps: 2_500_000, KeyframeInterval: 30}, 60, 4)
	d, err := NewDecoder()
	if err != nil {
		b.Fatal(err)
	}
	defer d.Close()
	out, _ := NewImage(benchW, benchH)
	b.ReportAllocs()
	b.ResetTimer()
	cpu0 := cpuNow()
	for i := 0; i < b.N; i++ {
		j := i % len(s.frames)
		if j == 0 && i > 0 {
			d.Lost() // restart the loop cleanly at the keyframe
		}
		if err := d.Decode(s.frames[j], out); err != nil {
			b.Fatalf("frame %d: %v", j, err)
		}
	}
	reportMs(b, cpu0)
}

func BenchmarkBGRToI420_720p(b *testing.B) {
	bgr := benchFrames(1)[0]
	img, _ := NewImage(benchW, benchH)
	b.ReportAllocs()
	b.SetBytes(int64(len(bgr)))
	b.ResetTimer()
	cpu0 := cpuNow()
	for i := 0; i < b.N; i++ {
		if err := BGRToI420(img, bgr, benchW, benchH); err != nil {
			b.Fatal(err)
		}
	}
	reportMs(b, cpu0)
}

func BenchmarkI420ToBGR_720p(b *testing.B) {
	bgr := benchFrames(1)[0]
	img := &Image{}
	if err := BGRToI420(img, bgr, benchW, benchH); err != nil {
		b.Fatal(err)
	}
	out := make([]byte, len(bgr))
	b.ReportAllocs()
	b.SetBytes(int64(len(bgr)))
	b.ResetTimer()
	cpu0 := cpuNow()
	for i := 0; i < b.N; i++ {
		if err := I420ToBGR(out, img); err != nil {
			b.Fatal(err)
		}
	}
	reportMs(b, cpu0)
}
