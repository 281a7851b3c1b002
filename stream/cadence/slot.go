package cadence

// The capture-jitter rule: which tick a frame is shown on.
//
// The grid maps a frame to the tick nearest its capture time. A sender's
// capture times jitter: a browser's camera on a busy host stamps a frame up
// to two thirds of a period late, so the frame lands on the next tick, the
// tick it was meant for gets none, and the frame after it lands on the same
// tick as this one. Taken literally, that second frame is late (its tick
// was already shown) and the display skips a tick it has a newer real
// frame for.
//
// The rule, applied by Clock to every frame after the ticks whose deadline
// passed before the frame was ready have been filled:
//
//   - A frame whose nearest tick is still open is shown there, LIVE.
//   - A frame whose nearest tick is the one right after the open tick, and
//     that was captured more than JitterMarginUs before its nearest tick's
//     grid time, is shown on
//     the open tick instead (it was stamped late; it is in time there,
//     since the open tick's deadline has not passed). The frame after it
//     then finds its own tick free. When the sender really skipped a frame
//     this moves the empty tick one later; it never adds one.
//   - A frame whose nearest tick was already decided (shown or filled),
//     while the tick right after it is open, is shown on that next tick if
//     it is newer than everything the display decided: its capture time is
//     more than JitterMarginUs after the time of the last tick decided (the
//     capture time of the frame shown on it, or its grid time if it was
//     filled).
//   - After an outage: a frame whose nearest tick was already decided is
//     shown on the open tick if the picture the display held while it
//     decided the tick before (the newest frame handed in so far) had
//     passed the policy's age cap there, so that tick and every one since
//     the cap was reached were STALE, the frame is newer than that
//     picture, and it is at most ResumeMaxLateUs later than its own tick's
//     deadline. A real picture that comes late beats a stale one: after a
//     link outage the sender's first frame (a keyframe, large and paced
//     out over several periods) is usually ready two or three ticks after
//     its own, and holding it cost a period or two before the first LIVE
//     tick (measured with a browser's WebRTC stack as the sender: the
//     first LIVE tick 158-162 ms after the link returned in three runs of
//     four). The frames after it that are still late are held as usual;
//     the next one whose nearest tick is the one just decided moves on
//     (the rule above), so the display runs one tick behind until the
//     sender leaves a period without a frame.
//   - Any other frame is late: held for later gaps, not shown. One further
//     back would make the display wait more than one period for frames;
//     one not newer than what was decided would take the display back in
//     time.
//
// What this does to the display: real frames are still shown the moment
// they are ready. After a frame moved on, each following frame, captured
// one period later, again finds its own tick taken and goes one tick on:
// the display runs one tick behind the nearest-tick mapping, so a frame may
// then be up to one period later than L + allowance and still be LIVE, and
// a missing frame is declared (and its gap filled, PREDICTED or STALE) up
// to one period later. It ends by itself when the sender leaves a period
// without a frame, and never grows beyond one tick: a frame two ticks
// behind is held (measured with a browser's camera on a loaded host, two
// frames stamped within one period pushed it to two before that limit).
//
// The rule depends only on what the Clock decided so far, so the live relay
// and the replay apply it alike: a relay's recording keeps each frame on
// the row of the tick it was shown on, where its replay (FrameAt) finds it
// on the open tick and shows it unmoved; a modelled link's frame k starts
// from tick k and moves as a live frame would.

// ResumeMaxLateUs bounds how much later than its own tick's deadline a frame
// shown by the outage rule may be ready: 100 ms, about three periods at
// 30 fps, the time a browser's sender took to pace out its first keyframe
// after an outage in our measurements (40-70 ms) with room to spare. A
// frame later than that is held as before: a display loop far behind its
// frames (a starved CPU) must not show pictures that old as LIVE. A design
// choice of this project.
const ResumeMaxLateUs = 100_000

// JitterMarginUs is how far, µs, a frame's capture time must lie beyond a
// tick's time for the capture-jitter rule to move the frame. It is larger
// than the few microseconds by which two grids built from the same frames
// can differ (a live session and the replay of its recording on its own
// schedule, or a simulated drive whose capture times sit on the grid), so
// a frame captured on its grid time and delayed on the network is held, as
// before, rather than moved or not by a rounding. It is much smaller than
// the residual of a sender that stamps capture times in whole milliseconds
// (up to about 0.7 ms, see the package documentation): a 1 ms margin held
// such frames and cost a browser sender on a clean link 13 of 632 ticks in
// one measured run, against none without a margin. A design choice of this
// project.
const JitterMarginUs = 10

// slotFor returns the tick a frame whose nearest tick is k is shown on, and
// whether it is shown at all. next is the lowest tick not decided yet (its
// deadline has not passed), captureUs the frame's capture time, tickUs tick
// k's grid time and decidedUs the time of tick next-1 as decided (the
// capture time of the frame shown on it, or its grid time if it was
// filled); started is false before any tick was decided. resume says the
// picture held at tick next-1 was past the age cap and this frame is newer
// than it (the outage rule).
func slotFor(k, next int, captureUs, tickUs, decidedUs int64, started, resume bool) (tick int, show bool) {
	if k < next && started && resume {
		return next, true
	}
	if k == next+1 && started && captureUs < tickUs-JitterMarginUs {
		return next, true
	}
	if k >= next {
		return k, true
	}
	if k+1 < next || (started && captureUs <= decidedUs+JitterMarginUs) {
		return k, false
	}
	return next, true
}
