package recording

import (
	"fmt"
	"sort"
	"strings"
)

// SessionFrame is one frame of a live session's timing, as a relay's
// arrivals file (and frames.csv) describe it: the capture time on the
// vehicle clock, whether it arrived, and the RTP timestamp it arrived with.
type SessionFrame struct {
	Index        int   // row index in the session (frames.csv index)
	CaptureUs    int64 // capture time on the vehicle clock, microseconds
	Arrived      bool  // the frame reached the receiver
	RTPTimestamp uint32
	HasRTP       bool // RTPTimestamp is known (only for frames that arrived)
}

// SessionFrames joins a session's arrivals with its frames: a row's capture
// time is its t_capture_us column if the arrivals file has one, else the
// capture time of frame Index in frames (the session's frames.csv; nil if
// unknown). Rows come out in index order. It fails with [ErrPairing] if a
// row has no capture time either way.
func SessionFrames(arrivals []Arrival, frames []Frame) ([]SessionFrame, error) {
	out := make([]SessionFrame, 0, len(arrivals))
	for _, a := range arrivals {
		s := SessionFrame{Index: a.Index, Arrived: a.Arrived, RTPTimestamp: a.RTPTimestamp, HasRTP: a.HasRTP}
		switch {
		case a.HasCapture:
			s.CaptureUs = a.CaptureUs
		case a.Index < len(frames):
			s.CaptureUs = frames[a.Index].CaptureUs
		default:
			return nil, fmt.Errorf("recording: arrival of frame %d has no t_capture_us and no frames.csv gives it one; "+
				"keep the arrivals file beside its session's frames.csv: %w", a.Index, ErrPairing)
		}
		out = append(out, s)
	}
	sort.Slice(out, func(i, j int) bool { return out[i].Index < out[j].Index })
	for i := 1; i < len(out); i++ {
		if out[i].CaptureUs <= out[i-1].CaptureUs {
			return nil, fmt.Errorf("recording: session frame %d captured at %d us, not after frame %d at %d us: %w",
				out[i].Index, out[i].CaptureUs, out[i-1].Index, out[i-1].CaptureUs, ErrPairing)
		}
	}
	return out, nil
}

// PairHow says how one session frame was paired with an onboard frame, or
// why it was not. The zero value is invalid.
type PairHow int

// Outcomes of [PairFrames] for one session frame.
const (
	PairInvalid PairHow = iota
	// PairedRTP: both sides recorded the same RTP timestamp.
	PairedRTP
	// PairedTime: the capture times agree within the tolerance (after the
	// offset measured on the RTP pairs, if any).
	PairedTime
	// UnpairedBefore: captured before the onboard recording starts.
	UnpairedBefore
	// UnpairedAfter: captured after the onboard recording ends.
	UnpairedAfter
	// UnpairedNoFrame: inside the onboard recording's span, but no unused
	// onboard frame is within the tolerance (the vehicle did not record
	// it, or the clocks disagree).
	UnpairedNoFrame
	// UnpairedRTP: the frame arrived with an RTP timestamp that no onboard
	// frame has, although the onboard recording carries RTP timestamps.
	UnpairedRTP
)

var pairHowNames = [...]string{"invalid", "paired by RTP timestamp", "paired by capture time",
	"captured before the onboard recording starts", "captured after the onboard recording ends",
	"no onboard frame within the tolerance", "RTP timestamp not in the onboard recording"}

// String returns a short description.
func (h PairHow) String() string {
	if h < 0 || int(h) >= len(pairHowNames) {
		return fmt.Sprintf("PairHow(%d)", int(h))
	}
	return pairHowNames[h]
}

// Paired reports whether h is one of the paired outcomes.
func (h PairHow) Paired() bool { return h == PairedRTP || h == PairedTime }

// FramePairing is the result of [PairFrames]: for every session frame, the
// onboard frame that recorded the same capture, or why there is none.
type FramePairing struct {
	// Onboard[i] is the onboard frame index of session row i, or -1.
	Onboard []int
	// How[i] says how row i was paired or why it was not.
	How []PairHow
	// ToleranceUs is the capture-time tolerance used.
	ToleranceUs int64
	// OffsetUs is the session's capture time minus the onboard one, the
	// median over the RTP pairs (0 without any). A relay that maps RTP
	// timestamps to the vehicle clock through an RTCP sender report
	// carries the sender's send delay in it; rows without an RTP timestamp
	// are paired at capture - OffsetUs.
	OffsetUs int64
	// RTPPairs counts the rows paired by RTP timestamp (OffsetUs comes
	// from them).
	RTPPairs int
}

// Count returns how many session rows have outcome h.
func (p FramePairing) Count(h PairHow) int {
	n := 0
	for _, x := range p.How {
		if x == h {
			n++
		}
	}
	return n
}

// Paired returns how many session rows were paired.
func (p FramePairing) Paired() int { return p.Count(PairedRTP) + p.Count(PairedTime) }

// Summary returns one line: paired counts and each reason for the rest.
func (p FramePairing) Summary() string {
	var b strings.Builder
	fmt.Fprintf(&b, "%d of %d session frames paired (%d by RTP timestamp, %d by capture time within ±%.1f ms",
		p.Paired(), len(p.How), p.Count(PairedRTP), p.Count(PairedTime), float64(p.ToleranceUs)/1000)
	if p.RTPPairs > 0 {
		fmt.Fprintf(&b, " after a clock offset of %+.1f ms measured on the RTP pairs", float64(p.OffsetUs)/1000)
	}
	b.WriteString(")")
	for _, h := range []PairHow{UnpairedBefore, UnpairedAfter, UnpairedNoFrame, UnpairedRTP} {
		if n := p.Count(h); n > 0 {
			fmt.Fprintf(&b, "; %d unpaired: %s", n, h)
		}
	}
	return b.String()
}

// DefaultPairTolerance returns the capture-time tolerance [PairFrames] uses
// by default: a quarter of the median interval between the onboard frames
// (8.3 ms at 30 fps). Capture times alone cannot reveal a clock offset of a
// whole number of frame periods (every frame then finds a neighbour); a
// quarter period at least rejects offsets between a quarter and three
// quarters of a period, where half a period would accept every offset. The
// RTP timestamp column removes the ambiguity. It returns 0 for fewer than
// two frames.
func DefaultPairTolerance(onboard []Frame) int64 {
	if len(onboard) < 2 {
		return 0
	}
	d := make([]int64, len(onboard)-1)
	for i := range d {
		d[i] = onboard[i+1].CaptureUs - onboard[i].CaptureUs
	}
	sort.Slice(d, func(i, j int) bool { return d[i] < d[j] })
	return d[len(d)/2] / 4
}

// PairFrames pairs the frames of a live session with the frames of the
// vehicle's own (onboard) recording of the same drive, by capture time on
// the vehicle clock, never by row index: the two usually start at
// different frames and number them differently.
//
// Rows that both carry an RTP timestamp pair exactly on it (when the
// onboard recording has any RTP timestamp, a session row that has one pairs
// only that way). The median capture-time difference over those pairs is
// the clock offset (see [FramePairing].OffsetUs). Every other session row
// pairs with the nearest unused onboard frame whose capture time, plus the
// offset, is within toleranceUs of its own; toleranceUs <= 0 means
// [DefaultPairTolerance].
//
// Unpaired rows are normal at the ends and where the vehicle did not record
// a frame. But if no row pairs, or more than half of the session rows that
// fall inside the onboard recording's span stay unpaired, the clocks of the
// two recordings disagree: PairFrames then fails with a [*PairError]
// naming the first unpaired frame. Both slices must be in capture order.
func PairFrames(session []SessionFrame, onboard []Frame, toleranceUs int64) (FramePairing, error) {
	if len(session) == 0 || len(onboard) == 0 {
		return FramePairing{}, fmt.Errorf("recording: pairing %d session frames with %d onboard frames: both need frames: %w", len(session), len(onboard), ErrPairing)
	}
	if toleranceUs <= 0 {
		toleranceUs = DefaultPairTolerance(onboard)
	}
	p := FramePairing{Onboard: make([]int, len(session)), How: make([]PairHow, len(session)), ToleranceUs: toleranceUs}
	used := make([]bool, len(onboard))
	for i := range p.Onboard {
		p.Onboard[i] = -1
	}

	// Exact pairs on the RTP timestamp.
	byRTP := map[uint32][]int{}
	for j, f := range onboard {
		if f.HasRTP {
			byRTP[f.RTPTimestamp] = append(byRTP[f.RTPTimestamp], j)
		}
	}
	var offsets []int64
	rtpMissing := make([]bool, len(session))
	if len(byRTP) > 0 {
		for i, s := range session {
			if !s.HasRTP {
				continue
			}
			best := -1
			for _, j := range byRTP[s.RTPTimestamp] { // several only after a 32-bit wrap (13 h at 90 kHz)
				if !used[j] && (best < 0 || absUs(onboard[j].CaptureUs-s.CaptureUs) < absUs(onboard[best].CaptureUs-s.CaptureUs)) {
					best = j
				}
			}
			if best < 0 {
				rtpMissing[i] = true
				continue
			}
			used[best] = true
			p.Onboard[i], p.How[i] = best, PairedRTP
			offsets = append(offsets, s.CaptureUs-onboard[best].CaptureUs)
		}
	}
	if len(offsets) > 0 {
		sort.Slice(offsets, func(a, b int) bool { return offsets[a] < offsets[b] })
		p.OffsetUs = offsets[len(offsets)/2]
		p.RTPPairs = len(offsets)
	}

	// The rest by capture time.
	first, last := onboard[0].CaptureUs, onboard[len(onboard)-1].CaptureUs
	for i, s := range session {
		if p.How[i] != PairInvalid {
			continue
		}
		target := s.CaptureUs - p.OffsetUs
		switch {
		case target < first-toleranceUs:
			p.How[i] = UnpairedBefore
			continue
		case target > last+toleranceUs:
			p.How[i] = UnpairedAfter
			continue
		case rtpMissing[i]:
			p.How[i] = UnpairedRTP
			continue
		}
		j := nearestFrame(onboard, target)
		if absUs(onboard[j].CaptureUs-target) <= toleranceUs && !used[j] {
			used[j] = true
			p.Onboard[i], p.How[i] = j, PairedTime
			continue
		}
		p.How[i] = UnpairedNoFrame
	}

	inSpan, unpaired, firstBad := 0, 0, -1
	for i, h := range p.How {
		if h == UnpairedBefore || h == UnpairedAfter {
			continue
		}
		inSpan++
		if !h.Paired() {
			unpaired++
			if firstBad < 0 {
				firstBad = i
			}
		}
	}
	if p.Paired() == 0 || 2*unpaired > inSpan {
		if firstBad < 0 {
			firstBad = 0
		}
		s := session[firstBad]
		j := nearestFrame(onboard, s.CaptureUs-p.OffsetUs)
		return p, &PairError{
			SessionIndex: s.Index, SessionCaptureUs: s.CaptureUs,
			OnboardIndex: onboard[j].Index, OnboardCaptureUs: onboard[j].CaptureUs,
			OffsetUs: p.OffsetUs, ToleranceUs: toleranceUs, How: p.How[firstBad],
			Unpaired: len(session) - p.Paired(), Total: len(session),
		}
	}
	return p, nil
}

// nearestFrame returns the index of the frame whose capture time is nearest
// to tUs (frames in capture order, at least one).
func nearestFrame(frames []Frame, tUs int64) int {
	j := sort.Search(len(frames), func(j int) bool { return frames[j].CaptureUs >= tUs })
	switch {
	case j == len(frames):
		return j - 1
	case j > 0 && tUs-frames[j-1].CaptureUs <= frames[j].CaptureUs-tUs:
		return j - 1
	}
	return j
}

func absUs(d int64) int64 {
	if d < 0 {
		return -d
	}
	return d
}

// PairTelemetry pairs telemetry rows recorded by a live session with the
// vehicle's own rows by sample time t_us (the vehicle stamps both): for each
// onboard row, the index of the session row within toleranceUs, or -1 if the
// session never received it. toleranceUs <= 0 means half the median onboard
// sample interval. Both slices must be in t_us order (as [Open] guarantees).
func PairTelemetry(session, onboard []TelemetryRow, toleranceUs int64) []int {
	if toleranceUs <= 0 && len(onboard) >= 2 {
		d := make([]int64, len(onboard)-1)
		for i := range d {
			d[i] = onboard[i+1].TimeUs - onboard[i].TimeUs
		}
		sort.Slice(d, func(a, b int) bool { return d[a] < d[b] })
		toleranceUs = d[len(d)/2] / 2
	}
	out := make([]int, len(onboard))
	used := make([]bool, len(session))
	for j, o := range onboard {
		out[j] = -1
		i := sort.Search(len(session), func(i int) bool { return session[i].TimeUs >= o.TimeUs })
		best := -1
		for _, c := range []int{i - 1, i} {
			if c < 0 || c >= len(session) || used[c] || absUs(session[c].TimeUs-o.TimeUs) > toleranceUs {
				continue
			}
			if best < 0 || absUs(session[c].TimeUs-o.TimeUs) < absUs(session[best].TimeUs-o.TimeUs) {
				best = c
			}
		}
		if best >= 0 {
			used[best] = true
			out[j] = best
		}
	}
	return out
}

// PairError reports that a session could not be paired with an onboard
// recording because their clocks disagree. It wraps [ErrPairing].
type PairError struct {
	// SessionIndex and SessionCaptureUs name the first session frame left
	// unpaired inside the onboard recording's span.
	SessionIndex     int
	SessionCaptureUs int64
	// OnboardIndex and OnboardCaptureUs name the onboard frame nearest to
	// it (after OffsetUs).
	OnboardIndex     int
	OnboardCaptureUs int64
	OffsetUs         int64
	ToleranceUs      int64
	How              PairHow
	// Unpaired of Total session frames found no onboard frame.
	Unpaired, Total int
}

// Error names the first unpaired frame, the gap to its nearest onboard
// frame and what to do.
func (e *PairError) Error() string {
	gap := float64(e.SessionCaptureUs-e.OffsetUs-e.OnboardCaptureUs) / 1000
	return fmt.Sprintf("recording: %d of %d session frames found no onboard frame; the first, session frame %d (t_capture_us %d), "+
		"is %+.1f ms from the nearest onboard frame %d (t_capture_us %d), beyond the ±%.1f ms tolerance (%s): "+
		"the two recordings' clocks disagree. Check that both stamp t_capture_us on the vehicle clock, record rtp_timestamp on both sides "+
		"for an exact match, or widen the tolerance: %v",
		e.Unpaired, e.Total, e.SessionIndex, e.SessionCaptureUs, gap, e.OnboardIndex, e.OnboardCaptureUs,
		float64(e.ToleranceUs)/1000, e.How, ErrPairing)
}

// Unwrap returns ErrPairing.
func (e *PairError) Unwrap() error { return ErrPairing }
