package bench

import (
	"context"
	"math"
	"path/filepath"
	"strings"
	"testing"

	"stopgap/bench/simdrive"
	"stopgap/filter"
	"stopgap/internal/lossmodel"
)

func budgetTable(b Budget) string {
	var s strings.Builder
	WriteBudget(&s, b)
	return s.String()
}

// TestErrorBudgetAddsUp: on a small drive the budget's hold and predicted
// PSNR are the replay's own (the exact-motion row of the evaluation, scored
// by Scorer), its regions cover every pixel and every squared error once,
// and the pixels the held frame does not see are few but not none.
func TestErrorBudgetAddsUp(t *testing.T) {
	dc := simdrive.Config{Width: 320, Height: 180, DurationS: 6, Seed: 1}
	drive := smallDrive(t, dc)
	cfg := baseReplay(drive, filepath.Join(t.TempDir(), "r"))
	b, err := ErrorBudget(context.Background(), cfg, dc)
	if err != nil {
		t.Fatal(err)
	}
	t.Logf("\n%s", budgetTable(b))
	rows, err := CompareEvalSources(context.Background(), cfg, []EvalSource{ExactMotionSource}, []TelemetryLink{{}})
	if err != nil {
		t.Fatal(err)
	}
	ex := rows[0]
	if b.Ticks == 0 || b.Ticks != ex.Predicted || math.Abs(b.HoldDB-float64(ex.HoldPSNRdB)) > 0.01 || math.Abs(b.PredDB-float64(ex.ShownPSNRdB)) > 0.01 {
		t.Errorf("budget: %d ticks, hold %.3f dB, predicted %.3f dB; replay: %d PREDICTED ticks, hold %.3f dB, shown %.3f dB",
			b.Ticks, b.HoldDB, b.PredDB, ex.Predicted, ex.HoldPSNRdB, ex.ShownPSNRdB)
	}
	var px, share float64
	for _, r := range b.Rows {
		px += r.PixelShare
		share += r.ErrShare
	}
	unseen := b.Rows[4].PixelShare + b.Rows[5].PixelShare
	if math.Abs(px-1) > 1e-9 || math.Abs(share-1) > 1e-9 || !(unseen > 0 && unseen < 0.1) || b.Rows[6].PixelShare != 0 {
		t.Errorf("pixel shares sum to %v, error shares to %v, not seen %.4f, road users %.4f: want 1, 1, in (0, 0.1) and 0", px, share, unseen, b.Rows[6].PixelShare)
	}
}

// BenchmarkErrorBudget is the error budget of the predicted frames with
// the exact motion on the default drive (1280x720, 20 s) replayed with
// --loss-rate 0.1 --burst-ms 200 --seed 1, on the same drive with seed 2
// and on the narrow street (--facade-setback-m 1). It reports, per drive,
// the gain over hold, the gain scored over the pixels the held frame sees
// only, and the gain if every seen region were right up to the codec
// noise; and the gain and harm rate of the commands with telemetry lost
// with the video.
//
//	go test ./bench -run '^$' -bench ErrorBudget -benchtime 1x
func BenchmarkErrorBudget(b *testing.B) {
	for _, c := range []struct {
		name string
		cfg  simdrive.Config
	}{
		{"default", simdrive.Config{}},
		{"seed2", simdrive.Config{Seed: 2}},
		{"narrow", simdrive.Config{FacadeSetbackM: 1}},
	} {
		b.Run(c.name, func(b *testing.B) {
			drive := smallDrive(b, c.cfg)
			b.ResetTimer()
			for range b.N {
				cfg := baseReplay(drive, filepath.Join(b.TempDir(), "r"))
				cfg.Loss = lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.1, BurstMs: 200, Seed: 1}
				bud, err := ErrorBudget(context.Background(), cfg, c.cfg)
				if err != nil {
					b.Fatal(err)
				}
				b.Logf("\n%s", budgetTable(bud))
				cfg.Filter = filter.Config{WheelbaseM: simdrive.DefaultWheelbaseM}
				rows, err := CompareEvalSources(context.Background(), cfg, EvalSources()[1:2], []TelemetryLink{{}})
				if err != nil {
					b.Fatal(err)
				}
				b.Logf("\n%s", motionTable(rows))
				b.ReportMetric(float64(rows[0].GainDB), "commands-lost-gain-dB")
				b.ReportMetric(float64(rows[0].HarmRate), "commands-lost-harm")
				b.ReportMetric(bud.GainDB, "gain-dB")
				b.ReportMetric(bud.KnowableGainDB, "seen-only-gain-dB")
				b.ReportMetric(bud.AllRightGainDB, "all-seen-right-gain-dB")
			}
		})
	}
}
