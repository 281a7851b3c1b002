package bench

import (
	"errors"
	"fmt"
	"math"

	"stopgap/internal/display"
)

// TickRow is one display tick of a replay, one line of ticks.csv. Use
// NewTickRow so that the optional values start as NaN ("not measured");
// a NaN value is written as an empty CSV cell and left out of every mean.
type TickRow struct {
	Tick       int     // tick index from 0
	TargetUs   int64   // display time of the tick on the vehicle clock, us
	State      string  // TickLive, TickPredicted or TickStale
	AgeMs      float64 // age of the newest real frame at the tick, ms (>= 0)
	Confidence float64 // predictor confidence in [0,1], NaN if not computed

	// Scores of each method against the true frame of this tick. All
	// three fields NaN means the method was not scored on this tick.
	Hold, Rotation, Predicted Scores

	SynthMs       float64 // wall time to synthesise the frame, ms; NaN if none
	UnfilledShare float64 // share of neutral-fill pixels in [0,1]; NaN if n/a
	LabelShare    float64 // share of label pixels in [0,1]; NaN if n/a

	// Warp scores the predicted frame on every missing tick with a usable
	// motion, whether the policy showed it (PREDICTED) or not (STALE):
	// what a lower cutoff would have shown. NaN when not scored.
	Warp Scores
	// SigmaPx is the 1-sigma pixel error behind Confidence; NaN if n/a.
	SigmaPx float64
	// MisalignPx and MisalignMrad are the misalignment of the warp (the
	// predicted frame) against the true frame, measured from the images
	// (MisalignmentMeter on the road region at the reference points); NaN
	// when not measured.
	MisalignPx, MisalignMrad float64
	// TruthMisalignMrad is the same misalignment computed exactly from
	// truth.csv (TruthMisalignmentPx), milliradians; NaN without truth.
	TruthMisalignMrad float64
	// MarkRecall and MarkPrecision score the marks of things that moved
	// on a PREDICTED tick of a drive with masks of its moving road users
	// (see MarkSummary); NaN when not scored or nothing to divide by.
	MarkRecall, MarkPrecision float64
	// MarkChangedShare and MarkMarkedShare are the shares of the image's
	// pixels that truly changed and that were marked on that tick (the
	// weights of the pooled figures); NaN when not scored.
	MarkChangedShare, MarkMarkedShare float64
}

// UnscoredScores returns Scores with every field NaN, meaning "not
// scored".
func UnscoredScores() Scores { return Scores{math.NaN(), math.NaN(), math.NaN()} }

// NewTickRow returns a row with all optional values NaN.
func NewTickRow(tick int, targetUs int64, state string, ageMs float64) TickRow {
	nan := math.NaN()
	u := UnscoredScores()
	return TickRow{Tick: tick, TargetUs: targetUs, State: state, AgeMs: ageMs, Confidence: nan,
		Hold: u, Rotation: u, Predicted: u, SynthMs: nan, UnfilledShare: nan, LabelShare: nan,
		Warp: u, SigmaPx: nan, MisalignPx: nan, MisalignMrad: nan, TruthMisalignMrad: nan,
		MarkRecall: nan, MarkPrecision: nan, MarkChangedShare: nan, MarkMarkedShare: nan}
}

// MethodScores returns the scores of m on this tick (UnscoredScores for
// an invalid m).
func (r *TickRow) MethodScores(m Method) Scores {
	switch m {
	case MethodHold:
		return r.Hold
	case MethodRotation:
		return r.Rotation
	case MethodPredicted:
		return r.Predicted
	}
	return UnscoredScores()
}

// scored reports whether s holds scores (all three set) and checks them.
func checkScores(s Scores) (bool, error) {
	nans := 0
	for _, v := range []float64{s.PSNRdB, s.SSIM, s.MAE} {
		if math.IsNaN(v) {
			nans++
		}
	}
	switch nans {
	case 3:
		return false, nil
	case 0:
	default:
		return false, errors.New("some metrics set and some NaN; set all three or none")
	}
	switch {
	case s.PSNRdB < 0:
		return false, fmt.Errorf("PSNR %g dB below 0", s.PSNRdB)
	case s.SSIM < -1 || s.SSIM > 1:
		return false, fmt.Errorf("SSIM %g outside [-1, 1]", s.SSIM)
	case s.MAE < 0 || s.MAE > 255:
		return false, fmt.Errorf("MAE %g outside [0, 255]", s.MAE)
	case (s.MAE == 0) != math.IsInf(s.PSNRdB, 1):
		return false, fmt.Errorf("MAE %g and PSNR %g dB disagree (zero MAE means infinite PSNR); "+
			"use UnscoredScores for a method that was not scored", s.MAE, s.PSNRdB)
	}
	return true, nil
}

// Validate checks a row and returns an error wrapping ErrTickRow that
// names the tick and the bad value.
func (r *TickRow) Validate() error {
	bad := func(format string, args ...any) error {
		return fmt.Errorf("%w: tick %d: %s", ErrTickRow, r.Tick, fmt.Sprintf(format, args...))
	}
	if _, err := display.ParseState(r.State); err != nil {
		return bad("%v", err)
	}
	if !(r.AgeMs >= 0) || math.IsInf(r.AgeMs, 0) {
		return bad("age %g ms, want a finite value >= 0", r.AgeMs)
	}
	share := func(name string, v float64) error {
		if !math.IsNaN(v) && (v < 0 || v > 1) {
			return bad("%s %g outside [0, 1]", name, v)
		}
		return nil
	}
	if err := share("confidence", r.Confidence); err != nil {
		return err
	}
	if err := share("unfilled share", r.UnfilledShare); err != nil {
		return err
	}
	if err := share("label share", r.LabelShare); err != nil {
		return err
	}
	if err := share("mark recall", r.MarkRecall); err != nil {
		return err
	}
	if err := share("mark precision", r.MarkPrecision); err != nil {
		return err
	}
	if err := share("mark changed share", r.MarkChangedShare); err != nil {
		return err
	}
	if err := share("mark marked share", r.MarkMarkedShare); err != nil {
		return err
	}
	if !math.IsNaN(r.SynthMs) && !(r.SynthMs >= 0 && !math.IsInf(r.SynthMs, 0)) {
		return bad("synth time %g ms, want a finite value >= 0", r.SynthMs)
	}
	for m := MethodHold; m <= MethodPredicted; m++ { // no allocation per tick
		if _, err := checkScores(r.MethodScores(m)); err != nil {
			return bad("%s: %v", m, err)
		}
	}
	if _, err := checkScores(r.Warp); err != nil {
		return bad("warp: %v", err)
	}
	for _, v := range [...]float64{r.SigmaPx, r.MisalignPx, r.MisalignMrad, r.TruthMisalignMrad} {
		if !math.IsNaN(v) && !(v >= 0 && !math.IsInf(v, 0)) {
			return bad("sigma or misalignment %g, want a finite value >= 0", v)
		}
	}
	return nil
}
