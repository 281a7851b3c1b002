package predictor

// StaleReason says why a tick whose real frame was missing was not
// predicted. The zero value, StaleReasonNone, means the tick was not STALE
// for a reason of the policy.
type StaleReason int

const (
	// StaleReasonNone: not STALE, or no reason known.
	StaleReasonNone StaleReason = iota
	// StaleNoPicture: no real frame has arrived yet, so there is nothing
	// to move.
	StaleNoPicture
	// StaleNoMotion: the motion since the held frame could not be
	// estimated (no usable telemetry).
	StaleNoMotion
	// StaleAgeOverCap: the picture age is over the policy's cap
	// (Policy.MaxAgeMs), whatever the confidence.
	StaleAgeOverCap
	// StaleLowConfidence: the confidence is under the cutoff
	// (Policy.CutoffConfidence).
	StaleLowConfidence
)

var staleReasonNames = [...]string{"", "no-picture", "no-motion", "age-over-cap", "low-confidence"}

// String returns the reason's wire word ("no-picture", "no-motion",
// "age-over-cap", "low-confidence"), "" for StaleReasonNone and for
// out-of-range values. The console and the relay's per-tick table use
// these words.
func (r StaleReason) String() string {
	if r < 0 || int(r) >= len(staleReasonNames) {
		return ""
	}
	return staleReasonNames[r]
}

// StaleReasons returns every reason but StaleReasonNone, in order.
func StaleReasons() []StaleReason {
	return []StaleReason{StaleNoPicture, StaleNoMotion, StaleAgeOverCap, StaleLowConfidence}
}

// WhyStale returns why policy p makes tick t STALE, checked in the order a reader
// would ask: no picture held (havePicture false), no motion (t.MotionErr),
// picture age over the cap (or not a number), confidence under the cutoff
// (or not a number). It returns StaleReasonNone when t.State is not
// StateStale (or StateNoPicture, which is always StaleNoPicture) or none applies (MethodHold makes every gap STALE).
func WhyStale(p Policy, t Tick, havePicture bool) StaleReason {
	switch {
	case t.State == StateNoPicture:
		return StaleNoPicture
	case t.State != StateStale:
		return StaleReasonNone
	case !havePicture:
		return StaleNoPicture
	case t.MotionErr != nil:
		return StaleNoMotion
	case !(t.AgeMs >= 0 && t.AgeMs <= p.MaxAgeMs):
		return StaleAgeOverCap
	case !(t.Confidence >= p.CutoffConfidence):
		return StaleLowConfidence
	}
	return StaleReasonNone
}
