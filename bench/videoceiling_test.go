package bench

import (
	"context"
	"fmt"
	"math"
	"sort"
	"testing"

	"stopgap/bench/simdrive"
	"stopgap/filter"
	"stopgap/predictor"
	"stopgap/stream/recording"
)

// heldRateMotion is a reference that knows the true speed and yaw rate at
// the start of a gap (truth.csv, the row at or after t0Us) and nothing
// after it: the motion at a constant turn rate (CTRV closed form), with the
// yaw rate changing at the true yaw acceleration of the last 100 ms when
// accel is set. Zero covariance: every missing tick is PREDICTED.
type heldRateMotion struct {
	truth []recording.Truth
	accel bool
}

// heldRateAccelWindow is the number of frames over which the true yaw
// acceleration is taken (100 ms at 30 fps).
const heldRateAccelWindow = 3

func (m heldRateMotion) Relative(t0Us, t1Us int64) (filter.Motion, error) {
	i := sort.Search(len(m.truth), func(i int) bool { return m.truth[i].CaptureUs >= t0Us })
	if i == len(m.truth) {
		return filter.Motion{}, fmt.Errorf("held-rate motion: no truth row at %d us: %w", t0Us, ErrReplayInput)
	}
	r := m.truth[i]
	tau := float64(t1Us-t0Us) * 1e-6
	yaw := r.YawRateRps * tau
	if m.accel && i >= heldRateAccelWindow {
		p := m.truth[i-heldRateAccelWindow]
		a := (r.YawRateRps - p.YawRateRps) / (float64(r.CaptureUs-p.CaptureUs) * 1e-6)
		yaw += a * tau * tau / 2
	}
	// Along an arc the chord is v τ sinc(ψ/2), in the direction ψ/2.
	h := yaw / 2
	chord := r.SpeedMps * tau
	if math.Abs(h) > 1e-9 {
		chord *= math.Sin(h) / h
	}
	return filter.Motion{T0Us: t0Us, T1Us: t1Us, DxM: chord * math.Cos(h), DyM: chord * math.Sin(h), DyawRad: yaw,
		SpeedMps: r.SpeedMps, YawRateRps: yaw / math.Max(tau, 1e-9)}, nil
}

// TestHeldRateMotion: the reference follows the truth exactly on a drive
// of constant speed and yaw rate (a circle, poses written in closed form),
// and the acceleration variant adds a τ²/2 to the heading.
func TestHeldRateMotion(t *testing.T) {
	const v, w = 10.0, 0.2
	var tr []recording.Truth
	for k := range 30 {
		ts := float64(k) / 30
		yaw := w * ts
		tr = append(tr, recording.Truth{CaptureUs: int64(math.Round(ts * 1e6)), XM: v / w * math.Sin(yaw),
			YM: v / w * (1 - math.Cos(yaw)), YawRad: yaw, SpeedMps: v, YawRateRps: w})
	}
	for _, k := range []int{3, 10} {
		t0, t1 := tr[k].CaptureUs, tr[k+12].CaptureUs
		got, err := heldRateMotion{truth: tr}.Relative(t0, t1)
		if err != nil {
			t.Fatal(err)
		}
		want, _ := exactMotion(tr).Relative(t0, t1)
		if math.Abs(got.DxM-want.DxM) > 1e-6 || math.Abs(got.DyM-want.DyM) > 1e-6 || math.Abs(got.DyawRad-want.DyawRad) > 1e-9 {
			t.Errorf("from frame %d: %+v, want the circle's %+v", k, got, want)
		}
	}
	tr[20].YawRateRps = 0.2 + 0.3*0.1 // 0.3 rad/s² over the last 100 ms
	got, _ := heldRateMotion{truth: tr, accel: true}.Relative(tr[20].CaptureUs, tr[20].CaptureUs+400_000)
	if want := 0.23*0.4 + 0.3*0.4*0.4/2; math.Abs(got.DyawRad-want) > 1e-3 {
		t.Errorf("with the yaw acceleration: heading change %.5f, want %.5f", got.DyawRad, want)
	}
}

// BenchmarkVideoOnlyCeiling explains the video ego-motion's gain on the
// default drive (1280x720, --loss-rate 0.1 --burst-ms 200, loss seeds 1
// and 2, no telemetry, no commands) by three references that know the
// truth and are replayed on the same schedule: the held frame's true speed
// and yaw rate kept over the gap at a constant turn rate (the most any
// estimate of the present motion can give the predictor as it is, every
// tick PREDICTED), the same with the true yaw acceleration extrapolated (a
// turn trend known exactly), and the exact motion. It reports each gain
// over hold and the video's PREDICTED ticks, and the video's gain with
// every missing tick PREDICTED (cutoff 0: the estimate's motion alone,
// whatever its confidence); it requires nothing.
//
//	go test ./bench -run '^$' -bench VideoOnlyCeiling -benchtime 1x
func BenchmarkVideoOnlyCeiling(b *testing.B) {
	drive := smallDrive(b, simdrive.Config{})
	b.ResetTimer()
	for range b.N {
		for _, seed := range []uint64{1, 2} {
			cfg := baseReplay(drive, "")
			cfg.Loss.Seed, cfg.Examples = seed, -1
			row := func(name string, edit func(*ReplayConfig)) Summary {
				c := cfg
				edit(&c)
				var out replayOutput
				sum, err := replayDrive(context.Background(), c, &out)
				if err != nil {
					b.Fatal(err)
				}
				closeExamples(out.examples)
				gain := float64(sum.Methods.Predicted.PSNRdBMean - sum.Methods.Hold.PSNRdBMean)
				b.Logf("seed %d, %-34s gain %5.2f dB over hold, %d of %d missing ticks PREDICTED", seed, name, gain, sum.PredictedOnly.Frames, sum.TicksMissing)
				b.ReportMetric(gain, fmt.Sprintf("seed%d-%s-gain-dB", seed, name))
				return sum
			}
			row("video", func(c *ReplayConfig) { *c = VideoOnlySource.apply(*c) })
			row("video-every-tick", func(c *ReplayConfig) {
				*c = VideoOnlySource.apply(*c)
				c.Policy.CutoffConfidence = 0
			})
			row("held-rate", func(c *ReplayConfig) {
				c.NoCommands = true
				c.truthMotion = func(tr []recording.Truth) predictor.MotionSource { return heldRateMotion{truth: tr} }
			})
			row("held-rate-accel", func(c *ReplayConfig) {
				c.NoCommands = true
				c.truthMotion = func(tr []recording.Truth) predictor.MotionSource { return heldRateMotion{truth: tr, accel: true} }
			})
			row("exact", func(c *ReplayConfig) { *c = ExactMotionSource.apply(*c) })
		}
	}
}
