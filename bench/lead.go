package bench

import (
	"fmt"
	"math"
	"sort"

	"gocv.io/x/gocv"

	"stopgap/filter"
	"stopgap/predictor"
)

// LeadSummary scores latency compensation (ReplayConfig.Lead) over the
// LIVE ticks: every LIVE frame is compared with the frame captured at the
// moment it was shown (the capture time nearest its arrival), as it was
// shown plainly and as the lead showed it (moved ahead when confident,
// else the same real frame). PSNR is capped per frame (CapPSNR); NaN
// (null) when there is nothing to score.
type LeadSummary struct {
	// Ticks is the number of LIVE ticks scored; Moved of them were moved
	// ahead.
	Ticks int `json:"ticks"`
	Moved int `json:"moved"`
	// AgeMsMean is the mean age of the LIVE frames when shown.
	AgeMsMean Float `json:"age_ms_mean"`
	// PlainPSNRdBMean: the real frame against the present one.
	PlainPSNRdBMean Float `json:"plain_psnr_db_mean"`
	// LeadPSNRdBMean: what the lead showed against the present one.
	LeadPSNRdBMean Float `json:"lead_psnr_db_mean"`
	// MovedPlainPSNRdBMean and MovedLeadPSNRdBMean: the same over the
	// moved ticks alone.
	MovedPlainPSNRdBMean Float `json:"moved_plain_psnr_db_mean"`
	MovedLeadPSNRdBMean  Float `json:"moved_lead_psnr_db_mean"`
	// HarmRate is the share of moved ticks where the moved frame scored
	// worse than the plain one by more than HarmPSNRMarginDB.
	HarmRate Float `json:"harm_rate"`
}

// leadScorer runs the Leader on the LIVE ticks of a replay and scores it.
type leadScorer struct {
	leader      *predictor.Leader
	shown, unl  gocv.Mat
	scorer      *Scorer
	sum         LeadSummary
	ageSum      float64
	plain, lead float64
	mPlain      float64
	mLead       float64
	harmed      int
}

func newLeadScorer(cam predictor.Camera, flt *filter.Filter, cm predictor.ConfidenceModel, cutoff float64) (*leadScorer, error) {
	l, err := predictor.NewLeader(predictor.LeadConfig{Camera: cam, Motion: flt, Confidence: cm, CutoffConfidence: cutoff})
	if err != nil {
		return nil, fmt.Errorf("lead: %w", err)
	}
	s := &leadScorer{leader: l, shown: gocv.NewMat(), unl: gocv.NewMat(), scorer: NewScorer()}
	l.Unlabelled = &s.unl
	return s, nil
}

func (s *leadScorer) Close() {
	s.leader.Close()
	s.shown.Close()
	s.unl.Close()
	s.scorer.Close()
}

// live handles LIVE tick k: frame k is shown at its arrival, which on a
// simulated link is on the vehicle clock; it is scored against the frame
// captured nearest that time, if the recording has it.
func (s *leadScorer) live(k int, sched Schedule, frames frameGetter, hasTruth []bool) error {
	displayUs := sched.ArrivalUs[k]
	j := nearestCapture(sched.CaptureUs, displayUs)
	if j < 0 || !hasTruth[j] {
		return nil
	}
	img, err := frames.Get(k)
	if err != nil {
		return err
	}
	tick, err := s.leader.Lead(img, sched.CaptureUs[k], displayUs, &s.shown)
	if err != nil {
		return fmt.Errorf("lead of frame %d: %w", k, err)
	}
	now, err := frames.Get(j)
	if err != nil {
		return err
	}
	img, err = frames.Get(k) // again: loading j may have evicted it from the cache
	if err != nil {
		return err
	}
	plain, err := s.scorer.PSNR(img, now)
	if err != nil {
		return err
	}
	plain = CapPSNR(plain)
	shown := plain
	if tick.Moved {
		if shown, err = s.scorer.PSNR(s.unl, now); err != nil {
			return err
		}
		shown = CapPSNR(shown)
		s.sum.Moved++
		s.mPlain += plain
		s.mLead += shown
		if shown < plain-HarmPSNRMarginDB {
			s.harmed++
		}
	}
	s.sum.Ticks++
	s.ageSum += tick.AgeMs
	s.plain += plain
	s.lead += shown
	return nil
}

// nearestCapture returns the index of the capture time nearest t, or -1
// when t is past the last frame by more than half a frame period.
func nearestCapture(captureUs []int64, t int64) int {
	n := len(captureUs)
	i := sort.Search(n, func(i int) bool { return captureUs[i] >= t })
	switch {
	case n == 0:
		return -1
	case i == n:
		if n > 1 && 2*(t-captureUs[n-1]) > captureUs[n-1]-captureUs[n-2] {
			return -1
		}
		return n - 1
	case i > 0 && t-captureUs[i-1] < captureUs[i]-t:
		return i - 1
	}
	return i
}

func (s *leadScorer) summary() *LeadSummary {
	out := s.sum
	nan := Float(math.NaN())
	out.AgeMsMean, out.PlainPSNRdBMean, out.LeadPSNRdBMean = nan, nan, nan
	out.MovedPlainPSNRdBMean, out.MovedLeadPSNRdBMean, out.HarmRate = nan, nan, nan
	if n := float64(out.Ticks); n > 0 {
		out.AgeMsMean, out.PlainPSNRdBMean, out.LeadPSNRdBMean = Float(s.ageSum/n), Float(s.plain/n), Float(s.lead/n)
	}
	if m := float64(out.Moved); m > 0 {
		out.MovedPlainPSNRdBMean, out.MovedLeadPSNRdBMean = Float(s.mPlain/m), Float(s.mLead/m)
		out.HarmRate = Float(float64(s.harmed) / m)
	}
	return &out
}
