package bench

import (
	"context"
	"fmt"
	"io"
	"math"

	"gocv.io/x/gocv"

	"stopgap/bench/simdrive"
	"stopgap/predictor"
	"stopgap/stream/recording"
)

// Regions of the error budget: what a pixel of the true frame shows, and
// whether the held frame saw it (simdrive.Scene.Seen).
const (
	BudgetGround  = "road (ground plane), seen"
	BudgetPost    = "posts, seen"
	BudgetFacade  = "facades, seen"
	BudgetSky     = "sky, seen"
	BudgetOutside = "entering the view"
	BudgetHidden  = "disoccluded"
	BudgetMoving  = "road users"
)

// budgetRegions lists the regions in table order.
var budgetRegions = []string{BudgetGround, BudgetPost, BudgetFacade, BudgetSky, BudgetOutside, BudgetHidden, BudgetMoving}

// BudgetRow is one region of an ErrorBudget, over all PREDICTED ticks.
type BudgetRow struct {
	Region string `json:"region"`
	// PixelShare is the region's share of the scored pixels.
	PixelShare float64 `json:"pixel_share"`
	// ErrShare is its share of the predicted frames' squared luma error.
	ErrShare float64 `json:"err_share"`
	// PredMSE and HoldMSE are the mean squared luma errors of the
	// predicted and of the held frame against the true frame (JPEG as
	// recorded) inside the region; CodecMSE that of the true frame's JPEG
	// against its raw render, which no prediction can remove.
	PredMSE  float64 `json:"pred_mse"`
	HoldMSE  float64 `json:"hold_mse"`
	CodecMSE float64 `json:"codec_mse"`
	// ExactWarpMSE is that of the held frame sampled (bilinear, in luma)
	// where the scene's exact geometry puts each true pixel's point: the
	// error of a warp with no model error, left by the resampling, the
	// change of resolution and both frames' codec noise (seen regions
	// only; 0 elsewhere).
	ExactWarpMSE float64 `json:"exact_warp_mse"`
	// GainIfRightDB is the mean gain over hold (dB, mean of per-tick PSNR
	// as the replay scores) if the prediction were right in this region
	// up to the true frame's codec noise, the other regions as they are.
	GainIfRightDB float64 `json:"gain_if_right_db"`
}

// Budget is the error budget of the PREDICTED ticks of one replay.
type Budget struct {
	// Ticks is the number of PREDICTED ticks scored.
	Ticks int `json:"ticks"`
	// HoldDB and PredDB are the mean PSNR of hold and of the predicted
	// frames over those ticks (whole frame, as Scorer), GainDB their
	// difference.
	HoldDB float64 `json:"hold_db"`
	PredDB float64 `json:"pred_db"`
	GainDB float64 `json:"gain_db"`
	// KnowableGainDB is the gain scored over the pixels the held frame
	// sees only (road users, pixels entering the view and disoccluded
	// pixels left out of both hold and prediction).
	KnowableGainDB float64 `json:"knowable_gain_db"`
	// AllRightGainDB is the gain if every seen region were right up to
	// the true frame's codec noise (the pixels the held frame does not
	// see as they are): the most a better synthesis can give.
	AllRightGainDB float64 `json:"all_right_gain_db"`
	// ExactWarpGainDB is the gain if every seen region were predicted by
	// the exact-geometry warp (BudgetRow.ExactWarpMSE), the other regions
	// as they are.
	ExactWarpGainDB float64 `json:"exact_warp_gain_db"`
	// HeldCodecMSE is the mean squared luma error of the held frames'
	// JPEG against their raw renders (warped along into the prediction).
	HeldCodecMSE float64 `json:"held_codec_mse"`
	// GreyShare is the share of predicted pixels in NeutralGrey (no
	// source, or disoccluded).
	GreyShare float64 `json:"grey_share"`
	// Rows holds one row per region, in table order.
	Rows []BudgetRow `json:"rows"`
}

// ErrorBudget replays cfg with the exact motion from truth.csv and splits
// the squared luma error of every PREDICTED frame against the true frame by
// what the true frame's pixels show (drive, the simdrive configuration the
// drive at cfg.Drive was generated with, gives the exact geometry): the
// road, posts and facades and the sky that the held frame sees, and the
// pixels it does not see (entering the view, disoccluded, road users). With
// the exact motion, what is left is the synthesis (models, interpolation,
// the held frame's codec noise) and the true frame's own codec noise.
func ErrorBudget(ctx context.Context, cfg ReplayConfig, drive simdrive.Config) (Budget, error) {
	sc, err := simdrive.NewScene(drive)
	if err != nil {
		return Budget{}, fmt.Errorf("error budget: %w", err)
	}
	defer sc.Close()
	a := newBudgetAcc(sc)
	defer a.Close()
	cfg.truthMotion, cfg.Examples, cfg.predicted = func(tr []recording.Truth) predictor.MotionSource { return exactMotion(tr) }, -1, a.add
	var out replayOutput
	if _, err := replayDrive(ctx, cfg, &out); err != nil {
		return Budget{}, fmt.Errorf("error budget: %w", err)
	}
	closeExamples(out.examples)
	return a.budget(), nil
}

// nBudget is the number of regions (len(budgetRegions)).
const nBudget = 7

// budgetTick holds, per region, the summed squared luma errors of the
// predicted frame, of hold and of the true frame's codec, and the pixels.
type budgetTick struct {
	pred, hold, codec, exact, n [nBudget]float64
}

// budgetAcc accumulates the budget tick by tick.
type budgetAcc struct {
	sc           *simdrive.Scene
	raw          gocv.Mat
	gTruth       simdrive.Geometry
	gHeld        simdrive.Geometry
	heldIdx      int
	vis          []simdrive.Visibility
	xy           []float32 // where each true pixel's point is in the held frame
	region       []uint8
	lp, lt, lh   []float32 // luma of the predicted, true (JPEG) and held frames
	lr           []float32 // luma of the true frame's raw render
	ticks        int
	pixels       float64
	all          budgetTick // summed over the ticks
	perTick      []budgetTick
	heldCodecSum float64
	heldCodecN   float64
	grey         float64
}

func newBudgetAcc(sc *simdrive.Scene) *budgetAcc {
	return &budgetAcc{sc: sc, raw: gocv.NewMat(), heldIdx: -1}
}

func (a *budgetAcc) Close() { a.raw.Close() }

// luma writes the BT.601 luma of an 8UC3 BGR frame into dst (as Scorer).
func luma(dst []float32, m gocv.Mat) ([]float32, error) {
	b, err := m.DataPtrUint8()
	if err != nil || m.Type() != gocv.MatTypeCV8UC3 || !m.IsContinuous() {
		return dst, fmt.Errorf("error budget: want a whole 8UC3 frame: %w", ErrReplayInput)
	}
	n := len(b) / 3
	dst = dst[:0]
	for i := 0; i < n; i++ {
		dst = append(dst, float32(lumaB)*float32(b[3*i])+float32(lumaG)*float32(b[3*i+1])+float32(lumaR)*float32(b[3*i+2]))
	}
	return dst, nil
}

// regionOf returns the index in budgetRegions of a pixel.
func (a *budgetAcc) regionOf(surface int32, v simdrive.Visibility) uint8 {
	switch v {
	case simdrive.Outside:
		return 4
	case simdrive.Hidden:
		return 5
	case simdrive.Moving, simdrive.VisibilityNone:
		return 6
	}
	switch a.sc.Class(surface) {
	case simdrive.ClassGround:
		return 0
	case simdrive.ClassPost:
		return 1
	case simdrive.ClassFacade:
		return 2
	case simdrive.ClassSky:
		return 3
	}
	return 6
}

// add takes one PREDICTED tick (ReplayConfig.predicted).
func (a *budgetAcc) add(k, held int, pred, truth, heldImg gocv.Mat) error {
	var err error
	if held != a.heldIdx {
		if err := a.sc.Render(held, &a.raw, &a.gHeld); err != nil {
			return err
		}
		if a.lr, err = luma(a.lr, a.raw); err != nil {
			return err
		}
		if a.lh, err = luma(a.lh, heldImg); err != nil {
			return err
		}
		for i, r := range a.lr {
			d := float64(a.lh[i] - r)
			a.heldCodecSum += d * d
		}
		a.heldCodecN += float64(len(a.lr))
		a.heldIdx = held
	} else if a.lh, err = luma(a.lh, heldImg); err != nil {
		return err
	}
	if err := a.sc.Render(k, &a.raw, &a.gTruth); err != nil {
		return err
	}
	if a.lr, err = luma(a.lr, a.raw); err != nil {
		return err
	}
	if a.lt, err = luma(a.lt, truth); err != nil {
		return err
	}
	if a.lp, err = luma(a.lp, pred); err != nil {
		return err
	}
	n := len(a.lt)
	if len(a.lp) != n || len(a.lh) != n || len(a.lr) != n {
		return fmt.Errorf("error budget: frame sizes differ: %w", ErrReplayInput)
	}
	if len(a.vis) != n {
		a.vis = make([]simdrive.Visibility, n)
		a.xy = make([]float32, 2*n)
	}
	if err := a.sc.Seen(a.vis, a.xy, &a.gTruth, &a.gHeld); err != nil {
		return err
	}
	w, h := a.gTruth.Width, a.gTruth.Height
	pb, _ := pred.DataPtrUint8()
	var t budgetTick
	for i := 0; i < n; i++ {
		r := a.regionOf(a.gTruth.Surface[i], a.vis[i])
		dp, dh, dc := float64(a.lp[i]-a.lt[i]), float64(a.lh[i]-a.lt[i]), float64(a.lt[i]-a.lr[i])
		t.pred[r] += dp * dp
		t.hold[r] += dh * dh
		t.codec[r] += dc * dc
		t.n[r]++
		if a.vis[i] == simdrive.Seen {
			de := bilinear(a.lh, w, h, float64(a.xy[2*i]), float64(a.xy[2*i+1])) - float64(a.lt[i])
			t.exact[r] += de * de
		}
		if pb[3*i] == 128 && pb[3*i+1] == 128 && pb[3*i+2] == 128 {
			a.grey++
		}
	}
	for r := range nBudget {
		a.all.pred[r] += t.pred[r]
		a.all.hold[r] += t.hold[r]
		a.all.codec[r] += t.codec[r]
		a.all.exact[r] += t.exact[r]
		a.all.n[r] += t.n[r]
	}
	a.perTick = append(a.perTick, t)
	a.pixels += float64(n)
	a.ticks++
	return nil
}

// bilinear samples the w x h image l at (x, y), clamping to the border.
func bilinear(l []float32, w, h int, x, y float64) float64 {
	x = math.Min(math.Max(x, 0), float64(w-1))
	y = math.Min(math.Max(y, 0), float64(h-1))
	x0, y0 := min(int(x), w-2), min(int(y), h-2)
	fx, fy := x-float64(x0), y-float64(y0)
	at := func(xx, yy int) float64 { return float64(l[yy*w+xx]) }
	return (1-fy)*((1-fx)*at(x0, y0)+fx*at(x0+1, y0)) + fy*((1-fx)*at(x0, y0+1)+fx*at(x0+1, y0+1))
}

// psnr returns the PSNR of a summed squared error over n pixels, capped
// as the report's means are.
func psnr(sse, n float64) float64 {
	return CapPSNR(10 * math.Log10(PSNRPeak*PSNRPeak*n/sse))
}

func (a *budgetAcc) budget() Budget {
	b := Budget{Ticks: a.ticks}
	if a.ticks == 0 {
		return b
	}
	sum := func(x [nBudget]float64, keep func(r int) bool) float64 {
		var s float64
		for r := range nBudget {
			if keep(r) {
				s += x[r]
			}
		}
		return s
	}
	all := func(int) bool { return true }
	seen := func(r int) bool { return r < 4 } // ground, posts, facades, sky
	// mean returns the mean over ticks of the PSNR of f's squared error
	// over f's pixels.
	mean := func(f func(t *budgetTick) (sse, n float64)) float64 {
		var s float64
		for i := range a.perTick {
			s += psnr(f(&a.perTick[i]))
		}
		return s / float64(a.ticks)
	}
	b.HoldDB = mean(func(t *budgetTick) (float64, float64) { return sum(t.hold, all), sum(t.n, all) })
	b.PredDB = mean(func(t *budgetTick) (float64, float64) { return sum(t.pred, all), sum(t.n, all) })
	b.GainDB = b.PredDB - b.HoldDB
	b.KnowableGainDB = mean(func(t *budgetTick) (float64, float64) { return sum(t.pred, seen), sum(t.n, seen) }) -
		mean(func(t *budgetTick) (float64, float64) { return sum(t.hold, seen), sum(t.n, seen) })
	b.AllRightGainDB = mean(func(t *budgetTick) (float64, float64) {
		return sum(t.codec, seen) + sum(t.pred, func(r int) bool { return !seen(r) }), sum(t.n, all)
	}) - b.HoldDB
	b.ExactWarpGainDB = mean(func(t *budgetTick) (float64, float64) {
		return sum(t.exact, seen) + sum(t.pred, func(r int) bool { return !seen(r) }), sum(t.n, all)
	}) - b.HoldDB
	totP := sum(a.all.pred, all)
	for r, name := range budgetRegions {
		row := BudgetRow{Region: name, PixelShare: a.all.n[r] / a.pixels, ErrShare: a.all.pred[r] / totP}
		if n := a.all.n[r]; n > 0 {
			row.PredMSE, row.HoldMSE, row.CodecMSE = a.all.pred[r]/n, a.all.hold[r]/n, a.all.codec[r]/n
			if seen(r) {
				row.ExactWarpMSE = a.all.exact[r] / n
			}
		}
		row.GainIfRightDB = mean(func(t *budgetTick) (float64, float64) {
			return sum(t.pred, func(q int) bool { return q != r }) + t.codec[r], sum(t.n, all)
		}) - b.HoldDB
		b.Rows = append(b.Rows, row)
	}
	b.HeldCodecMSE = a.heldCodecSum / a.heldCodecN
	b.GreyShare = a.grey / a.pixels
	return b
}

// WriteBudget writes b as a plain-text table.
func WriteBudget(w io.Writer, b Budget) {
	fmt.Fprintf(w, "%d PREDICTED ticks: hold %.2f dB, predicted %.2f dB, gain %.2f dB; scored over seen pixels only: gain %.2f dB; every seen region right up to codec noise: gain %.2f dB\n",
		b.Ticks, b.HoldDB, b.PredDB, b.GainDB, b.KnowableGainDB, b.AllRightGainDB)
	fmt.Fprintf(w, "seen regions warped with the exact geometry: gain %.2f dB; held frames' JPEG noise (luma MSE vs raw render) %.2f; predicted pixels in neutral grey %.2f %%\n",
		b.ExactWarpGainDB, b.HeldCodecMSE, 100*b.GreyShare)
	fmt.Fprintf(w, "%-26s %8s %9s %10s %10s %10s %10s %14s\n", "region", "pixels", "of error", "pred MSE", "hold MSE", "exact MSE", "codec MSE", "gain if right")
	for _, r := range b.Rows {
		fmt.Fprintf(w, "%-26s %7.2f%% %8.2f%% %10.1f %10.1f %10.1f %10.2f %11.2f dB\n", r.Region, 100*r.PixelShare, 100*r.ErrShare, r.PredMSE, r.HoldMSE, r.ExactWarpMSE, r.CodecMSE, r.GainIfRightDB)
	}
}
