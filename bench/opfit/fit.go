package opfit

import (
	"fmt"
	"math"
	"math/rand/v2"
	"sort"
	"strings"

	"stopgap/internal/display"
)

// Shown is what the console showed on a display tick: the one frame-state
// type (display.State), named here for the fit.
type Shown = display.State

// The display states a fit uses. A NO_PICTURE tick counts as STALE (nothing
// trustworthy on screen); NOT_SHOWN ticks are left out by the readers.
const (
	ShownInvalid   = display.StateInvalid
	ShownLive      = display.StateLive
	ShownPredicted = display.StatePredicted
	ShownStale     = display.StateStale
)

// ParseShown parses a state name (display.ParseState) into the three states
// a fit uses: NO_PICTURE becomes STALE, NOT_SHOWN is an error.
func ParseShown(s string) (Shown, error) {
	st, err := display.ParseState(s)
	if err != nil {
		return ShownInvalid, fmt.Errorf("%w: %w", ErrBadData, err)
	}
	switch st {
	case display.StateNoPicture:
		return ShownStale, nil
	case display.StateNotShown:
		return ShownInvalid, fmt.Errorf("%w: state %q was not on screen", ErrBadData, s)
	}
	return st, nil
}

// Sample is one control sample of the operator, attributed to the display
// tick that was on screen when the operator perceived what it acted on.
type Sample struct {
	// Unit is the resampling unit of the bootstrap: one gap (a run of
	// non-LIVE ticks) of one session; LIVE samples may share a unit.
	Unit int
	// Shown, Confidence: the attributed tick's state and confidence.
	Shown      Shown
	Confidence float64
	// DeviationRad is |operator's road-wheel angle - the reference
	// follower's on the true state|.
	DeviationRad float64
}

// Defaults of FitConfig: our choices, sized so that a fit rests on a few
// dozen gaps at each cutoff tried.
const (
	DefaultBandWidth  = 0.1
	DefaultMinPerBand = 30
	DefaultMinGaps    = 20
	DefaultBootstrap  = 400
	DefaultMaxCIWidth = 0.4
)

// FitConfig configures Recommend and Describe. Zero fields take the
// defaults.
type FitConfig struct {
	// BandWidth is the width of the confidence bands [k w, (k+1) w) of the
	// description.
	BandWidth float64
	// MinPerBand is the fewest PREDICTED and the fewest STALE samples a band
	// needs to be compared in the description.
	MinPerBand int
	// MinGaps is the fewest gaps a cutoff needs to be compared.
	MinGaps int
	// Bootstrap is the number of resamplings for the confidence interval.
	Bootstrap int
	// MaxCIWidth: a 95% interval wider than this recommends nothing.
	MaxCIWidth float64
	// Seed selects the resampling sequence.
	Seed uint64
}

func (c FitConfig) withDefaults() FitConfig {
	if c.BandWidth <= 0 || c.BandWidth > 1 {
		c.BandWidth = DefaultBandWidth
	}
	if c.MinPerBand <= 0 {
		c.MinPerBand = DefaultMinPerBand
	}
	if c.MinGaps <= 0 {
		c.MinGaps = DefaultMinGaps
	}
	if c.Bootstrap <= 0 {
		c.Bootstrap = DefaultBootstrap
	}
	if c.MaxCIWidth <= 0 {
		c.MaxCIWidth = DefaultMaxCIWidth
	}
	return c
}

// Stat is a count and a mean deviation, radians.
type Stat struct {
	N       int
	MeanRad float64
}

// Band compares PREDICTED and STALE samples whose confidence is in [Lo, Hi)
// (the top band includes 1).
type Band struct {
	Lo, Hi            float64
	Predicted, Stale  Stat
	Comparable, Helps bool // enough of both; PREDICTED mean below STALE mean
}

// Description is the tick-by-tick comparison of Describe.
type Description struct {
	Bands                  []Band
	Live, Predicted, Stale Stat
	// PredictedGaps and StaleGaps count the gaps with samples of each.
	PredictedGaps, StaleGaps int
}

// Describe compares, per confidence band, the steering deviation of
// samples attributed to PREDICTED ticks with that of STALE ticks, and both
// with LIVE ticks. It describes what the operator did while each picture
// was on screen; it does not see what a picture caused later (a misread
// predicted picture can put the vehicle off its path and cost a correction
// after the gap), which is why Recommend compares whole gaps instead.
func Describe(samples []Sample, cfg FitConfig) Description {
	cfg = cfg.withDefaults()
	nb := int(math.Ceil(1/cfg.BandWidth - 1e-9))
	var d Description
	total := make([]float64, 2*nb)
	count := make([]int, 2*nb)
	predUnits, staleUnits := map[int]bool{}, map[int]bool{}
	add := func(s *Stat, v float64) { s.N++; s.MeanRad += v }
	for _, s := range samples {
		if math.IsNaN(s.DeviationRad) || math.IsNaN(s.Confidence) {
			continue
		}
		k := 2 * min(max(int(s.Confidence/cfg.BandWidth), 0), nb-1)
		switch s.Shown {
		case ShownLive:
			add(&d.Live, s.DeviationRad)
			continue
		case ShownPredicted:
			add(&d.Predicted, s.DeviationRad)
			predUnits[s.Unit] = true
		case ShownStale:
			add(&d.Stale, s.DeviationRad)
			staleUnits[s.Unit] = true
			k++
		default:
			continue
		}
		total[k] += s.DeviationRad
		count[k]++
	}
	for _, s := range []*Stat{&d.Live, &d.Predicted, &d.Stale} {
		if s.N > 0 {
			s.MeanRad /= float64(s.N)
		}
	}
	d.PredictedGaps, d.StaleGaps = len(predUnits), len(staleUnits)
	d.Bands = make([]Band, nb)
	for b := range d.Bands {
		bd := &d.Bands[b]
		bd.Lo, bd.Hi = float64(b)*cfg.BandWidth, math.Min(float64(b+1)*cfg.BandWidth, 1)
		if n := count[2*b]; n > 0 {
			bd.Predicted = Stat{N: n, MeanRad: total[2*b] / float64(n)}
		}
		if n := count[2*b+1]; n > 0 {
			bd.Stale = Stat{N: n, MeanRad: total[2*b+1] / float64(n)}
		}
		bd.Comparable = bd.Predicted.N >= cfg.MinPerBand && bd.Stale.N >= cfg.MinPerBand
		bd.Helps = bd.Comparable && bd.Predicted.MeanRad < bd.Stale.MeanRad
	}
	return d
}

// GapCost is the outcome of one gap: the operator's steering deviation
// integrated from the gap's first tick to a recovery time after its last
// (see GapCosts), under the cutoff that was in force.
type GapCost struct {
	Cutoff   float64
	CostRadS float64
	// WindowS is the length of the window the cost was integrated over.
	WindowS float64
	// Ticks is the gap's length in display ticks.
	Ticks int
}

// gapStrata are the upper bounds (ticks, inclusive) of the gap-length
// strata of Recommend: at 30 fps up to 67 ms, 167 ms, 333 ms, 667 ms, and
// longer.
var gapStrata = []int{2, 5, 10, 20, math.MaxInt}

func stratum(ticks int) int {
	for i, hi := range gapStrata {
		if ticks <= hi {
			return i
		}
	}
	return len(gapStrata) - 1
}

// Level is one cutoff tried, with its gaps' mean cost.
type Level struct {
	Cutoff       float64
	Gaps         int
	MeanCostRadS float64
}

// Recommendation is the result of Recommend.
type Recommendation struct {
	// OK is true when a cutoff is recommended; otherwise Reason says why
	// not (too little data, or too uncertain) and Cutoff is NaN.
	OK     bool
	Reason string
	// Cutoff is the recommended cutoff; CILo..CIHi its 95% percentile
	// bootstrap interval over whole gaps.
	Cutoff, CILo, CIHi float64
	// Levels lists the cutoffs tried, in increasing order.
	Levels []Level
}

// levelKey rounds a cutoff to the 0.01 steps levels are told apart by.
func levelKey(c float64) float64 { return math.Round(c*100) / 100 }

// Recommend recommends the cutoff below which predicted frames stop helping
// one operator, from gaps driven under several cutoffs (for instance
// sessions at a ladder of cutoffs within the policy; the relay records the
// cutoff of every tick). It is the tried cutoff whose gaps cost least on
// average, the average taken over gap-length strata (gapStrata) weighted by
// the pooled share of each stratum: lowering the cutoff below it shows predicted frames the operator
// does worse with, raising it withholds ones they do better with. The 95%
// interval is the 2.5 and 97.5 percentiles of the same choice over
// Bootstrap resamplings of whole gaps, with replacement, within each cutoff
// and stratum (Efron and Tibshirani 1993, percentile interval; resampling whole gaps
// keeps the dependence between the ticks of one gap). With fewer than 2
// cutoffs having MinGaps gaps each, or an interval wider than MaxCIWidth,
// it recommends nothing and says why.
func Recommend(gaps []GapCost, cfg FitConfig) Recommendation {
	cfg = cfg.withDefaults()
	rec := Recommendation{Cutoff: math.NaN(), CILo: math.NaN(), CIHi: math.NaN()}
	ns := len(gapStrata)
	by := map[float64][][]float64{} // level -> stratum -> costs
	weight := make([]float64, ns)   // pooled share of gaps per stratum
	for _, g := range gaps {
		if math.IsNaN(g.CostRadS) || math.IsNaN(g.Cutoff) {
			continue
		}
		k := levelKey(g.Cutoff)
		if by[k] == nil {
			by[k] = make([][]float64, ns)
		}
		st := stratum(g.Ticks)
		by[k][st] = append(by[k][st], g.CostRadS)
		weight[st]++
	}
	var keys []float64
	for k := range by {
		keys = append(keys, k)
	}
	sort.Float64s(keys)
	// A level's cost is the mean over its gaps standardised to the pooled
	// mix of gap lengths (direct standardisation), so that levels whose
	// sessions happened to have longer gaps are not penalised for it.
	standardised := func(strata [][]float64, means []float64) float64 {
		sum, w := 0.0, 0.0
		for i, m := range means {
			if len(strata[i]) > 0 {
				sum += weight[i] * m
				w += weight[i]
			}
		}
		return sum / w
	}
	var used [][][]float64
	var usedKeys []float64
	sm := make([]float64, ns)
	for _, k := range keys {
		n := 0
		for i, c := range by[k] {
			n += len(c)
			sm[i] = 0
			if len(c) > 0 {
				sm[i] = mean(c)
			}
		}
		rec.Levels = append(rec.Levels, Level{Cutoff: k, Gaps: n, MeanCostRadS: standardised(by[k], sm)})
		if n >= cfg.MinGaps {
			used = append(used, by[k])
			usedKeys = append(usedKeys, k)
		}
	}
	if len(used) < 2 {
		rec.Reason = fmt.Sprintf("too little data: %d cutoffs have %d gaps or more; need 2 or more (drive sessions at several cutoffs within the policy)", len(used), cfg.MinGaps)
		return rec
	}
	means := make([]float64, len(used))
	argmin := func() int {
		bi := 0
		for i, m := range means {
			if m < means[bi] {
				bi = i
			}
		}
		return bi
	}
	for i := range used {
		means[i] = rec.levelMean(usedKeys[i])
	}
	best := usedKeys[argmin()]
	rng := rand.New(rand.NewPCG(cfg.Seed, 0x6f706669)) // "opfi"
	draws := make([]float64, cfg.Bootstrap)
	for b := range draws {
		for i, strata := range used {
			for j, c := range strata {
				sum := 0.0
				for range c {
					sum += c[rng.IntN(len(c))]
				}
				sm[j] = 0
				if len(c) > 0 {
					sm[j] = sum / float64(len(c))
				}
			}
			means[i] = standardised(strata, sm)
		}
		draws[b] = usedKeys[argmin()]
	}
	sort.Float64s(draws)
	rec.CILo, rec.CIHi = quantile(draws, 0.025), quantile(draws, 0.975)
	if rec.CIHi-rec.CILo > cfg.MaxCIWidth {
		rec.Reason = fmt.Sprintf("too uncertain: the 95%% interval [%.2f, %.2f] is wider than %.2f; drive more sessions", rec.CILo, rec.CIHi, cfg.MaxCIWidth)
		return rec
	}
	rec.OK, rec.Cutoff = true, best
	return rec
}

func (r *Recommendation) levelMean(k float64) float64 {
	for _, l := range r.Levels {
		if l.Cutoff == k {
			return l.MeanCostRadS
		}
	}
	return math.NaN()
}

func mean(x []float64) float64 {
	s := 0.0
	for _, v := range x {
		s += v
	}
	return s / float64(len(x))
}

// quantile returns the q-quantile of sorted x by linear interpolation
// between order statistics (type 7 of Hyndman and Fan 1996).
func quantile(x []float64, q float64) float64 {
	h := q * float64(len(x)-1)
	i := int(h)
	if i+1 >= len(x) {
		return x[len(x)-1]
	}
	return x[i] + (h-float64(i))*(x[i+1]-x[i])
}

// String summarises the recommendation with the cost of each cutoff tried.
func (r Recommendation) String() string {
	var b strings.Builder
	if r.OK {
		fmt.Fprintf(&b, "recommended cutoff %.2f (95%% interval %.2f to %.2f, bootstrap over gaps)\n", r.Cutoff, r.CILo, r.CIHi)
	} else {
		fmt.Fprintf(&b, "no recommendation: %s\n", r.Reason)
	}
	fmt.Fprintln(&b, "cutoff  gaps  mean steering deviation per gap, mrad*s")
	for _, l := range r.Levels {
		fmt.Fprintf(&b, "%6.2f  %4d  %8.1f\n", l.Cutoff, l.Gaps, 1e3*l.MeanCostRadS)
	}
	return b.String()
}

// String shows the tick-by-tick comparison as a table.
func (d Description) String() string {
	var b strings.Builder
	fmt.Fprintf(&b, "steering deviation from the reference follower while each picture was on screen, mrad: LIVE %.1f (n %d), PREDICTED %.1f (n %d, %d gaps), STALE %.1f (n %d, %d gaps)\n",
		1e3*d.Live.MeanRad, d.Live.N, 1e3*d.Predicted.MeanRad, d.Predicted.N, d.PredictedGaps, 1e3*d.Stale.MeanRad, d.Stale.N, d.StaleGaps)
	fmt.Fprintln(&b, "confidence   PREDICTED mrad (n)   STALE mrad (n)   lower while shown")
	for _, bd := range d.Bands {
		if bd.Predicted.N == 0 && bd.Stale.N == 0 {
			continue
		}
		h := "-"
		if bd.Comparable {
			h = map[bool]string{true: "PREDICTED", false: "STALE"}[bd.Helps]
		}
		fmt.Fprintf(&b, "%.2f-%.2f    %7.1f (%5d)       %7.1f (%5d)   %s\n", bd.Lo, bd.Hi, 1e3*bd.Predicted.MeanRad, bd.Predicted.N, 1e3*bd.Stale.MeanRad, bd.Stale.N, h)
	}
	return b.String()
}
