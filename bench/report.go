package bench

import (
	"bytes"
	"encoding/csv"
	"encoding/json"
	"errors"
	"fmt"
	"html/template"
	"image/color"
	"io"
	"math"
	"os"
	"path/filepath"
	"slices"
	"strconv"
	"strings"

	"gocv.io/x/gocv"
	"gonum.org/v1/gonum/stat"
	"gonum.org/v1/plot"
	"gonum.org/v1/plot/plotter"
	"gonum.org/v1/plot/vg"
	"gonum.org/v1/plot/vg/draw"
)

// Method is a way of filling a display tick whose real frame is missing.
// The zero value is MethodInvalid.
type Method int

const (
	// MethodInvalid is the zero value; it is never valid.
	MethodInvalid Method = iota
	// MethodHold repeats the last real frame unchanged.
	MethodHold
	// MethodRotation warps the last real frame with the camera rotation
	// only (far-scene homography K R K^-1).
	MethodRotation
	// MethodPredicted is the tool's predicted frame: ground-plane
	// homography below the horizon, rotation above.
	MethodPredicted
)

// numMethods is the number of valid Method values.
const numMethods = 3

var methodNames = [...]string{"invalid", "hold", "rotation", "predicted"}

// String returns "hold", "rotation", "predicted", or "invalid".
func (m Method) String() string {
	if m < 0 || int(m) >= len(methodNames) {
		return "invalid"
	}
	return methodNames[m]
}

// Methods returns the valid methods in report order (a new slice).
func Methods() []Method { return []Method{MethodHold, MethodRotation, MethodPredicted} }

// Display states of a tick as written in TickRow.State. They are the
// String() values of the predictor's LIVE/PREDICTED/STALE state.
const (
	TickLive      = "LIVE"
	TickPredicted = "PREDICTED"
	TickStale     = "STALE"
)

// AgeBucket is a half-open range [MinMs, MaxMs) of gap age (time since the
// capture of the newest real frame shown or warped), in milliseconds.
type AgeBucket struct {
	Label string  // e.g. "100-200"
	MinMs float64 // inclusive
	MaxMs float64 // exclusive; +Inf for the last bucket
}

// AgeBuckets returns the report's gap-age buckets (a new slice):
// [0,100), [100,200), [200,400) and [400,+Inf) ms.
func AgeBuckets() []AgeBucket {
	return []AgeBucket{
		{"0-100", 0, 100}, {"100-200", 100, 200}, {"200-400", 200, 400}, {"400+", 400, math.Inf(1)},
	}
}

// numBuckets is len(AgeBuckets()).
const numBuckets = 4

// BucketIndex returns the index in AgeBuckets of the bucket holding ageMs,
// or -1 for a negative or NaN age.
func BucketIndex(ageMs float64) int {
	switch {
	case !(ageMs >= 0):
		return -1
	case ageMs < 100:
		return 0
	case ageMs < 200:
		return 1
	case ageMs < 400:
		return 2
	}
	return 3
}

// Float is a float64 that is written to JSON as null when it is NaN or
// infinite (JSON has no such numbers); null means "no data" and is read
// back as NaN.
type Float float64

// MarshalJSON implements json.Marshaler.
func (f Float) MarshalJSON() ([]byte, error) {
	v := float64(f)
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return []byte("null"), nil
	}
	return strconv.AppendFloat(nil, v, 'g', -1, 64), nil
}

// UnmarshalJSON implements json.Unmarshaler.
func (f *Float) UnmarshalJSON(b []byte) error {
	if string(b) == "null" {
		*f = Float(math.NaN())
		return nil
	}
	var v float64
	if err := json.Unmarshal(b, &v); err != nil {
		return err
	}
	*f = Float(v)
	return nil
}

// Summary is the content of summary.json. Counts cover all ticks; the
// method statistics cover only ticks on which that method was scored.
// Means and quantiles of empty sets are NaN (null in JSON). PSNR values
// are capped at PSNRCapDB before averaging (identical frames have
// infinite PSNR). Quantiles use gonum's stat.Quantile with
// stat.Empirical: the smallest sample whose empirical CDF is >= p, no
// interpolation.
type Summary struct {
	// Drive names the replayed recording (directory or label).
	Drive string `json:"drive"`
	// Cutoff is the confidence cutoff of the PREDICTED/STALE decision.
	Cutoff float64 `json:"cutoff"`
	// MaxAgeMs is the policy's maximum gap age for PREDICTED frames.
	MaxAgeMs float64 `json:"max_age_ms"`
	// Loss is the simulated link; its zero value (model "invalid") when
	// the arrivals came from a recorded file instead (see ArrivalsFile).
	Loss LossConfig `json:"loss"`
	// ArrivalsFile is the recorded arrivals file used instead of a
	// simulated link, or "".
	ArrivalsFile string `json:"arrivals_file"`
	// AllowanceMs is the display clock's jitter allowance: how long after
	// its nominal arrival a frame may still be shown as LIVE.
	AllowanceMs float64 `json:"allowance_ms"`
	// LatencyMs is the display latency behind capture used by the replay
	// schedule.
	LatencyMs float64 `json:"latency_ms"`
	// FilterModel names the motion model of the filter (e.g. "ctrv").
	FilterModel string `json:"filter_model"`
	// TelemetryRejected counts telemetry samples the filter rejected.
	TelemetryRejected int `json:"telemetry_rejected"`
	// Commands says whether the operator's commands drove the motion model
	// and with which actuator model.
	Commands CommandsUse `json:"commands"`

	TicksTotal     int `json:"ticks_total"`     // display ticks replayed
	TicksMissing   int `json:"ticks_missing"`   // ticks without a real frame (PREDICTED + STALE)
	PredictedTicks int `json:"predicted_ticks"` // ticks shown as PREDICTED
	StaleTicks     int `json:"stale_ticks"`     // ticks shown as STALE
	LiveTicks      int `json:"live_ticks"`      // ticks shown as LIVE

	SynthMsP50  Float `json:"synth_ms_p50"`  // median time to synthesise a frame, ms
	SynthMsP99  Float `json:"synth_ms_p99"`  // 99th percentile of the same, ms
	SynthMsMean Float `json:"synth_ms_mean"` // mean of the same, ms

	// LabelPixelShareMean is the mean share of pixels covered by the
	// synthetic/stale label over ticks that report it.
	LabelPixelShareMean Float `json:"label_pixel_share_mean"`
	// UnfilledShareMean is the mean share of neutral-fill pixels (no
	// source pixel) over ticks that report it.
	UnfilledShareMean Float `json:"unfilled_share_mean"`
	// PSNRCapDB is the cap applied to PSNR before averaging.
	PSNRCapDB float64 `json:"psnr_cap_db"`

	// Methods holds the per-method statistics.
	Methods MethodSet `json:"methods"`

	// TicksUnscored counts missing ticks that could not be scored (no
	// true frame, or before the first real frame); UnscoredNote says so in
	// one line with how to get them scored ("" when every one was).
	TicksUnscored int    `json:"ticks_unscored"`
	UnscoredNote  string `json:"unscored_note,omitempty"`
	// Pairing describes the pairing of a live session with the onboard
	// recording and the comparison with the relay's recorded decisions;
	// nil when neither applies.
	Pairing *PairingReport `json:"pairing,omitempty"`
	// PredictedOnly scores PREDICTED ticks alone, with the harm rates.
	PredictedOnly PredictedOnly `json:"predicted_only"`
	// Telemetry is how telemetry reached the filter when telemetry.csv
	// had no arrival times.
	Telemetry TelemetryLink `json:"telemetry"`
	// Calibration compares the confidence with the misalignment measured
	// from the images; CalibrationTruth with the exact one from truth.csv
	// (Frames 0 without truth).
	Calibration      Calibration `json:"calibration"`
	CalibrationTruth Calibration `json:"calibration_truth"`
}

// MethodSet holds one MethodStats per Method under fixed JSON keys.
type MethodSet struct {
	Hold      MethodStats `json:"hold"`
	Rotation  MethodStats `json:"rotation"`
	Predicted MethodStats `json:"predicted"`
	// Shown repeats Predicted under its clear name: what the operator saw
	// on missing ticks (the predicted frame when PREDICTED, the held frame
	// when STALE). "predicted" is kept for existing readers.
	Shown MethodStats `json:"shown"`
}

// Get returns a pointer to the statistics of m, or nil for an invalid m.
func (s *MethodSet) Get(m Method) *MethodStats {
	switch m {
	case MethodHold:
		return &s.Hold
	case MethodRotation:
		return &s.Rotation
	case MethodPredicted:
		return &s.Predicted
	}
	return nil
}

// MethodStats are the scores of one method against the true frames.
type MethodStats struct {
	Frames     int           `json:"frames"`       // scored ticks
	PSNRdBMean Float         `json:"psnr_db_mean"` // capped at PSNRCapDB per frame
	SSIMMean   Float         `json:"ssim_mean"`
	MAEMean    Float         `json:"mae_mean"` // 8-bit luma levels
	Buckets    []BucketStats `json:"buckets"`  // one per AgeBuckets entry, in order
}

// BucketStats are MethodStats restricted to one gap-age bucket.
type BucketStats struct {
	Bucket     string  `json:"bucket"` // AgeBucket.Label
	MinMs      float64 `json:"min_ms"`
	MaxMs      Float   `json:"max_ms"` // null for the open last bucket
	Frames     int     `json:"frames"`
	AgeMsMean  Float   `json:"age_ms_mean"`
	PSNRdBMean Float   `json:"psnr_db_mean"`
	SSIMMean   Float   `json:"ssim_mean"`
	MAEMean    Float   `json:"mae_mean"`
}

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
		Warp: u, SigmaPx: nan, MisalignPx: nan, MisalignMrad: nan, TruthMisalignMrad: nan}
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
	switch r.State {
	case TickLive, TickPredicted, TickStale:
	default:
		return bad("state %q, want %s, %s or %s", r.State, TickLive, TickPredicted, TickStale)
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

// meanAcc is a running sum for a mean.
type meanAcc struct {
	n   int
	sum float64
}

func (a *meanAcc) add(v float64) {
	if !math.IsNaN(v) {
		a.n++
		a.sum += v
	}
}

func (a meanAcc) mean() Float {
	if a.n == 0 {
		return Float(math.NaN())
	}
	return Float(a.sum / float64(a.n))
}

// scoreAcc accumulates the scores of one method in one bucket or overall.
type scoreAcc struct {
	age, psnr, ssim, mae meanAcc
}

func (a *scoreAcc) add(ageMs float64, s Scores) {
	a.age.add(ageMs)
	a.psnr.add(CapPSNR(s.PSNRdB))
	a.ssim.add(s.SSIM)
	a.mae.add(s.MAE)
}

// Accumulator builds a Summary from TickRows. The zero value is ready to
// use; it is not safe for concurrent use. It keeps every synthesis time
// (8 bytes per tick) for the quantiles and running sums for the rest.
type Accumulator struct {
	total, live, predicted, stale int
	synth                         []float64
	synthMean, label, unfilled    meanAcc
	all                           [numMethods]scoreAcc
	buckets                       [numMethods][numBuckets]scoreAcc

	// PREDICTED-only scores and harm counts.
	po, poHold           scoreAcc
	harmPSNR, harmSSIM   int
	calConf, calMrad     []float64 // per tick with a confidence and a measured misalignment
	truthConf, truthMrad []float64 // per tick with a confidence and a truth misalignment
}

// Add validates r (see TickRow.Validate) and adds it. A rejected row is
// not counted at all.
func (a *Accumulator) Add(r TickRow) error {
	if err := r.Validate(); err != nil {
		return err
	}
	a.total++
	switch r.State {
	case TickLive:
		a.live++
	case TickPredicted:
		a.predicted++
	case TickStale:
		a.stale++
	}
	if !math.IsNaN(r.SynthMs) {
		a.synth = append(a.synth, r.SynthMs)
		a.synthMean.add(r.SynthMs)
	}
	a.label.add(r.LabelShare)
	a.unfilled.add(r.UnfilledShare)
	b := BucketIndex(r.AgeMs)
	for m := MethodHold; m <= MethodPredicted; m++ { // no allocation per tick
		i := int(m - MethodHold)
		s := r.MethodScores(m)
		if ok, _ := checkScores(s); !ok {
			continue
		}
		a.all[i].add(r.AgeMs, s)
		a.buckets[i][b].add(r.AgeMs, s)
	}
	if r.State == TickPredicted {
		if ok, _ := checkScores(r.Predicted); ok {
			if hok, _ := checkScores(r.Hold); hok {
				a.po.add(r.AgeMs, r.Predicted)
				a.poHold.add(r.AgeMs, r.Hold)
				p, q := Harmful(r.Predicted, r.Hold)
				if p {
					a.harmPSNR++
				}
				if q {
					a.harmSSIM++
				}
			}
		}
	}
	if r.State != TickLive && !math.IsNaN(r.Confidence) {
		if !math.IsNaN(r.MisalignMrad) {
			a.calConf = append(a.calConf, r.Confidence)
			a.calMrad = append(a.calMrad, r.MisalignMrad)
		}
		if !math.IsNaN(r.TruthMisalignMrad) {
			a.truthConf = append(a.truthConf, r.Confidence)
			a.truthMrad = append(a.truthMrad, r.TruthMisalignMrad)
		}
	}
	return nil
}

// CalibrationAt returns the calibration of the confidences of the rows
// added so far against the criterion "misalignment <= toleranceMrad",
// measured from the images, and from truth.csv.
func (a *Accumulator) CalibrationAt(toleranceMrad float64) (images, truth Calibration) {
	cal := func(conf, mrad []float64, src string) Calibration {
		good := make([]bool, len(mrad))
		for i, m := range mrad {
			good[i] = m <= toleranceMrad
		}
		c := Calibrate(conf, good, 0)
		c.Source, c.ToleranceMrad = src, toleranceMrad
		return c
	}
	return cal(a.calConf, a.calMrad, "images"), cal(a.truthConf, a.truthMrad, "truth")
}

// Summary returns the statistics of the rows added so far. The caller
// fills Drive, Cutoff, MaxAgeMs and Loss.
func (a *Accumulator) Summary() Summary {
	s := Summary{
		TicksTotal: a.total, TicksMissing: a.total - a.live,
		LiveTicks: a.live, PredictedTicks: a.predicted, StaleTicks: a.stale,
		SynthMsMean:         a.synthMean.mean(),
		SynthMsP50:          Float(math.NaN()),
		SynthMsP99:          Float(math.NaN()),
		LabelPixelShareMean: a.label.mean(),
		UnfilledShareMean:   a.unfilled.mean(),
		PSNRCapDB:           PSNRCapDB,
	}
	if len(a.synth) > 0 {
		sorted := slices.Clone(a.synth)
		slices.Sort(sorted)
		s.SynthMsP50 = Float(stat.Quantile(0.50, stat.Empirical, sorted, nil))
		s.SynthMsP99 = Float(stat.Quantile(0.99, stat.Empirical, sorted, nil))
	}
	for i, m := range Methods() {
		ms := s.Methods.Get(m)
		ms.Frames = a.all[i].psnr.n
		ms.PSNRdBMean, ms.SSIMMean, ms.MAEMean = a.all[i].psnr.mean(), a.all[i].ssim.mean(), a.all[i].mae.mean()
		for j, bk := range AgeBuckets() {
			acc := a.buckets[i][j]
			ms.Buckets = append(ms.Buckets, BucketStats{
				Bucket: bk.Label, MinMs: bk.MinMs, MaxMs: Float(bk.MaxMs), Frames: acc.psnr.n,
				AgeMsMean: acc.age.mean(), PSNRdBMean: acc.psnr.mean(), SSIMMean: acc.ssim.mean(), MAEMean: acc.mae.mean(),
			})
		}
	}
	s.Methods.Shown = s.Methods.Predicted
	s.Methods.Shown.Buckets = slices.Clone(s.Methods.Predicted.Buckets)
	po := PredictedOnly{Frames: a.po.psnr.n, PSNRdBMean: a.po.psnr.mean(), SSIMMean: a.po.ssim.mean(), MAEMean: a.po.mae.mean(),
		HoldPSNRdBMean: a.poHold.psnr.mean(), HoldSSIMMean: a.poHold.ssim.mean(), HarmPSNR: a.harmPSNR, HarmSSIM: a.harmSSIM,
		HarmRatePSNR: Float(math.NaN()), HarmRateSSIM: Float(math.NaN())}
	if po.Frames > 0 {
		po.HarmRatePSNR = Float(float64(a.harmPSNR) / float64(po.Frames))
		po.HarmRateSSIM = Float(float64(a.harmSSIM) / float64(po.Frames))
	}
	s.PredictedOnly = po
	return s
}

// Summarize adds all rows to a fresh Accumulator and returns its Summary.
// It stops at the first invalid row.
func Summarize(ticks []TickRow) (Summary, error) {
	var a Accumulator
	for i := range ticks {
		if err := a.Add(ticks[i]); err != nil {
			return Summary{}, fmt.Errorf("row %d: %w", i, err)
		}
	}
	return a.Summary(), nil
}

// Example is one tick shown side by side in report.html. The Mats are
// 8-bit BGR (or gray) frames owned by the caller; WriteReport only reads
// them. Rotation may be an empty Mat (gocv.NewMat()) or the zero Mat to
// leave it out.
type Example struct {
	Tick       int     // tick index, used to look up the scores in ticks
	AgeMs      float64 // gap age at the tick, ms
	State      string  // state shown to the operator
	Confidence float64 // predictor confidence, NaN if none
	// True is the recorded frame of the tick (never shown live during a gap).
	True gocv.Mat
	// Hold is the last real frame.
	Hold gocv.Mat
	// Rotation is the rotation-only warp (optional).
	Rotation gocv.Mat
	// Predicted is the frame as displayed, with its label.
	Predicted gocv.Mat
}

// Report file names inside the destination directory.
const (
	SummaryFile   = "summary.json"
	TicksFile     = "ticks.csv"
	PSNRPlotFile  = "psnr_vs_age.png"
	SSIMPlotFile  = "ssim_vs_age.png"
	HTMLFile      = "report.html"
	ExamplesDir   = "examples"
	reportTmpMark = ".partial-"
)

// TicksCSVHeader returns the column names of ticks.csv (a new slice).
// Metric columns are <method>_psnr_db, <method>_ssim, <method>_mae for
// hold, rotation and predicted. Empty cells are NaN (not measured); an
// infinite PSNR (identical frames) is written as "inf".
func TicksCSVHeader() []string {
	h := []string{"tick", "target_us", "state", "age_ms", "confidence"}
	for _, m := range Methods() {
		h = append(h, m.String()+"_psnr_db", m.String()+"_ssim", m.String()+"_mae")
	}
	return append(h, "synth_ms", "unfilled_share", "label_share",
		"warp_psnr_db", "warp_ssim", "warp_mae", "sigma_px", "misalign_px", "misalign_mrad", "truth_misalign_mrad")
}

// SafetyCaution is the warning printed at the top of report.html.
const SafetyCaution = "A predicted frame is the last real camera picture, moved to where the " +
	"camera is estimated to be now. It moves the static scene only. Anything that moved during the " +
	"gap, such as a pedestrian stepping out or a vehicle braking ahead, is shown where it was when the " +
	"last real picture was taken, or not at all. Good scores in this report mean the static scene was " +
	"placed well; they say nothing about moving road users. This tool does not replace the operator's " +
	"licensed procedures or local regulations: while the picture is marked PREDICTED or STALE, follow " +
	"those procedures, not the picture."

// ReportWriter writes a replay report directory. The zero value refuses
// to replace an existing non-empty destination.
type ReportWriter struct {
	// Overwrite allows replacing an existing non-empty destination
	// directory. The old directory is removed only after the new one is
	// complete and in place.
	Overwrite bool
	// Title is the page title; empty means "stopgap replay report".
	Title string
	// JPEGQuality is the quality of the example images, 1..100; 0 means 90.
	JPEGQuality int
}

// WriteReport writes a report into dir with the zero ReportWriter (no
// overwrite of a non-empty directory). See ReportWriter.Write.
func WriteReport(dir string, s Summary, ticks []TickRow, examples []Example) error {
	return ReportWriter{}.Write(dir, s, ticks, examples)
}

// Write creates dir holding summary.json, ticks.csv, psnr_vs_age.png,
// ssim_vs_age.png, report.html and examples/tick-NNNNNN-{true,hold,
// rotation,predicted}.jpg.
//
// Everything is first written into a new hidden directory next to dir
// (".<name>.partial-*") that is renamed to dir only when every file is
// complete, so a failed or interrupted run never leaves a directory named
// dir that looks complete; on error the partial directory is removed (a
// crash can leave one behind; it is safe to delete). The parent of dir
// must exist. If dir exists and is not empty, Write fails with
// ErrDestExists unless Overwrite is set; an existing empty directory is
// replaced.
func (w ReportWriter) Write(dir string, s Summary, ticks []TickRow, examples []Example) error {
	return writeDirAtomic(dir, w.Overwrite, "report", func(tmp string) error {
		return w.writeAll(tmp, s, ticks, examples)
	})
}

// writeDirAtomic creates dir by calling fill on a new hidden directory next
// to it (".<name>.partial-*") and renaming that to dir only when fill
// succeeded, so a failed or interrupted run never leaves a directory named
// dir that looks complete; on error the partial directory is removed. The
// parent of dir must exist. An existing non-empty dir is refused with
// ErrDestExists unless overwrite; a replaced dir is swapped out and removed
// only after the new one is in place. what names the output in errors
// ("report", "tune report").
func writeDirAtomic(dir string, overwrite bool, what string, fill func(tmp string) error) (err error) {
	dir = filepath.Clean(dir)
	parent, base := filepath.Dir(dir), filepath.Base(dir)
	if base == "." || base == string(filepath.Separator) {
		return fmt.Errorf("bench: %s destination %q must name a new directory", what, dir)
	}
	if st, serr := os.Stat(parent); serr != nil {
		return fmt.Errorf("bench: %s destination parent %q: %w; create it first", what, parent, serr)
	} else if !st.IsDir() {
		return fmt.Errorf("bench: %s destination parent %q is not a directory", what, parent)
	}
	exists, err := checkDest(dir, overwrite)
	if err != nil {
		return err
	}
	tmp, err := os.MkdirTemp(parent, "."+base+reportTmpMark)
	if err != nil {
		return fmt.Errorf("bench: creating %s directory next to %q: %w", what, dir, err)
	}
	defer func() {
		if err != nil {
			os.RemoveAll(tmp)
		}
	}()
	if err := os.Chmod(tmp, 0o755); err != nil {
		return fmt.Errorf("bench: %s directory: %w", what, err)
	}
	if err := fill(tmp); err != nil {
		return err
	}
	if !exists {
		if err := os.Rename(tmp, dir); err != nil {
			return fmt.Errorf("bench: moving finished %s into place at %q: %w", what, dir, err)
		}
		return nil
	}
	// Swap: old -> backup name, new -> dir, then delete the backup.
	old, err := os.MkdirTemp(parent, "."+base+".old-")
	if err != nil {
		return fmt.Errorf("bench: replacing %q: %w", dir, err)
	}
	if err := os.Remove(old); err != nil { // only the unique name is wanted
		return fmt.Errorf("bench: replacing %q: %w", dir, err)
	}
	if err := os.Rename(dir, old); err != nil {
		return fmt.Errorf("bench: moving old %s %q aside: %w", what, dir, err)
	}
	if err := os.Rename(tmp, dir); err != nil {
		if rerr := os.Rename(old, dir); rerr != nil {
			return fmt.Errorf("bench: moving finished %s into place at %q: %w (old one left at %q: %v)", what, dir, err, old, rerr)
		}
		return fmt.Errorf("bench: moving finished %s into place at %q: %w", what, dir, err)
	}
	if err := os.RemoveAll(old); err != nil {
		return fmt.Errorf("bench: %s written to %q but the old one at %q could not be removed: %w", what, dir, old, err)
	}
	return nil
}

// checkDest reports whether dir exists (as a directory) and whether it
// may be replaced.
func checkDest(dir string, overwrite bool) (bool, error) {
	st, err := os.Stat(dir)
	if errors.Is(err, os.ErrNotExist) {
		return false, nil
	}
	if err != nil {
		return false, fmt.Errorf("bench: report destination %q: %w", dir, err)
	}
	if !st.IsDir() {
		return false, fmt.Errorf("%w: %q is a file; choose another destination", ErrDestExists, dir)
	}
	f, err := os.Open(dir)
	if err != nil {
		return false, fmt.Errorf("bench: report destination %q: %w", dir, err)
	}
	names, err := f.Readdirnames(1)
	f.Close()
	if err != nil && !errors.Is(err, io.EOF) {
		return false, fmt.Errorf("bench: report destination %q: %w", dir, err)
	}
	if len(names) > 0 && !overwrite {
		return false, fmt.Errorf("%w: %q; choose a new directory or ask to overwrite", ErrDestExists, dir)
	}
	return true, nil
}

func (w ReportWriter) writeAll(dir string, s Summary, ticks []TickRow, examples []Example) error {
	if err := writeSummary(filepath.Join(dir, SummaryFile), s); err != nil {
		return err
	}
	if err := writeTicksCSV(filepath.Join(dir, TicksFile), ticks); err != nil {
		return err
	}
	if err := writeAgePlot(filepath.Join(dir, PSNRPlotFile), ticks, s, "PSNR vs gap age",
		fmt.Sprintf("PSNR (dB, capped at %g)", s.cap()), func(sc Scores) float64 { return math.Min(sc.PSNRdB, s.cap()) },
		func(b BucketStats) Float { return b.PSNRdBMean }); err != nil {
		return err
	}
	if err := writeAgePlot(filepath.Join(dir, SSIMPlotFile), ticks, s, "SSIM vs gap age", "SSIM (mean over valid windows)",
		func(sc Scores) float64 { return sc.SSIM }, func(b BucketStats) Float { return b.SSIMMean }); err != nil {
		return err
	}
	if err := writeReliabilityPlot(filepath.Join(dir, ReliabilityPlotFile), s.Calibration, s.CalibrationTruth); err != nil {
		return err
	}
	if err := writeConfidenceScatter(filepath.Join(dir, ConfidencePlotFile), ticks, s.Calibration.ToleranceMrad); err != nil {
		return err
	}
	figs, err := w.writeExamples(dir, ticks, examples)
	if err != nil {
		return err
	}
	return w.writeHTML(filepath.Join(dir, HTMLFile), s, figs)
}

// cap returns the PSNR cap in effect for s.
func (s Summary) cap() float64 {
	if s.PSNRCapDB > 0 {
		return s.PSNRCapDB
	}
	return PSNRCapDB
}

// writeFile writes data through a closure and reports close errors.
func writeFile(path string, fill func(io.Writer) error) error {
	f, err := os.Create(path)
	if err != nil {
		return fmt.Errorf("bench: %w", err)
	}
	if err := fill(f); err != nil {
		f.Close()
		return fmt.Errorf("bench: writing %s: %w", filepath.Base(path), err)
	}
	if err := f.Close(); err != nil {
		return fmt.Errorf("bench: writing %s: %w", filepath.Base(path), err)
	}
	return nil
}

func writeSummary(path string, s Summary) error {
	return writeFile(path, func(w io.Writer) error {
		enc := json.NewEncoder(w)
		enc.SetIndent("", "  ")
		return enc.Encode(s)
	})
}

// csvFloat formats v for ticks.csv: shortest exact form, "" for NaN,
// "inf"/"-inf" for infinities.
func csvFloat(v float64) string {
	switch {
	case math.IsNaN(v):
		return ""
	case math.IsInf(v, 1):
		return "inf"
	case math.IsInf(v, -1):
		return "-inf"
	}
	return strconv.FormatFloat(v, 'g', -1, 64)
}

func writeTicksCSV(path string, ticks []TickRow) error {
	return writeFile(path, func(w io.Writer) error { return writeTicks(w, ticks) })
}

// writeTicks writes ticks as ticks.csv to w (see TicksCSVHeader).
func writeTicks(w io.Writer, ticks []TickRow) error {
	cw := csv.NewWriter(w)
	if err := cw.Write(TicksCSVHeader()); err != nil {
		return err
	}
	rec := make([]string, 0, len(TicksCSVHeader()))
	for i := range ticks {
		r := &ticks[i]
		rec = append(rec[:0], strconv.Itoa(r.Tick), strconv.FormatInt(r.TargetUs, 10), r.State,
			csvFloat(r.AgeMs), csvFloat(r.Confidence))
		for _, m := range Methods() {
			sc := r.MethodScores(m)
			rec = append(rec, csvFloat(sc.PSNRdB), csvFloat(sc.SSIM), csvFloat(sc.MAE))
		}
		rec = append(rec, csvFloat(r.SynthMs), csvFloat(r.UnfilledShare), csvFloat(r.LabelShare),
			csvFloat(r.Warp.PSNRdB), csvFloat(r.Warp.SSIM), csvFloat(r.Warp.MAE),
			csvFloat(r.SigmaPx), csvFloat(r.MisalignPx), csvFloat(r.MisalignMrad), csvFloat(r.TruthMisalignMrad))
		if err := cw.Write(rec); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}

// methodColor gives each method a fixed plot colour.
func methodColor(m Method) color.Color {
	switch m {
	case MethodHold:
		return color.RGBA{R: 120, G: 120, B: 120, A: 255}
	case MethodRotation:
		return color.RGBA{R: 40, G: 100, B: 200, A: 255}
	default:
		return color.RGBA{R: 220, G: 110, B: 0, A: 255}
	}
}

// writeAgePlot draws one metric against gap age: every scored tick as a
// small dot and, per method, a line through the bucket means (placed at
// the bucket's mean age). The legend carries the frame count per bucket.
func writeAgePlot(path string, ticks []TickRow, s Summary, title, ylabel string,
	value func(Scores) float64, bucketMean func(BucketStats) Float) error {
	p := plot.New()
	p.Title.Text = title + " (dots: ticks; line: bucket means)"
	p.X.Label.Text = "gap age (ms)"
	p.Y.Label.Text = ylabel
	p.Legend.Top, p.Legend.Left = false, true // metrics fall with age: bottom left is usually empty
	p.Add(plotter.NewGrid())
	points := 0
	for _, m := range Methods() {
		var xy plotter.XYs
		for i := range ticks {
			sc := ticks[i].MethodScores(m)
			v := value(sc)
			if math.IsNaN(v) || math.IsInf(v, 0) || math.IsNaN(ticks[i].AgeMs) {
				continue
			}
			xy = append(xy, plotter.XY{X: ticks[i].AgeMs, Y: v})
		}
		points += len(xy)
		col := methodColor(m)
		if len(xy) > 0 {
			sc, err := plotter.NewScatter(xy)
			if err != nil {
				return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
			}
			r, g, b, _ := col.RGBA()
			faint := color.NRGBA{R: uint8(r >> 8), G: uint8(g >> 8), B: uint8(b >> 8), A: 110} // not premultiplied
			sc.GlyphStyle = draw.GlyphStyle{Color: faint, Radius: vg.Points(2), Shape: draw.CircleGlyph{}}
			p.Add(sc)
		}
		ms := s.Methods.Get(m)
		var means plotter.XYs
		counts := make([]string, 0, numBuckets)
		for _, b := range ms.Buckets {
			counts = append(counts, strconv.Itoa(b.Frames))
			mv, age := float64(bucketMean(b)), float64(b.AgeMsMean)
			if b.Frames > 0 && !math.IsNaN(mv) && !math.IsNaN(age) {
				means = append(means, plotter.XY{X: age, Y: mv})
			}
		}
		label := fmt.Sprintf("%s (n per bucket %s)", m, strings.Join(counts, "/"))
		if len(means) > 0 {
			line, pts, err := plotter.NewLinePoints(means)
			if err != nil {
				return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
			}
			line.Color, line.Width = col, vg.Points(2)
			pts.GlyphStyle = draw.GlyphStyle{Color: col, Radius: vg.Points(3.5), Shape: draw.CircleGlyph{}}
			p.Add(line, pts)
			p.Legend.Add(label, line, pts)
		} else {
			line, err := plotter.NewLine(plotter.XYs{})
			if err != nil {
				return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
			}
			line.Color = col
			p.Legend.Add(label, line)
		}
	}
	p.X.Min = 0
	if points == 0 {
		p.X.Max, p.Y.Min, p.Y.Max = 500, 0, 1
		p.Title.Text = title + " (no scored ticks)"
	}
	if err := p.Save(8*vg.Inch, 5*vg.Inch, path); err != nil {
		return fmt.Errorf("bench: plot %s: %w", filepath.Base(path), err)
	}
	return nil
}

// exampleFig is one image of an example block in the HTML page.
type exampleFig struct {
	File, Caption string
}

// exampleBlock is one example tick in the HTML page.
type exampleBlock struct {
	Heading string
	Figs    []exampleFig
}

func (w ReportWriter) writeExamples(dir string, ticks []TickRow, examples []Example) ([]exampleBlock, error) {
	if len(examples) == 0 {
		return nil, nil
	}
	if err := os.Mkdir(filepath.Join(dir, ExamplesDir), 0o755); err != nil {
		return nil, fmt.Errorf("bench: %w", err)
	}
	q := w.JPEGQuality
	if q <= 0 || q > 100 {
		q = 90
	}
	byTick := make(map[int]*TickRow, len(ticks))
	for i := range ticks {
		byTick[ticks[i].Tick] = &ticks[i]
	}
	var blocks []exampleBlock
	for _, ex := range examples {
		conf := "n/a"
		if !math.IsNaN(ex.Confidence) {
			conf = fmt.Sprintf("%.2f", ex.Confidence)
		}
		blk := exampleBlock{Heading: fmt.Sprintf("Tick %d: gap age %.0f ms, shown as %s, confidence %s",
			ex.Tick, ex.AgeMs, ex.State, conf)}
		row := byTick[ex.Tick]
		for _, part := range []struct {
			name    string
			m       gocv.Mat
			method  Method
			caption string
			must    bool
		}{
			{"true", ex.True, MethodInvalid, "TRUE: recorded frame for this tick (not available live during the gap)", true},
			{"hold", ex.Hold, MethodHold, "HOLD: last real frame repeated", true},
			{"rotation", ex.Rotation, MethodRotation, "ROTATION ONLY: last real frame turned with the camera", false},
			{"predicted", ex.Predicted, MethodPredicted, "PREDICTED: synthetic frame as displayed, with its label", true},
		} {
			if part.m.Ptr() == nil || part.m.Empty() {
				if part.must {
					return nil, fmt.Errorf("bench: example for tick %d has no %s image", ex.Tick, part.name)
				}
				continue
			}
			name := fmt.Sprintf("tick-%06d-%s.jpg", ex.Tick, part.name)
			buf, err := gocv.IMEncodeWithParams(gocv.JPEGFileExt, part.m, []int{gocv.IMWriteJpegQuality, q})
			if err != nil {
				return nil, fmt.Errorf("bench: encoding example %s: %w", name, err)
			}
			data := bytes.Clone(buf.GetBytes())
			buf.Close()
			if err := os.WriteFile(filepath.Join(dir, ExamplesDir, name), data, 0o644); err != nil {
				return nil, fmt.Errorf("bench: %w", err)
			}
			caption := part.caption
			if row != nil && part.method != MethodInvalid {
				if sc := row.MethodScores(part.method); !math.IsNaN(sc.SSIM) {
					caption += fmt.Sprintf(" (PSNR %.1f dB, SSIM %.3f)", CapPSNR(sc.PSNRdB), sc.SSIM)
				}
			}
			blk.Figs = append(blk.Figs, exampleFig{File: ExamplesDir + "/" + name, Caption: caption})
		}
		blocks = append(blocks, blk)
	}
	return blocks, nil
}

// fmtFloat formats a summary value for the HTML table.
func fmtFloat(v Float, digits int) string {
	f := float64(v)
	if math.IsNaN(f) || math.IsInf(f, 0) {
		return "n/a"
	}
	return strconv.FormatFloat(f, 'f', digits, 64)
}

// newReportTemplate parses the page template (per call, so that the
// package keeps no mutable state).
func newReportTemplate() (*template.Template, error) {
	return template.New("report").Funcs(template.FuncMap{
		"f": fmtFloat,
		"pct": func(v Float) string {
			if math.IsNaN(float64(v)) {
				return "n/a"
			}
			return strconv.FormatFloat(100*float64(v), 'f', 1, 64) + " %"
		},
	}).Parse(`<!DOCTYPE html>
<html lang="en">
<head>
<meta charset="utf-8">
<title>{{.Title}}</title>
<style>
body { font-family: sans-serif; margin: 1.5em auto; max-width: 1200px; color: #222; }
.caution { border: 4px solid #b00; background: #fff1f0; padding: 0.8em 1.2em; margin-bottom: 1.5em; }
.caution h2 { color: #b00; margin: 0 0 0.4em 0; }
table { border-collapse: collapse; margin: 0.5em 0 1.5em 0; }
th, td { border: 1px solid #aaa; padding: 0.25em 0.6em; text-align: right; }
th { background: #eee; }
td.l, th.l { text-align: left; }
.ex { display: flex; flex-wrap: wrap; gap: 0.8em; margin-bottom: 1.5em; }
.ex figure { margin: 0; flex: 1 1 260px; max-width: 380px; }
.ex img { width: 100%; border: 1px solid #888; }
figcaption { font-size: 0.9em; }
</style>
</head>
<body>
<h1>{{.Title}}</h1>
<div class="caution" id="safety-caution">
<h2>SAFETY CAUTION</h2>
<p>{{.Caution}}</p>
</div>

<h2>Run</h2>
<table>
<tr><th class="l">drive</th><td class="l">{{.S.Drive}}</td></tr>
<tr><th class="l">confidence cutoff</th><td>{{printf "%.3g" .S.Cutoff}}</td></tr>
<tr><th class="l">max gap age for PREDICTED</th><td>{{printf "%.0f" .S.MaxAgeMs}} ms</td></tr>
{{if .S.ArrivalsFile}}<tr><th class="l">frame arrivals</th><td class="l">recorded, from {{.S.ArrivalsFile}}</td></tr>
{{else}}<tr><th class="l">simulated link</th><td class="l">{{.S.Loss.Model}}, loss rate {{printf "%.3g" .S.Loss.LossRate}}, mean burst {{printf "%.0f" .S.Loss.BurstMs}} ms, extra delay {{printf "%.0f" .S.Loss.ExtraDelayMs}} ms, jitter {{printf "%.0f" .S.Loss.JitterMs}} ms, seed {{.S.Loss.Seed}}</td></tr>
{{end}}<tr><th class="l">display latency / jitter allowance</th><td>{{printf "%.0f" .S.LatencyMs}} ms / {{printf "%.0f" .S.AllowanceMs}} ms</td></tr>
<tr><th class="l">filter model</th><td class="l">{{.S.FilterModel}}</td></tr>
<tr><th class="l">telemetry samples rejected</th><td>{{.S.TelemetryRejected}}</td></tr>
<tr><th class="l">ticks</th><td>{{.S.TicksTotal}}</td></tr>
<tr><th class="l">ticks without a real frame</th><td>{{.S.TicksMissing}}</td></tr>
<tr><th class="l">LIVE / PREDICTED / STALE ticks</th><td>{{.S.LiveTicks}} / {{.S.PredictedTicks}} / {{.S.StaleTicks}}</td></tr>
<tr><th class="l">synthesis time p50 / p99 / mean</th><td>{{f .S.SynthMsP50 2}} / {{f .S.SynthMsP99 2}} / {{f .S.SynthMsMean 2}} ms</td></tr>
<tr><th class="l">mean label pixel share</th><td>{{pct .S.LabelPixelShareMean}}</td></tr>
<tr><th class="l">mean unfilled share</th><td>{{pct .S.UnfilledShareMean}}</td></tr>
</table>

{{if .S.UnscoredNote}}<p id="unscored"><b>{{.S.UnscoredNote}}</b></p>
{{end}}{{with .S.Pairing}}<h2>Session and onboard recording</h2>
<table>
<tr><th class="l">session</th><td class="l">{{.Session}}</td></tr>
{{if .Onboard}}<tr><th class="l">onboard recording</th><td class="l">{{.Onboard}}</td></tr>{{end}}
{{if .Line}}<tr><th class="l">pairing</th><td class="l">{{.Line}}</td></tr>
<tr><th class="l">telemetry rows on board / received by the session / only in the session / values differing</th><td>{{.TelemetryOnboard}} / {{.TelemetryPaired}} / {{.TelemetrySessionOnly}} / {{.TelemetryValueDiffs}}</td></tr>
{{end}}{{if .Decisions}}<tr><th class="l">decisions</th><td class="l">{{.Decisions}}</td></tr>{{end}}
</table>
{{if .Differences}}<p>Ticks where the replay decided otherwise than the relay recorded (the relay's table is the reference):</p>
<table id="differences">
<tr><th>tick</th><th class="l">relay</th><th class="l">replay</th><th>relay confidence</th><th>replay confidence</th><th>relay cutoff</th><th>relay age ms</th><th>replay age ms</th></tr>
{{range .Differences}}<tr><td>{{.Tick}}</td><td class="l">{{.Relay}}</td><td class="l">{{.Replay}}</td><td>{{printf "%.4f" .RelayConfidence}}</td><td>{{f .ReplayConfidence 4}}</td><td>{{printf "%.3f" .RelayCutoff}}</td><td>{{printf "%.1f" .RelayAgeMs}}</td><td>{{printf "%.1f" .ReplayAgeMs}}</td></tr>
{{end}}</table>
{{end}}{{end}}
<h2>Scores against the true frames</h2>
<p>Scores are computed on luma before any label is drawn, only on ticks where the real frame was missing
and the recorded frame is available. PSNR is capped at {{printf "%g" .Cap}} dB per frame before averaging.
Gap age is the time since the capture of the newest real frame.</p>
<table>
<tr><th class="l">method</th><th>gap age</th><th>frames</th><th>PSNR dB</th><th>SSIM</th><th>MAE</th></tr>
{{range .Methods}}<tr><td class="l"><b>{{.Name}}</b></td><td>all</td><td>{{.Stats.Frames}}</td><td>{{f .Stats.PSNRdBMean 2}}</td><td>{{f .Stats.SSIMMean 4}}</td><td>{{f .Stats.MAEMean 2}}</td></tr>
{{range .Stats.Buckets}}<tr><td></td><td>{{.Bucket}} ms</td><td>{{.Frames}}</td><td>{{f .PSNRdBMean 2}}</td><td>{{f .SSIMMean 4}}</td><td>{{f .MAEMean 2}}</td></tr>
{{end}}{{end}}</table>

<h2>PREDICTED ticks alone</h2>
<p>The "predicted" rows above show what the operator saw on every missing tick (the held frame when STALE).
Over the {{.S.PredictedOnly.Frames}} PREDICTED ticks alone: PSNR {{f .S.PredictedOnly.PSNRdBMean 2}} dB (hold on the same ticks
{{f .S.PredictedOnly.HoldPSNRdBMean 2}} dB), SSIM {{f .S.PredictedOnly.SSIMMean 4}} (hold {{f .S.PredictedOnly.HoldSSIMMean 4}}).
Harm rate (worse than hold): {{pct .S.PredictedOnly.HarmRatePSNR}} by more than 1 dB PSNR, {{pct .S.PredictedOnly.HarmRateSSIM}} by more than 0.01 SSIM.
Telemetry: {{if .S.Telemetry.Own}}on its own channel, loss rate {{.S.Telemetry.LossRate}}{{else}}shares the fate of the video{{end}}.</p>

<h2>Calibration of the confidence</h2>
<p>The confidence is the probability that the reference road points of a predicted frame are within
{{.S.Calibration.ToleranceMrad}} mrad of where they really are. Measured from the images on {{.S.Calibration.Frames}} missing ticks:
ECE {{f .S.Calibration.ECE 3}}, Brier {{f .S.Calibration.Brier 3}}, mean confidence {{f .S.Calibration.ConfMean 3}}, observed share {{f .S.Calibration.GoodShare 3}}.
{{if .S.CalibrationTruth.Frames}}From truth.csv on {{.S.CalibrationTruth.Frames}} ticks: ECE {{f .S.CalibrationTruth.ECE 3}}, Brier {{f .S.CalibrationTruth.Brier 3}}.{{end}}</p>
<table><tr><th>confidence bin</th><th>frames</th><th>mean confidence</th><th>observed share</th></tr>
{{range .S.Calibration.Bins}}<tr><td>{{printf "%.1f" .Lo}}-{{printf "%.1f" .Hi}}</td><td>{{.Frames}}</td><td>{{f .ConfMean 3}}</td><td>{{f .Observed 3}}</td></tr>
{{end}}</table>
<p><img src="reliability.png" alt="reliability diagram"></p>
<p><img src="confidence_vs_misalignment.png" alt="confidence against measured misalignment"></p>

<h2>Figures</h2>
<p><img src="{{.PSNRPlot}}" alt="PSNR against gap age for hold, rotation and predicted"></p>
<p><img src="{{.SSIMPlot}}" alt="SSIM against gap age for hold, rotation and predicted"></p>

<h2>Examples</h2>
{{if not .Examples}}<p>No example frames were saved for this run.</p>{{end}}
{{range .Examples}}<h3>{{.Heading}}</h3>
<div class="ex">{{range .Figs}}<figure><img src="{{.File}}" alt="{{.Caption}}"><figcaption>{{.Caption}}</figcaption></figure>{{end}}</div>
{{end}}
<p>Data: <a href="summary.json">summary.json</a>, <a href="ticks.csv">ticks.csv</a>.</p>
</body>
</html>
`)
}

type htmlMethod struct {
	Name  string
	Stats MethodStats
}

func (w ReportWriter) writeHTML(path string, s Summary, figs []exampleBlock) error {
	title := w.Title
	if title == "" {
		title = "stopgap replay report"
	}
	var methods []htmlMethod
	for _, m := range Methods() {
		methods = append(methods, htmlMethod{m.String(), *s.Methods.Get(m)})
	}
	data := struct {
		Title, Caution     string
		S                  Summary
		Cap                float64
		Methods            []htmlMethod
		PSNRPlot, SSIMPlot string
		Examples           []exampleBlock
	}{title, SafetyCaution, s, s.cap(), methods, PSNRPlotFile, SSIMPlotFile, figs}
	tpl, err := newReportTemplate()
	if err != nil {
		return fmt.Errorf("bench: report template: %w", err)
	}
	return writeFile(path, func(w io.Writer) error { return tpl.Execute(w, data) })
}
