package relay

// Which display tick a decoded frame is shown on.
//
// The display grid (stream/cadence) maps a frame to the tick nearest its
// capture time. A sender's capture times jitter: a browser's camera on a
// busy host stamps a frame up to two thirds of a period late, so the frame
// lands on the next tick, the tick it was meant for gets none, and the frame
// after it lands on the same tick as this one. Taken literally, that second
// frame was late (its tick was already shown) and the display skipped a
// tick it had a newer real frame for.
//
// The rule: a frame is shown at once, LIVE, on its own tick if that is
// still open. If its own tick was already handled (shown or filled) but the
// tick right after it is open, and the frame is newer than everything the
// display handled (its capture time is after the time of the last tick
// shown or filled), it is shown on that next tick. That tick's deadline has
// not passed (ticks whose deadline passed before the frame was ready are
// filled first), so the frame is in time there. Any other frame is only
// held for later gaps, as before: one further back would make the display
// wait more than one period for frames, and one not newer than what was
// handled would take the display back in time.
//
// The same jitter the other way: a frame stamped late lands on the tick
// after the open one, and the tick it was meant for would be filled at once
// (frames arrive in order, so none can come for it). If its nearest tick
// is exactly one after the open tick and it was captured before its nearest
// tick's time (its own tick's grid time is later than the frame), it is
// shown on the open tick instead, and the frame after it finds its own tick
// free. When the sender really skipped a frame, this moves the empty tick
// one later; it never adds one.
//
// What this does to the display: real frames are still shown the moment
// they are decoded. After such a frame each following frame, captured one
// period later, again finds its own tick taken and goes one tick on: the
// display runs one tick behind the nearest-tick mapping, so a frame may
// then be up to one period later than L + allowance and still be LIVE, and
// a missing frame is declared (and the gap filled, PREDICTED or STALE) up
// to one period later. It ends by itself when the sender leaves a period
// without a frame, and never grows beyond one tick: a frame two ticks
// behind is held (measured with a browser's camera on a loaded host, two
// frames stamped within one period pushed it to two before that limit).
//
// The recording stores each shown frame on the row of the tick it was
// shown on, with its real capture and arrival times and that tick's
// deadline, so the offline replay of a recording makes the same decision.

// slotFor returns the tick a frame whose nearest tick is k is shown on and
// whether it is shown: next is the lowest tick not handled yet (its deadline
// has not passed), captureUs the frame's capture time, tickUs tick k's grid
// time and handledUs the time of tick next-1 as handled (the capture time of
// the frame shown on it, or its grid time if it was filled); started is
// false before any tick was handled.
func slotFor(k, next int, captureUs, tickUs, handledUs int64, started bool) (tick int, show bool) {
	if k == next+1 && started && captureUs < tickUs {
		return next, true
	}
	if k >= next {
		return k, true
	}
	if k+1 < next || (started && captureUs <= handledUs) {
		return k, false
	}
	return next, true
}
