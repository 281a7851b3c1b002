package bench

import (
	"context"
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"slices"
	"sync"
)

// Tuning defaults.
const (
	// DefaultTuneResamples is the number of bootstrap resamples.
	DefaultTuneResamples = 1000
	// DefaultTuneMinGaps is the fewest gaps (runs of missing ticks) from
	// which Tune recommends a cutoff; with fewer it says the data is too
	// little. A design choice: the bootstrap of a share needs a few tens
	// of independent units to say anything.
	DefaultTuneMinGaps = 30
	// DefaultTuneMinPredicted is the fewest PREDICTED ticks the
	// recommended cutoff must leave for its harm rate to mean something.
	DefaultTuneMinPredicted = 20
)

// DefaultTuneCutoffs returns the swept cutoffs 0, 0.05, ..., 1 (new slice).
func DefaultTuneCutoffs() []float64 {
	out := make([]float64, 21)
	for i := range out {
		out[i] = float64(i) / 20
	}
	return out
}

// TuneCutoffsWithin returns the cutoffs of DefaultTuneCutoffs within
// [lo, hi], with lo and hi themselves added when they fall between grid
// points: the sweep of a tuning run bounded by an administrator's limits.
// It returns nil unless 0 <= lo <= hi <= 1.
func TuneCutoffsWithin(lo, hi float64) []float64 {
	if !(lo >= 0 && lo <= hi && hi <= 1) {
		return nil
	}
	const eps = 1e-9 // grid points are i/20, compared to limits as typed
	out := []float64{lo}
	for _, c := range DefaultTuneCutoffs() {
		if c > lo+eps && c < hi-eps {
			out = append(out, c)
		}
	}
	if hi > lo {
		out = append(out, hi)
	}
	return out
}

// TuneTolerance is what a recommended cutoff must meet. Set exactly one of
// the three (zero = not used).
type TuneTolerance struct {
	// MaxHarmRate is the largest allowed share of PREDICTED ticks worse
	// than hold by more than HarmPSNRMarginDB, in (0, 1).
	MaxHarmRate float64 `json:"max_harm_rate,omitempty"`
	// MinSSIM is the least allowed mean SSIM of what is shown on missing
	// ticks, in (0, 1).
	MinSSIM float64 `json:"min_ssim,omitempty"`
	// MaxMisalignMrad is the largest allowed mean misalignment of the
	// PREDICTED ticks (measured from the images), mrad, > 0.
	MaxMisalignMrad float64 `json:"max_misalign_mrad,omitempty"`
}

// Validate reports a tolerance with none or several criteria set, or one
// out of range, wrapping ErrTuneInput.
func (t TuneTolerance) Validate() error {
	n := 0
	for _, v := range []float64{t.MaxHarmRate, t.MinSSIM, t.MaxMisalignMrad} {
		if v != 0 {
			n++
		}
	}
	switch {
	case n != 1:
		return fmt.Errorf("tune: set exactly one tolerance (maximum harm rate, minimum SSIM or maximum misalignment), got %d: %w", n, ErrTuneInput)
	case t.MaxHarmRate != 0 && !(t.MaxHarmRate > 0 && t.MaxHarmRate < 1):
		return fmt.Errorf("tune: maximum harm rate %v out of range, want a share in (0, 1), e.g. 0.05: %w", t.MaxHarmRate, ErrTuneInput)
	case t.MinSSIM != 0 && !(t.MinSSIM > 0 && t.MinSSIM < 1):
		return fmt.Errorf("tune: minimum SSIM %v out of range, want a value in (0, 1): %w", t.MinSSIM, ErrTuneInput)
	case t.MaxMisalignMrad != 0 && !(t.MaxMisalignMrad > 0 && !math.IsInf(t.MaxMisalignMrad, 0)):
		return fmt.Errorf("tune: maximum misalignment %v mrad out of range, want a finite angle > 0: %w", t.MaxMisalignMrad, ErrTuneInput)
	}
	return nil
}

// TuneConfig configures Tune.
type TuneConfig struct {
	// Drives are the replays to tune over; Out, Overwrite, Examples and
	// Progress of each are ignored (nothing is written per drive) and the
	// policy's cutoff does not matter (every cutoff is swept); its
	// MaxAgeMs is kept.
	Drives []ReplayConfig
	// Cutoffs to sweep, ascending in [0, 1]; nil means DefaultTuneCutoffs.
	Cutoffs []float64
	// Tolerance the recommendation must meet.
	Tolerance TuneTolerance
	// MinCutoff and MaxCutoff bound the cutoffs that may be recommended
	// (for example an administrator's limits); zero MaxCutoff means 1.
	MinCutoff, MaxCutoff float64
	// Resamples is the number of bootstrap resamples; 0 means
	// DefaultTuneResamples.
	Resamples int
	// Seed selects the bootstrap's resamples.
	Seed uint64
	// MinGaps and MinPredicted: 0 means the defaults (see
	// DefaultTuneMinGaps, DefaultTuneMinPredicted).
	MinGaps, MinPredicted int
	// Parallel is how many drives replay at once; 0 means the number of
	// CPUs.
	Parallel int
	// Progress, if set, is called (from one goroutine at a time) with the
	// ticks replayed so far over all drives and their total.
	Progress func(done, total int)
}

// TunePoint is the sweep at one cutoff, over all drives.
type TunePoint struct {
	Cutoff float64 `json:"cutoff"`
	// Missing ticks and those shown PREDICTED; Coverage = Predicted/Missing.
	Missing   int   `json:"missing"`
	Predicted int   `json:"predicted"`
	Coverage  Float `json:"coverage"`
	// HarmRatePSNR and HarmRateSSIM over the scored PREDICTED ticks.
	HarmRatePSNR Float `json:"harm_rate_psnr"`
	HarmRateSSIM Float `json:"harm_rate_ssim"`
	// ShownPSNRdB, ShownSSIM: mean scores of what is shown on the scored
	// missing ticks (the prediction when PREDICTED, the held frame when
	// STALE).
	ShownPSNRdB Float `json:"shown_psnr_db_mean"`
	ShownSSIM   Float `json:"shown_ssim_mean"`
	// MisalignMrad is the mean measured misalignment of the PREDICTED ticks.
	MisalignMrad Float `json:"predicted_misalign_mrad_mean"`
	// Meets says whether the tolerance holds at this cutoff.
	Meets bool `json:"meets_tolerance"`
}

// TuneResult is the outcome of Tune (tune.json).
type TuneResult struct {
	Drives    []string      `json:"drives"`
	Tolerance TuneTolerance `json:"tolerance"`
	MinCutoff float64       `json:"min_cutoff"`
	MaxCutoff float64       `json:"max_cutoff"`
	Points    []TunePoint   `json:"points"`
	// Recommended is the lowest cutoff in [MinCutoff, MaxCutoff] at which,
	// and at every higher swept cutoff in range, the tolerance holds; NaN
	// (null) when there is none or the data is too little (see Reason).
	Recommended Float `json:"recommended_cutoff"`
	// CILow and CIHigh are the 2.5 % and 97.5 % percentiles of the
	// recommendation over bootstrap resamples of whole gaps; CIHigh is
	// NaN when more than 2.5 % of the resamples had no cutoff meeting the
	// tolerance.
	CILow  Float `json:"ci_low"`
	CIHigh Float `json:"ci_high"`
	// Bootstrap names the resampled unit ("gaps": runs of consecutive
	// missing ticks, pooled over drives) and the number of resamples.
	Bootstrap string `json:"bootstrap_unit"`
	Resamples int    `json:"resamples"`
	// Gaps is the number of gaps; Enough says whether the data sufficed;
	// Reason explains a missing recommendation in plain words.
	Gaps   int    `json:"gaps"`
	Enough bool   `json:"enough_data"`
	Reason string `json:"reason,omitempty"`
}

// Tune replays every drive (in parallel, at most cfg.Parallel at once),
// sweeps the cutoff over the missing ticks, and recommends the lowest
// cutoff meeting the tolerance with a bootstrap interval (see TuneTicks).
func Tune(ctx context.Context, cfg TuneConfig) (TuneResult, error) {
	if len(cfg.Drives) == 0 {
		return TuneResult{}, fmt.Errorf("tune: no drives given; pass at least one recording: %w", ErrTuneInput)
	}
	if err := cfg.check(); err != nil {
		return TuneResult{}, err
	}
	rows, err := replayRows(ctx, cfg.Drives, nil, cfg.Parallel, cfg.Progress)
	if err != nil {
		return TuneResult{}, err
	}
	maxAge := make([]float64, len(cfg.Drives))
	names := make([]string, len(cfg.Drives))
	for i, d := range cfg.Drives {
		names[i] = d.Drive
		maxAge[i] = d.Policy.MaxAgeMs
	}
	res, err := TuneTicks(rows, maxAge, cfg)
	res.Drives = names
	return res, err
}

// replayRows replays the drives whose indices are in only (all when nil),
// at most par at once (0 = number of CPUs), without examples or output,
// and returns every drive's ticks (nil for those not replayed). progress,
// if set, is called from one goroutine at a time with the ticks done over
// those drives and their total. The first error stops the others.
func replayRows(ctx context.Context, drives []ReplayConfig, only []int, par int, progress func(done, total int)) ([][]TickRow, error) {
	if only == nil {
		only = make([]int, len(drives))
		for i := range only {
			only[i] = i
		}
	}
	if par <= 0 {
		par = runtime.NumCPU()
	}
	rows := make([][]TickRow, len(drives))
	var mu sync.Mutex
	done := make([]int, len(drives))
	total := make([]int, len(drives))
	report := func(i, d, t int) {
		if progress == nil {
			return
		}
		mu.Lock()
		defer mu.Unlock()
		done[i], total[i] = d, t
		var a, b int
		for j := range done {
			a += done[j]
			b += total[j]
		}
		progress(a, b)
	}
	ctx, cancel := context.WithCancel(ctx)
	defer cancel()
	errs := make([]error, len(drives))
	sem := make(chan struct{}, par)
	var wg sync.WaitGroup
	for _, i := range only {
		d := drives[i]
		wg.Add(1)
		go func() {
			defer wg.Done()
			sem <- struct{}{}
			defer func() { <-sem }()
			d.Examples = -1
			d.Progress = func(a, b int) { report(i, a, b) }
			var out replayOutput
			_, err := replayDrive(ctx, d, &out)
			for _, e := range out.examples {
				closeExample(e)
			}
			if err != nil {
				errs[i] = fmt.Errorf("tune: drive %d (%s): %w", i+1, d.Drive, err)
				cancel()
				return
			}
			rows[i] = out.rows
		}()
	}
	wg.Wait()
	for _, err := range errs {
		if err != nil && !errors.Is(err, context.Canceled) {
			return nil, err
		}
	}
	for _, err := range errs {
		if err != nil {
			return nil, err
		}
	}
	return rows, nil
}

// check validates the parts of cfg that do not need the drives.
func (cfg TuneConfig) check() error {
	if err := cfg.Tolerance.Validate(); err != nil {
		return err
	}
	hi := cfg.MaxCutoff
	if hi == 0 {
		hi = 1
	}
	if !(cfg.MinCutoff >= 0 && cfg.MinCutoff <= hi && hi <= 1) {
		return fmt.Errorf("tune: cutoff range [%v, %v] invalid, want 0 <= min <= max <= 1: %w", cfg.MinCutoff, cfg.MaxCutoff, ErrTuneInput)
	}
	for i, c := range cfg.Cutoffs {
		if !(c >= 0 && c <= 1) || (i > 0 && c <= cfg.Cutoffs[i-1]) {
			return fmt.Errorf("tune: cutoffs must ascend within [0, 1]; entry %d is %v: %w", i, c, ErrTuneInput)
		}
	}
	if cfg.Resamples < 0 {
		return fmt.Errorf("tune: %d bootstrap resamples, want > 0 (0 for %d): %w", cfg.Resamples, DefaultTuneResamples, ErrTuneInput)
	}
	return nil
}

// gapCounts are the sums of one gap at every swept cutoff.
type gapCounts struct {
	missing   int
	predicted []int // per cutoff
	scored    []int // predicted and scored against hold
	harmPSNR  []int
	harmSSIM  []int
	mis       []float64 // sum of measured misalignment, mrad
	misN      []int
	shownN    int       // scored missing ticks
	shownPSNR []float64 // sum over scored missing ticks
	shownSSIM []float64
}

// TuneTicks sweeps the cutoffs over replayed ticks (one slice per drive,
// as Replay produces them, with the policy's maximum age per drive) and
// recommends a cutoff. A missing tick is PREDICTED at cutoff c when its
// prediction was usable (Warp scored or a confidence above 0 with no
// image to score), its confidence is >= c and its age is within the
// maximum; otherwise it is STALE and shows the held frame. The bootstrap
// resamples whole gaps (runs of consecutive missing ticks of one drive),
// since the ticks of one gap share one motion error and are not
// independent.
func TuneTicks(drives [][]TickRow, maxAgeMs []float64, cfg TuneConfig) (TuneResult, error) {
	if err := cfg.check(); err != nil {
		return TuneResult{}, err
	}
	if len(drives) == 0 || len(maxAgeMs) != len(drives) {
		return TuneResult{}, fmt.Errorf("tune: %d drives with %d age limits: %w", len(drives), len(maxAgeMs), ErrTuneInput)
	}
	cuts := cfg.Cutoffs
	if cuts == nil {
		cuts = DefaultTuneCutoffs()
	}
	hi := cfg.MaxCutoff
	if hi == 0 {
		hi = 1
	}
	nres := cfg.Resamples
	if nres == 0 {
		nres = DefaultTuneResamples
	}
	minGaps, minPred := cfg.MinGaps, cfg.MinPredicted
	if minGaps == 0 {
		minGaps = DefaultTuneMinGaps
	}
	if minPred == 0 {
		minPred = DefaultTuneMinPredicted
	}
	K := len(cuts)
	newGap := func() *gapCounts {
		return &gapCounts{predicted: make([]int, K), scored: make([]int, K), harmPSNR: make([]int, K), harmSSIM: make([]int, K),
			mis: make([]float64, K), misN: make([]int, K), shownPSNR: make([]float64, K), shownSSIM: make([]float64, K)}
	}
	var gaps []*gapCounts
	for d, rows := range drives {
		var g *gapCounts
		prev := -2
		for _, r := range rows {
			if r.State == TickLive {
				continue
			}
			if g == nil || r.Tick != prev+1 {
				g = newGap()
				gaps = append(gaps, g)
			}
			prev = r.Tick
			g.missing++
			warpOK, _ := checkScores(r.Warp)
			holdOK, _ := checkScores(r.Hold)
			if holdOK {
				g.shownN++
			}
			for k, c := range cuts {
				pred := !math.IsNaN(r.Confidence) && r.Confidence >= c && r.AgeMs <= maxAgeMs[d] &&
					(warpOK || (!holdOK && r.Confidence > 0))
				if pred {
					g.predicted[k]++
					if !math.IsNaN(r.MisalignMrad) {
						g.mis[k] += r.MisalignMrad
						g.misN[k]++
					}
				}
				if !holdOK {
					continue
				}
				shown := r.Hold
				if pred {
					shown = r.Warp
					g.scored[k]++
					p, s := Harmful(r.Warp, r.Hold)
					if p {
						g.harmPSNR[k]++
					}
					if s {
						g.harmSSIM[k]++
					}
				}
				g.shownPSNR[k] += CapPSNR(shown.PSNRdB)
				g.shownSSIM[k] += shown.SSIM
			}
		}
	}
	res := TuneResult{Tolerance: cfg.Tolerance, MinCutoff: cfg.MinCutoff, MaxCutoff: hi, Gaps: len(gaps),
		Bootstrap: "gaps", Resamples: nres, Recommended: Float(math.NaN()), CILow: Float(math.NaN()), CIHigh: Float(math.NaN())}
	w := make([]int, len(gaps))
	for i := range w {
		w[i] = 1
	}
	res.Points = sweep(gaps, w, cuts, cfg.Tolerance)
	rec := recommend(res.Points, cfg.MinCutoff, hi)
	switch {
	case len(gaps) < minGaps:
		res.Reason = fmt.Sprintf("too little data: %d gaps, at least %d are needed to recommend a cutoff; replay more or longer drives", len(gaps), minGaps)
		return res, nil
	case rec < 0:
		res.Enough = true
		res.Reason = fmt.Sprintf("no cutoff in [%g, %g] meets the tolerance on these drives: keep predictions off (cutoff 1) or relax the tolerance", cfg.MinCutoff, hi)
		return res, nil
	case res.Points[rec].Predicted < minPred && cuts[rec] < 1:
		res.Reason = fmt.Sprintf("too little data: the lowest cutoff meeting the tolerance (%g) leaves only %d PREDICTED ticks, at least %d are needed", cuts[rec], res.Points[rec].Predicted, minPred)
		return res, nil
	}
	res.Enough = true
	res.Recommended = Float(cuts[rec])
	boot := BootstrapClusters(len(gaps), nres, cfg.Seed, func(w []int) float64 {
		if r := recommend(sweep(gaps, w, cuts, cfg.Tolerance), cfg.MinCutoff, hi); r >= 0 {
			return cuts[r]
		}
		return math.Inf(1)
	})
	slices.Sort(boot)
	res.CILow = Float(percentile(boot, 0.025))
	if h := percentile(boot, 0.975); !math.IsInf(h, 1) {
		res.CIHigh = Float(h)
	}
	return res, nil
}

// sweep sums the gaps with weights w (how many times each is drawn) at
// every cutoff.
func sweep(gaps []*gapCounts, w []int, cuts []float64, tol TuneTolerance) []TunePoint {
	pts := make([]TunePoint, len(cuts))
	for k, c := range cuts {
		var miss, pred, scored, hp, hs, misN, shownN int
		var mis, sp, ss float64
		for i, g := range gaps {
			if w[i] == 0 {
				continue
			}
			n := w[i]
			miss += n * g.missing
			pred += n * g.predicted[k]
			scored += n * g.scored[k]
			hp += n * g.harmPSNR[k]
			hs += n * g.harmSSIM[k]
			mis += float64(n) * g.mis[k]
			misN += n * g.misN[k]
			shownN += n * g.shownN
			sp += float64(n) * g.shownPSNR[k]
			ss += float64(n) * g.shownSSIM[k]
		}
		p := TunePoint{Cutoff: c, Missing: miss, Predicted: pred, Coverage: ratio(float64(pred), miss),
			HarmRatePSNR: ratio(float64(hp), scored), HarmRateSSIM: ratio(float64(hs), scored),
			ShownPSNRdB: ratio(sp, shownN), ShownSSIM: ratio(ss, shownN), MisalignMrad: ratio(mis, misN)}
		switch {
		case tol.MaxHarmRate != 0:
			p.Meets = scored == 0 || float64(p.HarmRatePSNR) <= tol.MaxHarmRate
		case tol.MinSSIM != 0:
			p.Meets = shownN > 0 && float64(p.ShownSSIM) >= tol.MinSSIM
		case tol.MaxMisalignMrad != 0:
			p.Meets = misN == 0 || float64(p.MisalignMrad) <= tol.MaxMisalignMrad
		}
		pts[k] = p
	}
	return pts
}

// recommend returns the index of the lowest cutoff in [lo, hi] from which
// on every cutoff in range meets the tolerance, or -1.
func recommend(pts []TunePoint, lo, hi float64) int {
	best := -1
	for k := len(pts) - 1; k >= 0; k-- {
		c := pts[k].Cutoff
		if c > hi {
			continue
		}
		if c < lo || !pts[k].Meets {
			break
		}
		best = k
	}
	return best
}

func ratio(a float64, n int) Float {
	if n == 0 {
		return Float(math.NaN())
	}
	return Float(a / float64(n))
}

// percentile returns the p-quantile of sorted (nearest rank: the smallest
// value whose empirical CDF is >= p).
func percentile(sorted []float64, p float64) float64 {
	if len(sorted) == 0 {
		return math.NaN()
	}
	i := int(math.Ceil(p*float64(len(sorted)))) - 1
	return sorted[max(0, min(i, len(sorted)-1))]
}

// BootstrapClusters draws resamples of n clusters with replacement (each
// resample draws n clusters uniformly; w[i] counts how often cluster i was
// drawn) and returns stat(w) for each: the nonparametric bootstrap of
// Efron (1979) applied to whole clusters. The random stream is PCG seeded
// with seed; w is reused between calls and must not be kept by stat.
func BootstrapClusters(n, resamples int, seed uint64, stat func(w []int) float64) []float64 {
	rng := rand.New(rand.NewPCG(seed, 0xb007))
	w := make([]int, n)
	out := make([]float64, resamples)
	for b := range out {
		clear(w)
		for range n {
			w[rng.IntN(n)]++
		}
		out[b] = stat(w)
	}
	return out
}
