package bench

import (
	"context"
	"path/filepath"
	"testing"

	"stopgap/bench/simdrive"
	"stopgap/internal/lossmodel"
	"stopgap/predictor"
)

// BenchmarkCalibrationHeldOut is the acceptance check of the confidence's
// calibration: on simulated drives whose seeds were not used to fit the
// noise (3, and 13 with the panning yaw rate), over 20 links of 10 % loss in
// 200 ms bursts with telemetry lost with the video, the expected
// calibration error against the exact misalignment must be at most 0.05.
//
//	go test ./bench -run '^$' -bench CalibrationHeldOut -benchtime 1x
func BenchmarkCalibrationHeldOut(b *testing.B) {
	dir := b.TempDir()
	var drives []string
	for _, c := range []simdrive.Config{{Seed: 3}, {Seed: 13, PanYawRateRps: 0.5}} {
		c.Width, c.Height = 160, 90
		d := filepath.Join(dir, filepath.Base(b.Name())+string(rune('a'+len(drives))))
		if err := simdrive.Generate(context.Background(), c, d, nil); err != nil {
			b.Fatal(err)
		}
		drives = append(drives, d)
	}
	b.ResetTimer()
	for range b.N {
		cal, err := CalibrateTruth(context.Background(), TruthCalibrationConfig{Drives: drives, Losses: heldOutLosses(20)})
		if err != nil {
			b.Fatal(err)
		}
		b.ReportMetric(float64(cal.ECE), "ECE")
		b.ReportMetric(float64(cal.Brier), "Brier")
		b.ReportMetric(float64(cal.Frames), "ticks")
		if cal.ECE > 0.05 {
			b.Errorf("ECE %.4f over %d ticks, want <= 0.05", cal.ECE, cal.Frames)
		}
	}
}

// BenchmarkPanDriveHarm is the acceptance check on a panning drive (yaw rate
// ±0.5 rad/s reversing every 2 s, seed 21, 640x360, 20 s) with telemetry
// lost with the video, over three links of 15 % loss in 400 ms bursts: at
// the default cutoff the harm rate of PREDICTED ticks must be at most 5 %
// while at least half of the missing ticks are still PREDICTED.
//
//	go test ./bench -run '^$' -bench PanDriveHarm -benchtime 1x
func BenchmarkPanDriveHarm(b *testing.B) {
	dir := b.TempDir()
	drive := filepath.Join(dir, "pan")
	if err := simdrive.Generate(context.Background(), simdrive.Config{Width: 640, Height: 360, Seed: 21, PanYawRateRps: 0.5}, drive, nil); err != nil {
		b.Fatal(err)
	}
	b.ResetTimer()
	for range b.N {
		var missing, predicted, scored, harm int
		for seed := uint64(1); seed <= 3; seed++ {
			sum, err := Replay(context.Background(), ReplayConfig{
				Drive: drive, Out: filepath.Join(dir, "r"+string(rune('0'+seed))), Overwrite: true, Examples: -1,
				Loss:   lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.15, BurstMs: 400, Seed: seed},
				Policy: predictor.DefaultPolicy(),
			})
			if err != nil {
				b.Fatal(err)
			}
			missing += sum.TicksMissing
			predicted += sum.PredictedTicks
			scored += sum.PredictedOnly.Frames
			harm += sum.PredictedOnly.HarmPSNR
		}
		rate, cover := float64(harm)/float64(max(scored, 1)), float64(predicted)/float64(max(missing, 1))
		b.ReportMetric(rate, "harm_rate")
		b.ReportMetric(cover, "coverage")
		if rate > 0.05 || cover < 0.5 {
			b.Errorf("harm rate %.3f (%d of %d), coverage %.3f (%d of %d): want <= 0.05 and >= 0.5", rate, harm, scored, cover, predicted, missing)
		}
	}
}
