// Package cadence locks the display clock to the sender's capture cadence.
//
// A [Grid] estimates the sender's capture grid t_k = a + (k - k_a) P from the
// capture times of the frames it receives (RTP timestamps mapped to
// microseconds), and maps each frame to its display tick k. Both the live
// relay and the offline replay (bench.Schedule) place their ticks on a Grid,
// so a tick's deadline, t_k + latency + allowance, follows the same rule in
// both.
//
// The rule, in the order it is applied to each frame newer than the last one
// observed (older frames are mapped but change nothing):
//
//  1. Rate change: when the last RateFrames intervals between frames agree
//     within RateAgree of their mean and that mean differs from P by more
//     than RateChange, the grid re-locks: P becomes that mean and the frame
//     anchors the grid. So after a sender lowers (or raises) its frame rate,
//     the display ticks at the new rate from the RateFrames-th frame on:
//     each tick gets a frame and stays LIVE, with no LIVE/PREDICTED
//     alternation. While the change is being confirmed, a slower sender
//     leaves some ticks without a frame (PREDICTED or STALE, labelled as
//     ever) and a faster one maps two frames to one tick (the later one is
//     held for later gaps, not shown). Lost frames and outages do not
//     trigger it: they make single long intervals, not RateFrames equal ones.
//  2. Phase step: when two frames in a row lie more than a quarter period
//     off the grid on the same side (a sender that slipped), the grid
//     re-anchors on the frame.
//  3. Otherwise a second-order phase-locked loop pulls the grid towards the
//     frame: with residual e = c - t_k, the anchor moves by PhaseGain*e and
//     the period by PeriodGain*e per tick. Senders that stamp capture times
//     in whole milliseconds (steps of 33 and 34 ms at 30 fps) leave
//     residuals of at most about 0.7 ms, which the loop averages out; a
//     clock that runs slow or fast is followed within about 30 frames.
//
// A Grid is not safe for concurrent use.
package cadence

import (
	"errors"
	"fmt"
	"math"
)

// Parameters of the rule (design choices of this project, see the package
// documentation).
const (
	// PhaseGain is the share of a frame's residual added to the grid's
	// phase.
	PhaseGain = 1.0 / 16
	// PeriodGain is the share of a frame's residual (per tick) added to the
	// period. With PhaseGain it gives the loop's characteristic polynomial
	// z^2 - (2 - PhaseGain - PeriodGain) z + (1 - PhaseGain), whose roots
	// are complex with modulus sqrt(15/16) = 0.968: stable, settling in about
	// 30 frames. Smaller gains follow a drifting clock more slowly; larger
	// ones let a browser's capture jitter (several ms on a loaded host) move
	// the period by a percent.
	PeriodGain = 1.0 / 256
	// RateFrames is how many consecutive equal intervals confirm a new
	// frame rate.
	RateFrames = 3
	// RateAgree is how close (relative to their mean) those intervals
	// must be.
	RateAgree = 0.10
	// RateChange is the least relative difference between their mean and
	// the current period that counts as a new rate.
	RateChange = 0.20
	// StepShare is the residual, as a share of the period, beyond which two
	// frames in a row re-anchor the grid.
	StepShare = 0.25
)

// ErrBadPeriod is returned by New for a nominal period that is not a
// finite positive number of microseconds.
var ErrBadPeriod = errors.New("cadence: nominal period must be a finite number of microseconds > 0; check the frame rate")

// Stats are a Grid's counters.
type Stats struct {
	// Frames counts frames observed; Updates those that moved the grid
	// (newer than every frame before).
	Frames, Updates uint64
	// RateChanges counts re-locks to a new frame rate; PhaseSteps
	// re-anchorings after a slip.
	RateChanges, PhaseSteps uint64
}

// Grid is the display grid. Create it with New.
type Grid struct {
	nominalUs float64
	minUs     float64
	maxUs     float64

	started  bool
	anchorK  int
	anchorUs float64
	periodUs float64
	lastK    int
	lastUs   int64

	intervals [RateFrames]float64
	nInt      int
	prevOff   float64 // residual of the previous frame, as a share of the period

	stats Stats
}

// New returns a Grid whose period starts at nominalPeriodUs (1e6 / the
// nominal frame rate). The period may move to between a quarter and eight
// times the nominal one.
func New(nominalPeriodUs float64) (*Grid, error) {
	if !(nominalPeriodUs > 0) || math.IsInf(nominalPeriodUs, 0) {
		return nil, fmt.Errorf("%w (got %v)", ErrBadPeriod, nominalPeriodUs)
	}
	return &Grid{nominalUs: nominalPeriodUs, periodUs: nominalPeriodUs,
		minUs: nominalPeriodUs / 4, maxUs: nominalPeriodUs * 8}, nil
}

// Started reports whether a frame was observed (before that CaptureUs and
// TickOf are relative to time 0).
func (g *Grid) Started() bool { return g.started }

// PeriodUs returns the current tick period in microseconds.
func (g *Grid) PeriodUs() float64 { return g.periodUs }

// Stats returns the counters.
func (g *Grid) Stats() Stats { return g.stats }

// CaptureUs returns tick k's capture time on the current grid, µs.
func (g *Grid) CaptureUs(k int) int64 {
	return int64(math.Round(g.anchorUs + float64(k-g.anchorK)*g.periodUs))
}

// TickOf returns the tick nearest to captureUs on the current grid, without
// changing it.
func (g *Grid) TickOf(captureUs int64) int {
	return g.anchorK + int(math.Round((float64(captureUs)-g.anchorUs)/g.periodUs))
}

// Shift moves the grid by dUs microseconds (the capture timeline moved,
// e.g. onto the sender's clock).
func (g *Grid) Shift(dUs int64) {
	g.anchorUs += float64(dUs)
	g.lastUs += dUs
}

// Observe maps a frame captured at captureUs to its tick and updates the
// grid by the rule of the package documentation. The first frame is tick 0.
// Frames must be observed in the order they became available; a frame not
// newer than the newest observed one is mapped with TickOf and changes
// nothing.
func (g *Grid) Observe(captureUs int64) int {
	g.stats.Frames++
	if !g.started {
		g.started = true
		g.anchorK, g.anchorUs, g.lastK, g.lastUs = 0, float64(captureUs), 0, captureUs
		return 0
	}
	if captureUs <= g.lastUs {
		return g.TickOf(captureUs)
	}
	g.stats.Updates++
	interval := float64(captureUs - g.lastUs)
	copy(g.intervals[:], g.intervals[1:])
	g.intervals[RateFrames-1] = interval
	g.nInt = min(g.nInt+1, RateFrames)
	if m, ok := g.newRate(); ok {
		steps := max(1, int(math.Round(interval/m)))
		g.periodUs = m
		g.relock(g.lastK+steps, captureUs)
		g.stats.RateChanges++
		return g.lastK
	}
	k := g.TickOf(captureUs)
	if k <= g.lastK {
		// Two frames for one tick (a faster sender not yet confirmed):
		// the later one is mapped there and does not move the grid.
		g.lastUs = captureUs
		return k
	}
	e := float64(captureUs) - (g.anchorUs + float64(k-g.anchorK)*g.periodUs)
	off := e / g.periodUs
	if math.Abs(off) > StepShare && math.Abs(g.prevOff) > StepShare && (off > 0) == (g.prevOff > 0) {
		g.relock(k, captureUs)
		g.stats.PhaseSteps++
		return k
	}
	g.prevOff = off
	steps := float64(k - g.lastK)
	g.anchorUs += float64(k-g.anchorK)*g.periodUs + PhaseGain*e
	g.anchorK = k
	g.periodUs = min(max(g.periodUs+PeriodGain*e/steps, g.minUs), g.maxUs)
	g.lastK, g.lastUs = k, captureUs
	return k
}

// relock anchors the grid on the frame at captureUs as tick k.
func (g *Grid) relock(k int, captureUs int64) {
	g.anchorK, g.anchorUs = k, float64(captureUs)
	g.lastK, g.lastUs = k, captureUs
	g.prevOff = 0
	g.nInt = 0
}

// newRate reports the mean of the last RateFrames intervals if they confirm
// a new frame rate.
func (g *Grid) newRate() (float64, bool) {
	if g.nInt < RateFrames {
		return 0, false
	}
	var sum float64
	for _, v := range g.intervals {
		sum += v
	}
	m := sum / RateFrames
	for _, v := range g.intervals {
		if math.Abs(v-m) > RateAgree*m {
			return 0, false
		}
	}
	if math.Abs(m-g.periodUs) <= RateChange*g.periodUs || m < g.minUs || m > g.maxUs {
		return 0, false
	}
	return m, true
}
