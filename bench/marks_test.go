package bench

import (
	"context"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/bench/simdrive"
	"stopgap/internal/lossmodel"
	"stopgap/predictor"
)

// TestMarkSummary: means are over ticks, pooled figures over pixels, the
// headline only up to MarkAgeLimitMs, and a drive without scored ticks has
// no summary.
func TestMarkSummary(t *testing.T) {
	var a markAcc
	if a.summary() != nil {
		t.Fatal("summary without scored ticks, want nil")
	}
	row := func(age, rec, prec, changed, marked float64) TickRow {
		r := NewTickRow(0, 0, TickPredicted, age)
		r.MarkRecall, r.MarkPrecision, r.MarkChangedShare, r.MarkMarkedShare = rec, prec, changed, marked
		return r
	}
	a.add(NewTickRow(0, 0, TickPredicted, 10)) // not scored
	a.add(row(100, 1, 0.5, 0.01, 0.02))
	a.add(row(200, 0, math.NaN(), 0.03, 0))
	a.add(row(400, 0.5, 0.5, 0.5, 0.5)) // beyond the limit
	s := a.summary()
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"ticks", float64(s.Ticks), 2},
		{"ticks_all", float64(s.TicksAll), 3},
		{"recall_mean", float64(s.RecallMean), 0.5},
		{"precision_mean", float64(s.PrecisionMean), 0.5},
		{"recall_pooled", float64(s.RecallPooled), 0.01 / 0.04},
		{"precision_pooled", float64(s.PrecisionPooled), 0.5},
		{"recall_mean_all", float64(s.RecallMeanAll), 0.5},
	} {
		if math.Abs(c.got-c.want) > 1e-12 {
			t.Errorf("%s = %v, want %v", c.name, c.got, c.want)
		}
	}
}

// TestReplayScoresMarks: a small drive with traffic gets a marks summary
// and per-tick figures in [0, 1]; the same drive without masks gets none;
// a mask of the wrong size is refused naming the file.
func TestReplayScoresMarks(t *testing.T) {
	dir := t.TempDir()
	drive := filepath.Join(dir, "busy")
	if err := simdrive.Generate(context.Background(), simdrive.Config{Width: 320, Height: 180, DurationS: 4, Traffic: true}, drive, nil); err != nil {
		t.Fatal(err)
	}
	cfg := ReplayConfig{Drive: drive, Out: filepath.Join(dir, "r"), Examples: -1,
		Loss:   lossmodel.Config{Model: lossmodel.GilbertElliott, LossRate: 0.2, BurstMs: 200, Seed: 1},
		Policy: predictor.DefaultPolicy()}
	sum, err := Replay(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	if sum.PredictedTicks == 0 || sum.Marks == nil || sum.Marks.TicksAll == 0 {
		t.Fatalf("%d PREDICTED ticks, marks %+v: want scored marks", sum.PredictedTicks, sum.Marks)
	}
	t.Logf("marks: %+v", *sum.Marks)

	if err := os.Rename(filepath.Join(drive, simdrive.MoverMaskDir), filepath.Join(dir, "masks")); err != nil {
		t.Fatal(err)
	}
	cfg.Overwrite = true
	if sum, err = Replay(context.Background(), cfg); err != nil || sum.Marks != nil {
		t.Fatalf("without masks: marks %+v, err %v; want none", sum.Marks, err)
	}

	if err := os.Rename(filepath.Join(dir, "masks"), filepath.Join(drive, simdrive.MoverMaskDir)); err != nil {
		t.Fatal(err)
	}
	small := gocv.NewMatWithSize(10, 10, gocv.MatTypeCV8U)
	defer small.Close()
	for i := range 120 {
		gocv.IMWrite(simdrive.MoverMaskPath(drive, i), small)
	}
	_, err = Replay(context.Background(), cfg)
	if !errors.Is(err, ErrReplayInput) || !strings.Contains(err.Error(), simdrive.MoverMaskDir) {
		t.Errorf("masks of the wrong size: %v, want ErrReplayInput naming the file", err)
	}
}

// TestMarkScorerIgnoresUnfilled: where the predicted picture has no source
// (neutral grey, here on the side a turn uncovers) nothing moved; with masks
// that hold no road user, no pixel counts as truly changed.
func TestMarkScorerIgnoresUnfilled(t *testing.T) {
	dir := t.TempDir()
	const w, h = 160, 90
	if err := os.Mkdir(filepath.Join(dir, simdrive.MoverMaskDir), 0o755); err != nil {
		t.Fatal(err)
	}
	empty := gocv.NewMatWithSize(h, w, gocv.MatTypeCV8U)
	defer empty.Close()
	for i := range 2 {
		if !gocv.IMWrite(simdrive.MoverMaskPath(dir, i), empty) {
			t.Fatal("writing a mask")
		}
	}
	s, err := newMarkScorer(dir)
	if err != nil || s == nil {
		t.Fatalf("scorer %v, err %v", s, err)
	}
	defer s.Close()
	cam := predictor.Camera{Width: w, Height: h, Fx: 80, Fy: 80, Cx: 80, Cy: 45, HeightM: 1.4, PitchDeg: 5}
	// Truth with a turn of 0.3 rad between the two frames.
	truth := exactMotion{{CaptureUs: 0}, {CaptureUs: 100_000, XM: 1, YawRad: 0.3}}
	f, err := predictor.NewFiller(predictor.FillerConfig{Camera: cam, Policy: predictor.DefaultPolicy(), Motion: truth})
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	img := gocv.NewMatWithSizeFromScalar(gocv.NewScalar(30, 200, 60, 0), h, w, gocv.MatTypeCV8UC3)
	defer img.Close()
	if err := f.Hold(img, 0); err != nil {
		t.Fatal(err)
	}
	m, err := truth.Relative(0, 100_000)
	if err != nil {
		t.Fatal(err)
	}
	warped := gocv.NewMat()
	defer warped.Close()
	syn, err := f.WarpAsShown(img, m, &warped)
	if err != nil || syn.UnfilledFraction < 0.05 {
		t.Fatalf("unfilled share %.3f (err %v): the check needs a warp that leaves pixels without source", syn.UnfilledFraction, err)
	}
	row := NewTickRow(1, 100_000, TickPredicted, 100)
	if err := s.score(&row, f, cam, 0, 1, 100, m); err != nil {
		t.Fatal(err)
	}
	if row.MarkChangedShare != 0 {
		t.Errorf("changed share %.3f with empty masks, want 0 (unfilled pixels counted as a road user)", row.MarkChangedShare)
	}
}
