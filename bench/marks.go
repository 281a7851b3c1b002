package bench

import (
	"errors"
	"fmt"
	"image"
	"math"
	"os"
	"path/filepath"

	"gocv.io/x/gocv"

	"stopgap/bench/simdrive"
	"stopgap/filter"
	"stopgap/predictor"
)

// MarkAgeLimitMs is the gap age up to which MarkSummary's headline figures
// are taken (our acceptance range for the marks of things that moved).
const MarkAgeLimitMs = 300

// MarkSummary scores the marks of things that moved (predictor.Mover) on
// PREDICTED ticks of a drive that carries the exact masks of its moving
// road users (simdrive's movers/ directory). On each such tick the truly
// changed pixels are where a moving thing is in the true frame, or where
// the predicted picture shows one (the held frame's mask warped as the
// held frame was), outside the label; the marked pixels are inside a
// mark's zone (its last known place and where it could be by now).
// Recall is the share of truly changed pixels that are marked, precision
// the share of marked pixels that truly changed. Means are over ticks
// (recall over ticks with changed pixels, precision over ticks with
// marks); pooled figures are over the pixels of all those ticks (a large
// car weighs more than a distant pedestrian).
type MarkSummary struct {
	// AgeLimitMs is MarkAgeLimitMs: the headline figures are over ticks up
	// to this age.
	AgeLimitMs float64 `json:"age_limit_ms"`
	// Ticks, RecallMean, PrecisionMean: ticks up to AgeLimitMs scored,
	// mean recall and mean precision over them.
	Ticks         int   `json:"ticks"`
	RecallMean    Float `json:"recall_mean"`
	PrecisionMean Float `json:"precision_mean"`
	// RecallPooled and PrecisionPooled over the pixels of those ticks.
	RecallPooled    Float `json:"recall_pooled"`
	PrecisionPooled Float `json:"precision_pooled"`
	// The same over PREDICTED ticks of every age.
	TicksAll         int   `json:"ticks_all"`
	RecallMeanAll    Float `json:"recall_mean_all"`
	PrecisionMeanAll Float `json:"precision_mean_all"`
}

// markAcc accumulates MarkSummary over tick rows.
type markAcc struct {
	recall, precision, recallAll, precisionAll meanAcc
	ticks, ticksAll                            int
	// Pooled: hits weighted by changed and by marked pixels (shares).
	hitC, changed, hitM, marked float64
}

func (a *markAcc) add(r TickRow) {
	if math.IsNaN(r.MarkRecall) && math.IsNaN(r.MarkPrecision) {
		return
	}
	a.ticksAll++
	a.recallAll.add(r.MarkRecall)
	a.precisionAll.add(r.MarkPrecision)
	if r.AgeMs <= MarkAgeLimitMs {
		a.ticks++
		a.recall.add(r.MarkRecall)
		a.precision.add(r.MarkPrecision)
		if !math.IsNaN(r.MarkRecall) {
			a.hitC += r.MarkRecall * r.MarkChangedShare
			a.changed += r.MarkChangedShare
		}
		if !math.IsNaN(r.MarkPrecision) {
			a.hitM += r.MarkPrecision * r.MarkMarkedShare
			a.marked += r.MarkMarkedShare
		}
	}
}

// summary returns nil when no tick was scored (a drive without masks).
func (a *markAcc) summary() *MarkSummary {
	if a.ticksAll == 0 {
		return nil
	}
	ratio := func(a, b float64) Float {
		if b > 0 {
			return Float(a / b)
		}
		return Float(math.NaN())
	}
	return &MarkSummary{AgeLimitMs: MarkAgeLimitMs, Ticks: a.ticks, RecallMean: a.recall.mean(), PrecisionMean: a.precision.mean(),
		RecallPooled: ratio(a.hitC, a.changed), PrecisionPooled: ratio(a.hitM, a.marked),
		TicksAll: a.ticksAll, RecallMeanAll: a.recallAll.mean(), PrecisionMeanAll: a.precisionAll.mean()}
}

// markScorer scores the marks of one tick against the drive's masks. It
// owns its scratch images (Close frees them).
type markScorer struct {
	drive                                     string
	held, target, bgr, warped, truth, mk, hit gocv.Mat
}

// newMarkScorer returns a scorer for drive, or nil when the drive has no
// masks of moving things.
func newMarkScorer(drive string) (*markScorer, error) {
	st, err := os.Stat(filepath.Join(drive, simdrive.MoverMaskDir))
	if errors.Is(err, os.ErrNotExist) {
		return nil, nil
	}
	if err != nil {
		return nil, fmt.Errorf("replay: %w", err)
	}
	if !st.IsDir() {
		return nil, fmt.Errorf("replay: %s is not a directory of masks; remove it or regenerate the drive: %w",
			filepath.Join(drive, simdrive.MoverMaskDir), ErrReplayInput)
	}
	return &markScorer{drive: drive, held: gocv.NewMat(), target: gocv.NewMat(), bgr: gocv.NewMat(), warped: gocv.NewMat(),
		truth: gocv.NewMat(), mk: gocv.NewMat(), hit: gocv.NewMat()}, nil
}

func (s *markScorer) Close() {
	if s == nil {
		return
	}
	for _, m := range []*gocv.Mat{&s.held, &s.target, &s.bgr, &s.warped, &s.truth, &s.mk, &s.hit} {
		m.Close()
	}
}

// readMask reads frame i's mask into dst and checks its size.
func (s *markScorer) readMask(i int, w, h int, dst *gocv.Mat) error {
	p := simdrive.MoverMaskPath(s.drive, i)
	m := gocv.IMRead(p, gocv.IMReadGrayScale)
	defer m.Close()
	if m.Empty() {
		return fmt.Errorf("replay: %s is missing or not an image; regenerate the drive with simdrive --traffic: %w", p, ErrReplayInput)
	}
	if m.Cols() != w || m.Rows() != h {
		return fmt.Errorf("replay: %s is %dx%d, the frames %dx%d; regenerate the drive: %w", p, m.Cols(), m.Rows(), w, h, ErrReplayInput)
	}
	gocv.Threshold(m, dst, 127, 255, gocv.ThresholdBinary)
	return nil
}

// score sets the mark figures of row, the tick just filled by f (held
// frame j, tick k at ageMs, motion m): recall and precision (NaN where
// there is nothing to divide by) and the changed and marked shares.
func (s *markScorer) score(row *TickRow, f *predictor.Filler, cam predictor.Camera, j, k int, ageMs float64, m filter.Motion) error {
	w, h := cam.Width, cam.Height
	if err := s.readMask(j, w, h, &s.held); err != nil {
		return err
	}
	if err := s.readMask(k, w, h, &s.target); err != nil {
		return err
	}
	// Where the predicted picture shows the moving things of the held
	// frame: their mask warped as the held frame was. A pixel counts when
	// its value is above the neutral fill of pixels that nothing maps to
	// (the warp leaves them predictor.NeutralGrey, which is not a mover):
	// more than half covered by the mask where the rest is background.
	gocv.CvtColor(s.held, &s.bgr, gocv.ColorGrayToBGR)
	if _, err := f.WarpAsShown(s.bgr, m, &s.warped); err != nil {
		return fmt.Errorf("warping the mask of moving things: %w", err)
	}
	gocv.CvtColor(s.warped, &s.truth, gocv.ColorBGRToGray)
	gocv.Threshold(s.truth, &s.truth, predictor.NeutralGrey, 255, gocv.ThresholdBinary)
	gocv.BitwiseOr(s.truth, s.target, &s.truth)

	s.mk = ensureGray(s.mk, w, h)
	s.mk.SetTo(gocv.NewScalar(0, 0, 0, 0))
	for _, mv := range f.Marks() {
		z := mv.Zone(ageMs).Intersect(image.Rect(0, 0, w, h))
		if z.Empty() {
			continue
		}
		roi := s.mk.Region(z)
		roi.SetTo(gocv.NewScalar(255, 0, 0, 0))
		roi.Close()
	}
	// Outside the label only: the border and the text box are masked out
	// of both.
	inner, text := f.LabelArea()
	for _, img := range []*gocv.Mat{&s.truth, &s.mk} {
		clearOutside(img, inner)
		if !text.Empty() {
			roi := img.Region(text)
			roi.SetTo(gocv.NewScalar(0, 0, 0, 0))
			roi.Close()
		}
	}
	changed, marked := gocv.CountNonZero(s.truth), gocv.CountNonZero(s.mk)
	gocv.BitwiseAnd(s.truth, s.mk, &s.hit)
	hit := gocv.CountNonZero(s.hit)
	row.MarkRecall, row.MarkPrecision = math.NaN(), math.NaN()
	if changed > 0 {
		row.MarkRecall = float64(hit) / float64(changed)
	}
	if marked > 0 {
		row.MarkPrecision = float64(hit) / float64(marked)
	}
	row.MarkChangedShare, row.MarkMarkedShare = float64(changed)/float64(w*h), float64(marked)/float64(w*h)
	return nil
}

// markedTick is what the scoring of one PREDICTED tick's marks saw, for
// a diagnosis (ReplayConfig.marked). The images are the scorer's and the
// replay's, borrowed for the call.
type markedTick struct {
	// K is the tick, Held the held frame's index, AgeMs the picture age.
	K, Held int
	AgeMs   float64
	// Shown is the picture the operator saw (labelled, marks drawn).
	Shown gocv.Mat
	// Changed is the truly changed pixels (Target or ShownMask, outside
	// the label), Marked the marked pixels; Target the moving things'
	// mask of the true frame, ShownMask the held frame's mask warped as the
	// held frame was (before the label is masked out of either).
	Changed, Marked, Target, ShownMask gocv.Mat
	// Marks are the marks as placed on the tick (predictor.Filler.Marks).
	Marks []predictor.Mover
	// Inner is the area inside the label's border, Text the label's text
	// box within it (both left out of Changed and Marked).
	Inner, Text image.Rectangle
	// HeldMask is the moving things' mask of the held frame; Motion the
	// tick's motion (held frame -> tick) and Filler the replay's, for
	// placing boxes of a diagnosis's own (predictor.Filler.PlaceMarks).
	HeldMask gocv.Mat
	Motion   filter.Motion
	Filler   *predictor.Filler
}

// tick returns the markedTick of the tick score was just called for.
func (s *markScorer) tick(f *predictor.Filler, held, k int, ageMs float64, shown gocv.Mat, m filter.Motion) markedTick {
	inner, text := f.LabelArea()
	return markedTick{K: k, Held: held, AgeMs: ageMs, Shown: shown, Changed: s.truth, Marked: s.mk,
		Target: s.target, ShownMask: s.warped, Marks: f.Marks(), Inner: inner, Text: text,
		HeldMask: s.held, Motion: m, Filler: f}
}

// ensureGray returns m if it is a w x h CV_8U image, else a new one (m is
// closed).
func ensureGray(m gocv.Mat, w, h int) gocv.Mat {
	if m.Cols() == w && m.Rows() == h && m.Type() == gocv.MatTypeCV8U {
		return m
	}
	m.Close()
	return gocv.NewMatWithSize(h, w, gocv.MatTypeCV8U)
}

// clearOutside sets the pixels of img (CV_8U) outside r to 0.
func clearOutside(img *gocv.Mat, r image.Rectangle) {
	full := image.Rect(0, 0, img.Cols(), img.Rows())
	for _, b := range [4]image.Rectangle{
		image.Rect(0, 0, full.Max.X, r.Min.Y), image.Rect(0, r.Max.Y, full.Max.X, full.Max.Y),
		image.Rect(0, r.Min.Y, r.Min.X, r.Max.Y), image.Rect(r.Max.X, r.Min.Y, full.Max.X, r.Max.Y),
	} {
		if b = b.Intersect(full); !b.Empty() {
			roi := img.Region(b)
			roi.SetTo(gocv.NewScalar(0, 0, 0, 0))
			roi.Close()
		}
	}
}
