package relay

import "time"

// Spacing of the keyframe requests the pass-through gate wants
// (passThroughBackoff). Our choices:
//
//   - ptCalm, 1 s (30 frames at 30 fps): a run of forwarded frames that
//     lasted this long shows the link carries the vehicle's stream; its end
//     (one loss, say) asks for the next keyframe at once, as before.
//   - ptBackoffFactor, 16 keyframe retries (3.2 s at the default 200 ms):
//     while runs keep ending sooner, at most one request per that long, so
//     pass-through's keyframes take a small share of even a slow uplink,
//     and a relay on a link that got better transcodes at most that much
//     longer than it must.
const (
	ptCalm          = time.Second
	ptBackoffFactor = 16
)

// passThroughBackoff spaces the keyframe requests made only so that frames
// can pass through again (passthru.Gate.WantKeyframe while no run is open).
// Those requests are not needed to show the picture: while no run is open
// the relay transcodes every real frame. On an uplink that the sender's
// stream only just fits, each requested keyframe (usually several times a
// delta frame; not measured here) queued the frames behind it past their
// ticks, the ticks without a frame ended the run its keyframe opened, and
// the next request went out 200 ms later: measured with a browser sender on
// a 1 Mbit/s uplink with a 300 ms queue, 55 of the 64 requests one session
// logged were these, and its second 5 s were 28 % LIVE. So after a run
// shorter than ptCalm (or none) the interval doubles with every such
// request, up to ptBackoffFactor retry intervals, and a run that lasts
// ptCalm sets it back.
//
// The ingest's decoder, link-back and loss requests, which the picture
// does need, and a console viewer's wish while frames pass through, are
// not spaced by it. The zero value is ready; the ingest's mutex guards it.
type passThroughBackoff struct {
	interval          time.Duration // spacing of the next request; 0: the retry interval
	runStart, runLast time.Time     // first and latest forwarded frame of the latest run
	inRun             bool
}

// forwarded records the gate's decision on a frame: passed through at at
// (ok), or not (the run, if any, is over).
func (b *passThroughBackoff) forwarded(ok bool, at time.Time) {
	if !ok {
		b.inRun = false
		return
	}
	if !b.inRun {
		b.inRun, b.runStart = true, at
	}
	b.runLast = at
}

// calm reports whether the latest run lasted ptCalm.
func (b *passThroughBackoff) calm() bool { return b.runLast.Sub(b.runStart) >= ptCalm }

// due reports whether a pass-through keyframe request may go out at now,
// the latest request of any kind having gone out at last; urgent is the
// gate's KeyframeUrgent, honoured only after a calm run.
func (b *passThroughBackoff) due(now, last time.Time, retry time.Duration, urgent bool) bool {
	if b.calm() {
		return urgent || now.Sub(last) >= retry
	}
	return now.Sub(last) >= max(b.interval, retry)
}

// sent records that a pass-through keyframe request went out: the first
// after a calm run is followed by one retry interval; each after that
// doubles it. The calm run is used up.
func (b *passThroughBackoff) sent(retry time.Duration) {
	if b.calm() {
		b.interval = retry
		b.runStart = b.runLast
		return
	}
	b.interval = min(2*max(b.interval, retry), ptBackoffFactor*retry)
}
