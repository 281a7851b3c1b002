package bench

import (
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"html"
	"image"
	_ "image/jpeg"
	_ "image/png"
	"math"
	"os"
	"path/filepath"
	"regexp"
	"slices"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/internal/lossmodel"
	"stopgap/internal/vocab"
)

// generatedTicks makes a deterministic replay-like sequence: ten LIVE
// ticks, then gaps of growing age scored for all methods, with quality
// falling with age and predicted > rotation > hold.
func generatedTicks(n int) []TickRow {
	rows := make([]TickRow, 0, n)
	for i := range n {
		t := int64(i) * 33_333
		if i%40 < 10 {
			r := NewTickRow(i, t, TickLive, 20)
			r.LabelShare = 0.01
			rows = append(rows, r)
			continue
		}
		age := float64(i%40-9) * 33.333
		state := TickPredicted
		if age > 700 {
			state = TickStale
		}
		r := NewTickRow(i, t, state, age)
		r.Confidence = math.Max(0, 1-age/1000)
		drop := age / 100
		r.Hold = Scores{PSNRdB: 30 - 2*drop, SSIM: 0.9 - 0.05*drop, MAE: 4 + drop}
		r.Rotation = Scores{PSNRdB: 31 - 1.8*drop, SSIM: 0.92 - 0.045*drop, MAE: 3.8 + 0.9*drop}
		r.Predicted = Scores{PSNRdB: 33 - 1.5*drop, SSIM: 0.95 - 0.04*drop, MAE: 3 + 0.7*drop}
		r.SynthMs = 4 + float64(i%7)
		r.UnfilledShare = age / 4000
		r.LabelShare = 0.03
		rows = append(rows, r)
	}
	return rows
}

// TestSummarizeHandValues checks counts, means, bucket assignment and the
// Empirical quantile on rows whose statistics are worked by hand.
func TestSummarizeHandValues(t *testing.T) {
	mk := func(tick int, state string, age float64, p, s, m, synth float64) TickRow {
		r := NewTickRow(tick, int64(tick)*40_000, state, age)
		if !math.IsNaN(p) {
			r.Hold = Scores{p, s, m}
			r.Rotation = Scores{p + 1, s, m}
			r.Predicted = Scores{p + 2, s, m}
		}
		r.SynthMs = synth
		return r
	}
	nan := math.NaN()
	rows := []TickRow{
		mk(0, TickLive, 0, nan, nan, nan, nan),
		mk(1, TickPredicted, 40, 30, 0.9, 5, 10),
		mk(2, TickPredicted, 80, 20, 0.7, 7, 20),
		mk(3, TickPredicted, 120, math.Inf(1), 1, 0, 30), // identical: capped at 100 dB
		mk(4, TickStale, 450, 10, 0.1, 30, 40),
	}
	s, err := Summarize(rows)
	if err != nil {
		t.Fatal(err)
	}
	if s.TicksTotal != 5 || s.LiveTicks != 1 || s.PredictedTicks != 3 || s.StaleTicks != 1 || s.TicksMissing != 4 {
		t.Errorf("counts %+v", s)
	}
	// Empirical quantile of {10,20,30,40}: p50 -> 20 (CDF reaches 0.5 at 20), p99 -> 40.
	if s.SynthMsP50 != 20 || s.SynthMsP99 != 40 || s.SynthMsMean != 25 {
		t.Errorf("synth p50/p99/mean = %v/%v/%v, want 20/40/25", s.SynthMsP50, s.SynthMsP99, s.SynthMsMean)
	}
	h := s.Methods.Hold
	if h.Frames != 4 || h.PSNRdBMean != (30+20+100+10)/4.0 || h.SSIMMean != (0.9+0.7+1+0.1)/4 || h.MAEMean != 10.5 {
		t.Errorf("hold %+v", h)
	}
	if p := s.Methods.Predicted.PSNRdBMean; p != (32+22+100+12)/4.0 {
		t.Errorf("predicted PSNR mean %v, want %v (Inf capped to 100 before the +2 offset does not apply)", p, (32+22+100+12)/4.0)
	}
	wantFrames := []int{2, 1, 0, 1}
	for i, b := range h.Buckets {
		if b.Frames != wantFrames[i] {
			t.Errorf("bucket %s frames %d, want %d", b.Bucket, b.Frames, wantFrames[i])
		}
	}
	if h.Buckets[0].PSNRdBMean != 25 || h.Buckets[0].AgeMsMean != 60 || !math.IsNaN(float64(h.Buckets[2].SSIMMean)) {
		t.Errorf("bucket 0-100 %+v, bucket 200-400 %+v", h.Buckets[0], h.Buckets[2])
	}
	if !math.IsNaN(float64(s.UnfilledShareMean)) {
		t.Errorf("unfilled share mean %v, want NaN (no row reported it)", s.UnfilledShareMean)
	}
}

func TestBucketIndex(t *testing.T) {
	for _, tt := range []struct {
		age  float64
		want int
	}{{0, 0}, {99.9, 0}, {100, 1}, {199, 1}, {200, 2}, {399.99, 2}, {400, 3}, {1e6, 3}, {-1, -1}, {math.NaN(), -1}} {
		if got := BucketIndex(tt.age); got != tt.want {
			t.Errorf("BucketIndex(%v) = %d, want %d", tt.age, got, tt.want)
		}
		if tt.want >= 0 {
			b := AgeBuckets()[tt.want]
			if tt.age < b.MinMs || tt.age >= b.MaxMs {
				t.Errorf("age %v not inside bucket %+v", tt.age, b)
			}
		}
	}
}

func TestTickRowValidate(t *testing.T) {
	ok := NewTickRow(3, 0, TickPredicted, 50)
	mod := func(f func(*TickRow)) TickRow { r := ok; f(&r); return r }
	tests := []struct {
		name string
		row  TickRow
		want string // substring of the error
	}{
		{"zero value row", TickRow{}, "state"},
		{"unknown state", mod(func(r *TickRow) { r.State = "live" }), "state"},
		{"negative age", mod(func(r *TickRow) { r.AgeMs = -1 }), "age"},
		{"NaN age", mod(func(r *TickRow) { r.AgeMs = math.NaN() }), "age"},
		{"confidence above 1", mod(func(r *TickRow) { r.Confidence = 1.5 }), "confidence"},
		{"negative synth time", mod(func(r *TickRow) { r.SynthMs = -2 }), "synth"},
		{"unset Scores value", mod(func(r *TickRow) { r.Hold = Scores{} }), "hold"},
		{"partial scores", mod(func(r *TickRow) { r.Predicted = Scores{30, math.NaN(), 3} }), "predicted"},
		{"SSIM above 1", mod(func(r *TickRow) { r.Rotation = Scores{30, 1.2, 3} }), "rotation"},
		{"label share", mod(func(r *TickRow) { r.LabelShare = 2 }), "label"},
	}
	if err := ok.Validate(); err != nil {
		t.Fatalf("valid row rejected: %v", err)
	}
	for _, tt := range tests {
		t.Run(tt.name, func(t *testing.T) {
			err := tt.row.Validate()
			if !errors.Is(err, ErrTickRow) || !strings.Contains(err.Error(), tt.want) {
				t.Errorf("err = %v, want ErrTickRow mentioning %q", err, tt.want)
			}
			var a Accumulator
			if a.Add(tt.row) == nil || a.Summary().TicksTotal != 0 {
				t.Error("Accumulator counted an invalid row")
			}
		})
	}
}

func TestFloatJSON(t *testing.T) {
	in := struct {
		A, B, C Float
	}{Float(math.NaN()), Float(math.Inf(1)), 1.25}
	raw, err := json.Marshal(in)
	if err != nil {
		t.Fatal(err)
	}
	if string(raw) != `{"A":null,"B":null,"C":1.25}` {
		t.Errorf("got %s", raw)
	}
	var back struct{ A, B, C Float }
	if err := json.Unmarshal(raw, &back); err != nil {
		t.Fatal(err)
	}
	if !math.IsNaN(float64(back.A)) || back.C != 1.25 {
		t.Errorf("round trip %+v", back)
	}
	if err := json.Unmarshal([]byte(`{"A":"x"}`), &back); err == nil {
		t.Error("string accepted as Float")
	}
}

// exampleFrames returns small labelled frames for one example.
func exampleFrames(t *testing.T) (truth, hold, pred gocv.Mat) {
	t.Helper()
	truth = readFixture(t, "graf1_crop.png")
	hold = readFixture(t, "graf1_shift.png")
	pred = readFixture(t, "graf1_blur.png")
	gocv.Rectangle(&pred, image.Rect(0, 0, pred.Cols()-1, pred.Rows()-1), colorRGBA(255, 160, 0), 3)
	gocv.PutText(&pred, "PREDICTED 120 ms", image.Pt(6, 20), gocv.FontHersheySimplex, 0.5, colorRGBA(255, 160, 0), 1)
	return truth, hold, pred
}

// documentedSummaryKeys lists the summary.json keys the report promises.
var documentedSummaryKeys = []string{"ticks_total", "ticks_missing", "predicted_ticks", "stale_ticks", "live_ticks",
	"synth_ms_p50", "synth_ms_p99", "synth_ms_mean", "label_pixel_share_mean", "unfilled_share_mean",
	"cutoff", "drive", "loss", "methods", "arrivals_file", "allowance_ms", "latency_ms", "filter_model", "telemetry_rejected"}

func TestWriteReport(t *testing.T) {
	ticks := generatedTicks(400)
	s, err := Summarize(ticks)
	if err != nil {
		t.Fatal(err)
	}
	s.Drive, s.Cutoff, s.MaxAgeMs = "simulated-loop", 0.6, 800
	s.Loss = lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.2, BurstMs: 300, Seed: 1}
	s.FilterModel, s.LatencyMs, s.AllowanceMs, s.TelemetryRejected = "ctrv", 100, 20, 3
	truth, hold, pred := exampleFrames(t)
	defer truth.Close()
	defer hold.Close()
	defer pred.Close()
	examples := []Example{{Tick: 14, AgeMs: 166.7, State: TickPredicted, Confidence: 0.83, True: truth, Hold: hold, Predicted: pred}}

	dir := filepath.Join(t.TempDir(), "report")
	if err := WriteReport(dir, s, ticks, examples); err != nil {
		t.Fatal(err)
	}
	for _, f := range []string{SummaryFile, TicksFile, PSNRPlotFile, SSIMPlotFile, HTMLFile,
		"examples/tick-000014-true.jpg", "examples/tick-000014-hold.jpg", "examples/tick-000014-predicted.jpg"} {
		if st, err := os.Stat(filepath.Join(dir, f)); err != nil || st.Size() == 0 {
			t.Errorf("%s missing or empty (%v)", f, err)
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "examples/tick-000014-rotation.jpg")); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("rotation image written although not given: %v", err)
	}

	t.Run("summary.json", func(t *testing.T) {
		raw, err := os.ReadFile(filepath.Join(dir, SummaryFile))
		if err != nil {
			t.Fatal(err)
		}
		var m map[string]any
		if err := json.Unmarshal(raw, &m); err != nil {
			t.Fatal(err)
		}
		for _, k := range documentedSummaryKeys {
			if _, ok := m[k]; !ok {
				t.Errorf("key %q missing", k)
			}
		}
		methods, _ := m["methods"].(map[string]any)
		for _, name := range []string{"hold", "rotation", "predicted"} {
			ms, _ := methods[name].(map[string]any)
			for _, k := range []string{"frames", "psnr_db_mean", "ssim_mean", "mae_mean", "buckets"} {
				if _, ok := ms[k]; !ok {
					t.Errorf("methods.%s.%s missing", name, k)
				}
			}
			if b, _ := ms["buckets"].([]any); len(b) != 4 {
				t.Errorf("methods.%s has %d buckets, want 4", name, len(b))
			}
		}
		var back Summary
		if err := json.Unmarshal(raw, &back); err != nil {
			t.Fatal(err)
		}
		if back.Methods.Predicted.Frames != s.Methods.Predicted.Frames || back.Loss != s.Loss || back.TicksTotal != 400 {
			t.Errorf("round trip lost data: %+v", back)
		}
	})
	t.Run("ticks.csv", func(t *testing.T) {
		f, err := os.Open(filepath.Join(dir, TicksFile))
		if err != nil {
			t.Fatal(err)
		}
		defer f.Close()
		recs, err := csv.NewReader(f).ReadAll()
		if err != nil {
			t.Fatal(err)
		}
		want := []string{"tick", "target_us", "state", "age_ms", "confidence",
			"hold_psnr_db", "hold_ssim", "hold_mae", "rotation_psnr_db", "rotation_ssim", "rotation_mae",
			"predicted_psnr_db", "predicted_ssim", "predicted_mae", "synth_ms", "unfilled_share", "label_share",
			"warp_psnr_db", "warp_ssim", "warp_mae", "sigma_px", "misalign_px", "misalign_mrad", "truth_misalign_mrad",
			"mark_recall", "mark_precision", "mark_changed_share", "mark_marked_share"}
		if !slices.Equal(recs[0], want) {
			t.Errorf("header %v, want %v", recs[0], want)
		}
		if len(recs) != 401 {
			t.Errorf("%d rows, want 401", len(recs))
		}
		if recs[1][2] != TickLive || recs[1][5] != "" {
			t.Errorf("first row %v: want LIVE with empty scores", recs[1])
		}
	})
	t.Run("report.html", func(t *testing.T) {
		raw, err := os.ReadFile(filepath.Join(dir, HTMLFile))
		if err != nil {
			t.Fatal(err)
		}
		page := string(raw)
		// The caution is the shared text of package vocab, word for word, and
		// the page defines the words its tables use.
		for _, want := range []string{vocab.CautionTitle, html.EscapeString(vocab.Caution),
			"MAE (grey levels)", "A tick is one", "The unfilled share is", "The picture age is",
			`src="psnr_vs_age.png"`, `src="ssim_vs_age.png"`, "PREDICTED: predicted frame", "simulated-loop",
			"gilbert-elliott, loss rate 0.2", "ctrv"} {
			if !strings.Contains(page, want) {
				t.Errorf("page lacks %q", want)
			}
		}
		// Every referenced image exists and decodes.
		refs := regexp.MustCompile(`src="([^"]+)"`).FindAllStringSubmatch(page, -1)
		if len(refs) != 7 {
			t.Errorf("%d image references, want 7 (2 age plots, reliability, confidence scatter + 3 example frames)", len(refs))
		}
		for _, r := range refs {
			f, err := os.Open(filepath.Join(dir, r[1]))
			if err != nil {
				t.Errorf("referenced %s: %v", r[1], err)
				continue
			}
			cfg, _, err := image.DecodeConfig(f)
			f.Close()
			if err != nil || cfg.Width < 100 {
				t.Errorf("%s: %v, width %d", r[1], err, cfg.Width)
			}
		}
	})
	t.Run("no partial directories left", func(t *testing.T) {
		ents, _ := os.ReadDir(filepath.Dir(dir))
		if len(ents) != 1 {
			t.Errorf("parent holds %d entries, want only the report", len(ents))
		}
	})
	t.Run("refuses to overwrite", func(t *testing.T) {
		if err := WriteReport(dir, s, ticks, nil); !errors.Is(err, ErrDestExists) {
			t.Fatalf("err = %v, want ErrDestExists", err)
		}
		if _, err := os.Stat(filepath.Join(dir, "examples")); err != nil {
			t.Error("refused write damaged the existing report")
		}
	})
	t.Run("overwrite when asked", func(t *testing.T) {
		if err := (ReportWriter{Overwrite: true}).Write(dir, s, ticks, nil); err != nil {
			t.Fatal(err)
		}
		if _, err := os.Stat(filepath.Join(dir, "examples")); !errors.Is(err, os.ErrNotExist) {
			t.Error("old examples survived the overwrite")
		}
		ents, _ := os.ReadDir(filepath.Dir(dir))
		if len(ents) != 1 {
			t.Errorf("parent holds %d entries after overwrite, want 1", len(ents))
		}
	})
}

func TestWriteReportEdgeCases(t *testing.T) {
	t.Run("empty existing directory is used", func(t *testing.T) {
		dir := filepath.Join(t.TempDir(), "out")
		if err := os.Mkdir(dir, 0o755); err != nil {
			t.Fatal(err)
		}
		empty, err := Summarize(nil)
		if err != nil {
			t.Fatal(err)
		}
		if err := WriteReport(dir, empty, nil, nil); err != nil {
			t.Fatal(err)
		}
		raw, err := os.ReadFile(filepath.Join(dir, SummaryFile))
		if err != nil || !strings.Contains(string(raw), `"synth_ms_p50": null`) {
			t.Errorf("empty summary: %v\n%s", err, raw)
		}
	})
	t.Run("failure leaves nothing", func(t *testing.T) {
		parent := t.TempDir()
		dir := filepath.Join(parent, "out")
		truth := readFixture(t, "graf1_crop.png")
		defer truth.Close()
		bad := []Example{{Tick: 1, True: truth, Hold: truth}} // no predicted frame
		err := WriteReport(dir, Summary{}, generatedTicks(20), bad)
		if err == nil {
			t.Fatal("report with a missing example image succeeded")
		}
		ents, _ := os.ReadDir(parent)
		if len(ents) != 0 {
			t.Errorf("failed write left %d entries, e.g. %s", len(ents), ents[0].Name())
		}
	})
	t.Run("missing parent", func(t *testing.T) {
		err := WriteReport(filepath.Join(t.TempDir(), "no", "such", "out"), Summary{}, nil, nil)
		if !errors.Is(err, os.ErrNotExist) {
			t.Errorf("err = %v, want ErrNotExist", err)
		}
	})
	t.Run("destination is a file", func(t *testing.T) {
		f := filepath.Join(t.TempDir(), "file")
		if err := os.WriteFile(f, []byte("x"), 0o644); err != nil {
			t.Fatal(err)
		}
		if err := (ReportWriter{Overwrite: true}).Write(f, Summary{}, nil, nil); !errors.Is(err, ErrDestExists) {
			t.Errorf("err = %v, want ErrDestExists", err)
		}
	})
}

func colorRGBA(r, g, b uint8) (c struct{ R, G, B, A uint8 }) {
	c.R, c.G, c.B, c.A = r, g, b, 255
	return c
}

// FuzzSummaryJSON checks that reading arbitrary bytes as a Summary never
// panics and that whatever is accepted encodes again.
func FuzzSummaryJSON(f *testing.F) {
	f.Add([]byte(`{"ticks_total":3,"synth_ms_p50":null,"loss":{"model":"gilbert-elliott"},"methods":{"hold":{"buckets":[{"max_ms":null}]}}}`))
	f.Add([]byte(`{"loss":{"model":"x"}}`))
	f.Add([]byte(`{"synth_ms_p99":1e400}`))
	f.Fuzz(func(t *testing.T, data []byte) {
		var s Summary
		if err := json.Unmarshal(data, &s); err != nil {
			return
		}
		if _, err := json.Marshal(s); err != nil {
			t.Fatalf("accepted summary does not encode: %v", err)
		}
	})
}

// BenchmarkAccumulatorAdd measures validating and adding one tick.
func BenchmarkAccumulatorAdd(b *testing.B) {
	rows := generatedTicks(4000)
	b.ReportAllocs()
	for b.Loop() {
		var a Accumulator
		for i := range rows {
			if err := a.Add(rows[i]); err != nil {
				b.Fatal(err)
			}
		}
	}
}

// ExampleSummarize builds the statistics of three ticks: one live, two
// filled, one of which is scored.
func ExampleSummarize() {
	live := NewTickRow(0, 0, TickLive, 0)
	gap := NewTickRow(1, 33_333, TickPredicted, 33.3)
	gap.Hold = Scores{PSNRdB: 24, SSIM: 0.80, MAE: 6}
	gap.Rotation = Scores{PSNRdB: 25, SSIM: 0.82, MAE: 5.5}
	gap.Predicted = Scores{PSNRdB: 28, SSIM: 0.90, MAE: 4}
	gap.SynthMs = 6.5
	stale := NewTickRow(2, 66_666, TickStale, 66.7)
	s, err := Summarize([]TickRow{live, gap, stale})
	if err != nil {
		fmt.Println(err)
		return
	}
	fmt.Printf("ticks %d, missing %d, predicted %d, stale %d\n", s.TicksTotal, s.TicksMissing, s.PredictedTicks, s.StaleTicks)
	fmt.Printf("predicted: %d frame(s), PSNR %.1f dB, SSIM %.2f; in bucket %s: %d\n",
		s.Methods.Predicted.Frames, s.Methods.Predicted.PSNRdBMean, s.Methods.Predicted.SSIMMean,
		s.Methods.Predicted.Buckets[0].Bucket, s.Methods.Predicted.Buckets[0].Frames)
	// Output:
	// ticks 3, missing 2, predicted 1, stale 1
	// predicted: 1 frame(s), PSNR 28.0 dB, SSIM 0.90; in bucket 0-100: 1
}
