package console

import "math"

// Reasons the page gives (body data-reason, window.__stateLog) for showing
// STATE UNKNOWN instead of the relay's state. The page's list (REASONS in
// web/console.js) is checked against UnknownReasons by a test.
const (
	// ReasonConnecting: no connection to the relay yet.
	ReasonConnecting = "connecting"
	// ReasonNoStatus: connected, no status message yet.
	ReasonNoStatus = "no-status"
	// ReasonMetaSilent: no status message for more than MetaSilenceMs,
	// whatever the last one said.
	ReasonMetaSilent = "meta-silent"
	// ReasonVideoFrozen: status messages come but the picture has not
	// changed for more than VideoFreezeMs.
	ReasonVideoFrozen = "video-frozen"
	// ReasonStatusLate: the last status said LIVE and no newer one came
	// within StatusLateAfterMs of it. LIVE claims the picture is current;
	// the claim expires on the page's own clock, so a picture frozen by a
	// cut link does not pass as live while the relay is still deciding
	// (or is too busy to decide) the tick after it.
	ReasonStatusLate = "status-late"
	// ReasonBadState: the relay sent a state the page does not know.
	ReasonBadState = "bad-state"
)

// UnknownReasons lists every reason, in the order of the page's REASONS.
var UnknownReasons = []string{ReasonConnecting, ReasonNoStatus, ReasonMetaSilent, ReasonVideoFrozen,
	ReasonStatusLate, ReasonBadState}

// IsStall reports whether reason is one of a stall: status or pictures that
// stopped coming on time (meta-silent, video-frozen, status-late). A loaded
// machine or a cut link causes them, and the page rightly shows STATE
// UNKNOWN; tests that check the order of the relay's states count them
// apart (consoletest.WithoutStalls).
func IsStall(reason string) bool {
	return reason == ReasonMetaSilent || reason == ReasonVideoFrozen || reason == ReasonStatusLate
}

// The page's watchdog limits, milliseconds (META_SILENCE_MS and
// VIDEO_FREEZE_MS in web/console.js, checked by a test).
const (
	// MetaSilenceMs: no status message for longer than this is
	// ReasonMetaSilent, whatever the last state was.
	MetaSilenceMs = 500
	// VideoFreezeMs: no new picture for longer than this is
	// ReasonVideoFrozen.
	VideoFreezeMs = 500
)

// The status-late rule (ReasonStatusLate): a LIVE status stays good for
// StatusLateIntervals tick periods (Meta.PeriodMs), but never less than
// StatusLateMinMs nor more than StatusLateMaxMs. These are our choices:
//
//   - 3 periods: the relay sends a status per tick, and a missing frame's
//     tick is decided one period plus the display clock's jitter allowance
//     (20 ms by default) after the frame before it, so a status gap of 2
//     periods is ordinary (a lost frame, or a lost status message on the
//     unreliable channel) and must not flicker the banner; 3 periods is
//     also the first term of the W3C WebRTC statistics' freeze definition,
//     max(3 x mean frame time, mean + 150 ms), so the page says STATE
//     UNKNOWN no later than that definition counts a freeze.
//   - at least 100 ms (3 periods of a 30 fps camera): the jitter of the
//     relay-to-console link and the browser's main-thread hold-ups (tens of
//     ms) do not shrink with the frame rate, so a 60 fps camera does not get
//     a tighter limit; 100 ms is still under the smallest W3C freeze gap
//     (150 ms plus a period).
//   - at most 300 ms (3 periods of a 10 fps camera, where it equals the
//     W3C freeze gap), below MetaSilenceMs so this check is never the
//     weaker one: a slower camera, or a wrong period in the message, cannot
//     make a frozen picture pass as live for longer. With a camera slower
//     than about 7 fps a pause of 2 periods already shows STATE UNKNOWN,
//     which such a picture deserves.
//
// PREDICTED and STALE do not expire this way: they already tell the
// operator that the picture is not live, so a late status after them
// cannot make a frozen picture look current; MetaSilenceMs and
// VideoFreezeMs still cover them. NO_PICTURE and NOT_SHOWN claim nothing
// about a current picture either.
const (
	StatusLateIntervals = 3
	StatusLateMinMs     = 100
	StatusLateMaxMs     = 300
)

// StatusLateAfterMs returns how long after a LIVE status, on the page's
// clock, the page shows STATE UNKNOWN (ReasonStatusLate) if no newer
// status has come: StatusLateIntervals times periodMs, clamped to
// [StatusLateMinMs, StatusLateMaxMs]. A period that is not a finite number
// above 0 (not given) gives StatusLateMinMs, the strictest limit. The page
// computes the same (a test compares them).
func StatusLateAfterMs(periodMs float64) float64 {
	if !(periodMs > 0) || math.IsInf(periodMs, 0) {
		return StatusLateMinMs
	}
	return min(max(StatusLateIntervals*periodMs, StatusLateMinMs), StatusLateMaxMs)
}
