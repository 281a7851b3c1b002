package opfit

import (
	"fmt"
	"math"
	"sort"
)

// Tick is one display tick as the console showed it.
type Tick struct {
	// DisplayUs is when it went on screen, microseconds on the receiver
	// (relay) clock: the tick's deadline, or the frame's arrival for LIVE.
	DisplayUs  int64
	Shown      Shown
	Confidence float64
	// Cutoff is the operator's cutoff in force on this tick.
	Cutoff float64
}

// Control is one sample of the operator's inputs (see the controls.csv
// format in stream/operator/controls).
type Control struct {
	// TUs is when the relay received it, microseconds on the receiver clock.
	TUs int64
	// SteerRad is the commanded road-wheel angle, positive left (ISO 8855).
	SteerRad float64
	// Throttle and Brake are pedal positions in [0, 1].
	Throttle, Brake float64
}

// Session is one drive of one operator.
type Session struct {
	Ticks    []Tick    // in display order
	Controls []Control // in time order, at a steady rate
	// Truth returns the vehicle's true pose at a receiver-clock time (the
	// vehicle and receiver clocks are taken as synchronised); false when
	// unknown.
	Truth func(tUs int64) (Pose, bool)
	// Path is the reference path the follower steers along.
	Path Path
}

// DefaultReactionMs is the delay from a picture going on screen to the
// operator's control response that the attribution assumes: a common
// figure for a prepared steering response (from memory, not a cited value).
const DefaultReactionMs = 250.0

// DefaultRecoveryMs is how long after a gap its consequences are counted
// (GapCosts): time for a corrective steering response to settle, a few
// times the time to cover a 10 m lookahead at urban speed (our choice; with
// the simulated operators of the tests, the ranking of cutoffs by gap cost
// then matches their ranking by the whole drive's error).
const DefaultRecoveryMs = 4000.0

// AttributionConfig configures Samples and GapCosts.
type AttributionConfig struct {
	// ReactionMs: a control sample at time t is attributed to the tick on
	// screen at t - ReactionMs. Zero means DefaultReactionMs.
	ReactionMs float64
	// RecoveryMs: a gap's cost runs until RecoveryMs after it ended (or the
	// next gap began). Zero means DefaultRecoveryMs.
	RecoveryMs float64
	// Follower is the reference path follower.
	Follower PurePursuit
}

// Samples turns sessions into fit samples: for each control sample, the
// deviation |steer - Follower.Steer(true pose)| attributed to the tick on
// screen ReactionMs earlier. Each gap (run of non-LIVE ticks) of each
// session is its own bootstrap unit. Control samples before the first tick
// or without a true pose are skipped.
func Samples(sessions []Session, cfg AttributionConfig) ([]Sample, error) {
	if cfg.ReactionMs == 0 {
		cfg.ReactionMs = DefaultReactionMs
	}
	reactUs := int64(cfg.ReactionMs * 1000)
	var out []Sample
	unit := 0
	for si, s := range sessions {
		if len(s.Ticks) == 0 || s.Truth == nil {
			return nil, fmt.Errorf("%w: session %d has no ticks or no truth", ErrTooLittleData, si)
		}
		units := make([]int, len(s.Ticks))
		inGap := false
		for i, t := range s.Ticks {
			if t.Shown == ShownLive {
				units[i], inGap = -1, false
				continue
			}
			if !inGap {
				unit++
				inGap = true
			}
			units[i] = unit
		}
		hint := 0
		for _, c := range s.Controls {
			at := c.TUs - reactUs
			k := sort.Search(len(s.Ticks), func(i int) bool { return s.Ticks[i].DisplayUs > at }) - 1
			if k < 0 {
				continue
			}
			p, ok := s.Truth(c.TUs)
			if !ok {
				continue
			}
			ref, err := cfg.Follower.Steer(s.Path, p, &hint)
			if err != nil {
				return nil, fmt.Errorf("session %d: %w", si, err)
			}
			t := s.Ticks[k]
			out = append(out, Sample{Unit: units[k], Shown: t.Shown, Confidence: t.Confidence, DeviationRad: math.Abs(c.SteerRad - ref)})
		}
	}
	return out, nil
}

// ReversalRates returns steering reversals per minute while each state was
// attributed (as in Samples), over all sessions: index by Shown. Each
// session's controls must come at a steady rate (the median interval is
// used as the period).
func ReversalRates(sessions []Session, reactionMs float64, rc ReversalConfig) ([4]float64, error) {
	if reactionMs == 0 {
		reactionMs = DefaultReactionMs
	}
	reactUs := int64(reactionMs * 1000)
	var count [4]int
	var dur [4]float64 // seconds
	for si, s := range sessions {
		if len(s.Controls) < 3 || len(s.Ticks) < 2 {
			return [4]float64{}, fmt.Errorf("%w: session %d has %d control samples and %d ticks", ErrTooLittleData, si, len(s.Controls), len(s.Ticks))
		}
		dts := make([]int64, len(s.Controls)-1)
		steer := make([]float64, len(s.Controls))
		for i, c := range s.Controls {
			steer[i] = c.SteerRad
			if i > 0 {
				dts[i-1] = c.TUs - s.Controls[i-1].TUs
			}
		}
		sort.Slice(dts, func(i, j int) bool { return dts[i] < dts[j] })
		r, err := ReversalCount(steer, s.Controls[0].TUs, dts[len(dts)/2], rc)
		if err != nil {
			return [4]float64{}, fmt.Errorf("session %d: %w", si, err)
		}
		stateAt := func(t int64) Shown {
			k := sort.Search(len(s.Ticks), func(i int) bool { return s.Ticks[i].DisplayUs > t-reactUs }) - 1
			if k < 0 {
				return ShownInvalid
			}
			return s.Ticks[k].Shown
		}
		for _, t := range r.TimesUs {
			count[stateAt(t)]++
		}
		for i := 1; i < len(s.Controls); i++ {
			dur[stateAt(s.Controls[i].TUs)] += float64(s.Controls[i].TUs-s.Controls[i-1].TUs) / 1e6
		}
	}
	var rate [4]float64
	for i := range rate {
		if dur[i] > 0 {
			rate[i] = float64(count[i]) / dur[i] * 60
		} else {
			rate[i] = math.NaN()
		}
	}
	return rate, nil
}

// GapCosts returns, for each gap (run of non-LIVE ticks) of each session,
// the operator's steering deviation from the reference follower on the true
// state, |steer - Follower.Steer(true pose)|, integrated over time (rad·s)
// from ReactionMs after the gap's first tick to ReactionMs + RecoveryMs
// after its end (the next LIVE tick), or to ReactionMs after the next gap
// began if that is sooner, with the cutoff in force at the gap's first
// tick. A gap still open at the end of a session is dropped.
func GapCosts(sessions []Session, cfg AttributionConfig) ([]GapCost, error) {
	if cfg.ReactionMs == 0 {
		cfg.ReactionMs = DefaultReactionMs
	}
	if cfg.RecoveryMs == 0 {
		cfg.RecoveryMs = DefaultRecoveryMs
	}
	reactUs, recUs := int64(cfg.ReactionMs*1000), int64(cfg.RecoveryMs*1000)
	var out []GapCost
	for si, s := range sessions {
		if s.Truth == nil {
			return nil, fmt.Errorf("%w: session %d has no truth", ErrTooLittleData, si)
		}
		type gap struct {
			start, end int64
			cutoff     float64
			ticks      int
		}
		var gaps []gap
		for i := 0; i < len(s.Ticks); i++ {
			if s.Ticks[i].Shown == ShownLive {
				continue
			}
			j := i
			for j < len(s.Ticks) && s.Ticks[j].Shown != ShownLive {
				j++
			}
			if j == len(s.Ticks) {
				break
			}
			gaps = append(gaps, gap{start: s.Ticks[i].DisplayUs + reactUs, end: s.Ticks[j].DisplayUs + reactUs + recUs, cutoff: s.Ticks[i].Cutoff, ticks: j - i})
			i = j
		}
		for g := range gaps {
			if g+1 < len(gaps) && gaps[g+1].start < gaps[g].end {
				gaps[g].end = gaps[g+1].start
			}
		}
		hint, ci := 0, 0
		for _, g := range gaps {
			for ci < len(s.Controls) && s.Controls[ci].TUs < g.start {
				ci++
			}
			cost, last, complete := 0.0, g.start, false
			for ; ci < len(s.Controls); ci++ {
				c := s.Controls[ci]
				if c.TUs >= g.end {
					complete = true
					break
				}
				p, ok := s.Truth(c.TUs)
				if !ok {
					continue
				}
				ref, err := cfg.Follower.Steer(s.Path, p, &hint)
				if err != nil {
					return nil, fmt.Errorf("session %d: %w", si, err)
				}
				cost += math.Abs(c.SteerRad-ref) * float64(c.TUs-last) / 1e6
				last = c.TUs
			}
			if complete {
				out = append(out, GapCost{Cutoff: g.cutoff, CostRadS: cost, WindowS: float64(g.end-g.start) / 1e6, Ticks: g.ticks})
			}
		}
	}
	return out, nil
}
