package bench

import (
	"fmt"
	"math"
	"slices"

	"gonum.org/v1/gonum/stat"
)

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
	noPicture, notShown           int
	synth                         []float64
	synthMean, label, unfilled    meanAcc
	all                           [numMethods]scoreAcc
	buckets                       [numMethods][numBuckets]scoreAcc

	// PREDICTED-only scores and harm counts.
	po, poHold           scoreAcc
	harmPSNR, harmSSIM   int
	calConf, calMrad     []float64 // per tick with a confidence and a measured misalignment
	truthConf, truthMrad []float64 // per tick with a confidence and a truth misalignment
	marks                markAcc
}

// Add validates r (see TickRow.Validate) and adds it. A rejected row is
// not counted at all.
func (a *Accumulator) Add(r TickRow) error {
	if err := r.Validate(); err != nil {
		return err
	}
	a.total++
	a.marks.add(r)
	switch r.State {
	case TickLive:
		a.live++
	case TickPredicted:
		a.predicted++
	case TickStale:
		a.stale++
	case TickNoPicture:
		a.noPicture++
	case TickNotShown:
		a.notShown++
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
		NoPictureTicks: a.noPicture, NotShownTicks: a.notShown,
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
	s.Marks = a.marks.summary()
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
