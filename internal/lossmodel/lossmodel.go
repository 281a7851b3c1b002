// Package lossmodel simulates which video frames a link loses and how late
// the others arrive: the Gilbert-Elliott two-state loss model with a fixed
// delay and uniform jitter. The replay (stopgap/bench) applies it per
// frame, the simulated vehicle (stopgap/stream/simvehicle) per RTP packet.
// It needs no cgo.
package lossmodel

import (
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
)

// Model selects how the simulated link drops frames. The zero value
// is Invalid and is rejected by Config.Validate.
type Model int

const (
	// Invalid is the zero value; it is never valid.
	Invalid Model = iota
	// None drops nothing; delays and jitter still apply.
	None
	// GilbertElliott is the two-state Markov loss model of
	// Gilbert (1960) and Elliott (1963); see Config.
	GilbertElliott
	// Recorded names arrivals read from a recorded arrivals file rather
	// than simulated: a replay's summary carries it so that the report
	// says where its losses came from. Simulate refuses it.
	Recorded
)

var modelNames = [...]string{"invalid", "none", "gilbert-elliott", "recorded"}

// String returns "none", "gilbert-elliott", "recorded", or "invalid"
// (also for out-of-range values).
func (m Model) String() string {
	if m < 0 || int(m) >= len(modelNames) {
		return "invalid"
	}
	return modelNames[m]
}

// ParseModel is the inverse of String for valid models; it accepts
// any letter case.
func ParseModel(s string) (Model, error) {
	for i := None; int(i) < len(modelNames); i++ {
		if strings.EqualFold(s, modelNames[i]) {
			return i, nil
		}
	}
	return Invalid, fmt.Errorf("%w: unknown loss model %q; use %q, %q or %q",
		ErrConfig, s, None.String(), GilbertElliott.String(), Recorded.String())
}

// MarshalText implements encoding.TextMarshaler (used by JSON).
func (m Model) MarshalText() ([]byte, error) { return []byte(m.String()), nil }

// UnmarshalText implements encoding.TextUnmarshaler via ParseModel.
func (m *Model) UnmarshalText(b []byte) error {
	v, err := ParseModel(string(b))
	if err != nil {
		return err
	}
	*m = v
	return nil
}

// NeverArrivesUs is the arrival time of a lost frame. It is the largest
// int64, so "arrived by now" is simply ArrivalUs <= nowUs.
const NeverArrivesUs int64 = math.MaxInt64

// Config describes a simulated one-way video link: which frames are
// lost and how late the others arrive. The zero value is invalid (Model
// unset); Config{Model: None} is a perfect link.
//
// Gilbert-Elliott model. The link is in state Good or Bad for each frame
// and steps once per frame period T. A frame sent in Good is lost with
// probability k = GoodLossProb, in Bad with probability
// h = 1 - BadDeliverProb; the defaults k = 0, h = 1 give the simple
// Gilbert model, in which every frame in Bad is lost and every frame in
// Good arrives. The transition probabilities per frame are
//
//	p_BG = min(1, T / BurstMs)          (Bad -> Good)
//	pi_B = (LossRate - k) / (h - k)     (stationary share of Bad)
//	p_GB = p_BG * pi_B / (1 - pi_B)     (Good -> Bad)
//
// so the Bad state lasts on average 1/p_BG frames = BurstMs (a geometric
// number of frames; bursts shorter than one period become one-frame
// bursts), and the stationary loss rate pi_B*h + (1-pi_B)*k equals
// LossRate. With k = 0 and h = 1 this is p_GB = p_BG*LossRate/(1-LossRate).
// Because a Good run also lasts at least one frame, p_GB must not exceed
// 1; Transitions reports an error when LossRate is too high for BurstMs.
// The first frame's state is drawn from the stationary distribution, so
// there is no warm-up bias.
//
// Delay. Every delivered frame arrives at
// capture + ExtraDelayMs + U*JitterMs with U uniform on [0, 1), i.e. the
// jitter is uniform on [0, JitterMs) (mean JitterMs/2, standard deviation
// JitterMs/sqrt(12)). Uniform is chosen because it is bounded: no frame
// arrives before capture + ExtraDelayMs, and none later than
// capture + ExtraDelayMs + JitterMs. When JitterMs exceeds the frame
// period frames can arrive out of order; the simulator reports that as is.
//
// Randomness is math/rand/v2 PCG seeded from Seed, with separate streams
// for the loss pattern and for the jitter, so changing the delay settings
// never changes which frames are lost. Equal configs and inputs give
// equal outputs.
type Config struct {
	// Model selects the loss model.
	Model Model `json:"model"`
	// LossRate is the long-run fraction of frames lost, in [0, 1).
	// Must be 0 for None.
	LossRate float64 `json:"loss_rate"`
	// BurstMs is the mean duration of the Bad state in milliseconds
	// (> 0 for GilbertElliott; ignored by None).
	BurstMs float64 `json:"burst_ms"`
	// GoodLossProb is k, the loss probability of a frame sent in the Good
	// state, in [0, LossRate]. Zero (the default) for the simple Gilbert
	// model.
	GoodLossProb float64 `json:"good_loss_prob"`
	// BadDeliverProb is 1-h, the probability that a frame sent in the Bad
	// state still arrives, in [0, 1-LossRate). Zero (the default) for the
	// simple Gilbert model.
	BadDeliverProb float64 `json:"bad_deliver_prob"`
	// FramePeriodMs is the period T the chain steps with. Zero means the
	// median interval between the capture times given to Simulate.
	FramePeriodMs float64 `json:"frame_period_ms"`
	// ExtraDelayMs is the fixed one-way delay added to every delivered
	// frame, >= 0.
	ExtraDelayMs float64 `json:"extra_delay_ms"`
	// JitterMs is the width of the uniform extra delay, >= 0.
	JitterMs float64 `json:"jitter_ms"`
	// Seed selects the pseudo-random sequence.
	Seed uint64 `json:"seed"`
}

// maxDurationMs bounds the period and delay settings (one hour) so that
// their microsecond values can never overflow int64 arithmetic.
const maxDurationMs = 3_600_000

// Second PCG words of the two random streams (ASCII "loss", "jitr").
const (
	lossStream   = 0x6c6f7373
	jitterStream = 0x6a697472
)

// Validate checks every field and returns a *ParamError (wrapping
// ErrConfig) for the first one out of range.
func (c Config) Validate() error {
	bad := func(field string, v float64, reason string) error {
		return &ParamError{Field: field, Value: v, Reason: reason}
	}
	for _, f := range []struct {
		name string
		v    float64
	}{
		{"LossRate", c.LossRate}, {"BurstMs", c.BurstMs}, {"GoodLossProb", c.GoodLossProb},
		{"BadDeliverProb", c.BadDeliverProb}, {"FramePeriodMs", c.FramePeriodMs},
		{"ExtraDelayMs", c.ExtraDelayMs}, {"JitterMs", c.JitterMs},
	} {
		if math.IsNaN(f.v) || math.IsInf(f.v, 0) {
			return bad(f.name, f.v, "must be a finite number")
		}
	}
	switch {
	case c.FramePeriodMs < 0 || c.FramePeriodMs > maxDurationMs:
		return bad("FramePeriodMs", c.FramePeriodMs, "must be in [0, 3600000] (0 = from the capture times)")
	case c.ExtraDelayMs < 0 || c.ExtraDelayMs > maxDurationMs:
		return bad("ExtraDelayMs", c.ExtraDelayMs, "must be in [0, 3600000]")
	case c.JitterMs < 0 || c.JitterMs > maxDurationMs:
		return bad("JitterMs", c.JitterMs, "must be in [0, 3600000]")
	}
	switch c.Model {
	case None:
		if c.LossRate != 0 {
			return bad("LossRate", c.LossRate, `must be 0 with model "none"; choose "gilbert-elliott" to drop frames`)
		}
		return nil
	case GilbertElliott:
	case Recorded:
		return bad("Model", float64(c.Model), `"recorded" arrivals are read from an arrivals file, not simulated; choose "none" or "gilbert-elliott"`)
	default:
		return bad("Model", float64(c.Model), `unset or unknown; choose "none" or "gilbert-elliott"`)
	}
	switch {
	case c.LossRate < 0 || c.LossRate >= 1:
		return bad("LossRate", c.LossRate, "must be in [0, 1)")
	case c.BurstMs <= 0:
		return bad("BurstMs", c.BurstMs, "must be > 0 (mean loss burst duration in ms)")
	case c.GoodLossProb < 0 || c.GoodLossProb > c.LossRate:
		return bad("GoodLossProb", c.GoodLossProb, "must be in [0, LossRate]")
	case c.BadDeliverProb < 0 || 1-c.BadDeliverProb <= c.LossRate:
		return bad("BadDeliverProb", c.BadDeliverProb, "must be in [0, 1-LossRate)")
	}
	return nil
}

// Transitions returns the per-frame transition probabilities Good->Bad
// and Bad->Good of the Gilbert-Elliott chain for the frame period
// periodUs (see Config for the formulas). For None both are
// 0. It fails if the config is invalid, periodUs <= 0, or LossRate is too
// high for BurstMs at this period (p_GB > 1).
func (c Config) Transitions(periodUs int64) (pGoodBad, pBadGood float64, err error) {
	if err := c.Validate(); err != nil {
		return 0, 0, err
	}
	if c.Model == None {
		return 0, 0, nil
	}
	if periodUs <= 0 {
		return 0, 0, fmt.Errorf("%w: frame period %d us must be > 0", ErrConfig, periodUs)
	}
	k, h := c.GoodLossProb, 1-c.BadDeliverProb
	piB := (c.LossRate - k) / (h - k)
	pBadGood = math.Min(1, float64(periodUs)/(1000*c.BurstMs))
	pGoodBad = pBadGood * piB / (1 - piB)
	if pGoodBad > 1 {
		maxRate := k + (h-k)/(1+pBadGood)
		return 0, 0, &ParamError{Field: "LossRate", Value: c.LossRate,
			Reason: fmt.Sprintf("too high for BurstMs %g at a %.3g ms frame period (at most %.4g); raise BurstMs or lower LossRate",
				c.BurstMs, float64(periodUs)/1000, maxRate)}
	}
	return pGoodBad, pBadGood, nil
}

// Arrivals is the result of Config.Simulate.
type Arrivals struct {
	// ArrivalUs holds one arrival time per frame on the capture clock, or
	// NeverArrivesUs for a lost frame. It aliases the dst slice passed to
	// Simulate.
	ArrivalUs []int64
	// BaseDelayUs is the fixed one-way delay every delivered frame has at
	// least (ExtraDelayMs in microseconds, rounded).
	BaseDelayUs int64
	// PeriodUs is the frame period the chain stepped with.
	PeriodUs int64
	// PGoodBad and PBadGood are the per-frame transition probabilities.
	PGoodBad, PBadGood float64
	// Lost counts frames with ArrivalUs == NeverArrivesUs.
	Lost int
}

// Simulate decides for each capture time (strictly increasing, in
// microseconds) whether the frame arrives and when. The arrival times are
// written into dst (reused if its capacity suffices, grown otherwise) and
// returned in Arrivals.ArrivalUs; the caller owns dst. Simulate does not
// modify captureUs.
func (c Config) Simulate(dst []int64, captureUs []int64) (Arrivals, error) {
	if err := c.Validate(); err != nil {
		return Arrivals{}, err
	}
	for i := 1; i < len(captureUs); i++ {
		if captureUs[i] <= captureUs[i-1] {
			return Arrivals{}, fmt.Errorf("%w: frame %d at %d us is not after frame %d at %d us; sort the frames and drop duplicates",
				ErrCaptureTimes, i, captureUs[i], i-1, captureUs[i-1])
		}
	}
	out := Arrivals{BaseDelayUs: int64(math.Round(c.ExtraDelayMs * 1000))}
	if n := len(captureUs); n > 0 && captureUs[n-1] > NeverArrivesUs-2*maxDurationMs*1000 {
		return Arrivals{}, fmt.Errorf("%w: frame %d at %d us is too close to the int64 limit to add delays",
			ErrCaptureTimes, n-1, captureUs[n-1])
	}
	out.PeriodUs = int64(math.Round(c.FramePeriodMs * 1000))
	if out.PeriodUs == 0 && len(captureUs) >= 2 {
		out.PeriodUs = medianInterval(captureUs)
	}
	if c.Model == GilbertElliott && len(captureUs) >= 2 {
		var err error
		out.PGoodBad, out.PBadGood, err = c.Transitions(out.PeriodUs)
		if err != nil {
			return Arrivals{}, err
		}
	}
	dst = slices.Grow(dst[:0], len(captureUs))[:len(captureUs)]
	out.ArrivalUs = dst

	lossRng := rand.New(rand.NewPCG(c.Seed, lossStream))
	jitRng := rand.New(rand.NewPCG(c.Seed, jitterStream))
	jitterUs := c.JitterMs * 1000

	k, h := c.GoodLossProb, 1-c.BadDeliverProb
	var piB float64
	if c.Model == GilbertElliott {
		piB = (c.LossRate - k) / (h - k)
	}
	bad := false
	for i, t := range captureUs {
		// Both streams are drawn for every frame so that frame i always
		// uses the same random numbers whatever happened before.
		uState, uLoss := lossRng.Float64(), lossRng.Float64()
		uJit := jitRng.Float64()
		lost := false
		if c.Model == GilbertElliott {
			switch {
			case i == 0:
				bad = uState < piB
			case bad:
				bad = uState >= out.PBadGood
			default:
				bad = uState < out.PGoodBad
			}
			p := k
			if bad {
				p = h
			}
			lost = uLoss < p
		}
		if lost {
			dst[i] = NeverArrivesUs
			out.Lost++
			continue
		}
		dst[i] = t + out.BaseDelayUs + int64(math.Floor(uJit*jitterUs))
	}
	return out, nil
}

// medianInterval returns the median of the positive intervals between
// consecutive times (upper median for an even count). times must be
// strictly increasing with at least two entries.
func medianInterval(times []int64) int64 {
	d := make([]int64, len(times)-1)
	for i := range d {
		d[i] = times[i+1] - times[i]
	}
	slices.Sort(d)
	return d[len(d)/2]
}
