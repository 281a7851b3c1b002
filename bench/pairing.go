package bench

import (
	"fmt"
	"log/slog"
	"math"
	"os"
	"path/filepath"
	"strings"

	"gocv.io/x/gocv"

	"stopgap/internal/display"
	"stopgap/stream/recording"
)

// PairingReport describes how a live session's timing was paired with the
// vehicle's onboard recording (ReplayConfig.ArrivalsFile from another
// directory than the drive) and how the replay's decisions compare with
// the ones the relay recorded.
type PairingReport struct {
	// Session is the session's directory (or its arrivals file when it
	// stands alone); Onboard the onboard recording ("" when the session
	// was replayed by itself).
	Session string `json:"session"`
	Onboard string `json:"onboard"`
	// ToleranceMs is the capture-time tolerance; OffsetMs the session's
	// capture time minus the onboard one, measured on RTP pairs.
	ToleranceMs float64 `json:"tolerance_ms"`
	OffsetMs    float64 `json:"offset_ms"`
	// SessionFrames is the number of session rows (= replay ticks), of
	// which Paired found their onboard frame (PairedRTP by RTP timestamp,
	// PairedTime by capture time); Unpaired counts the rest by reason.
	SessionFrames int            `json:"session_frames"`
	Paired        int            `json:"paired"`
	PairedRTP     int            `json:"paired_rtp"`
	PairedTime    int            `json:"paired_time"`
	Unpaired      map[string]int `json:"unpaired"`
	// HeldFromSession counts arrived frames without an onboard partner
	// whose image the replay took from the session's own recording.
	HeldFromSession int `json:"held_from_session"`
	// Telemetry: onboard rows, how many the session received (paired by
	// t_us), rows only the session has (kept: the relay's filter saw
	// them), and paired rows whose values differ (the onboard values are
	// used).
	TelemetryOnboard     int `json:"telemetry_onboard"`
	TelemetryPaired      int `json:"telemetry_paired"`
	TelemetrySessionOnly int `json:"telemetry_session_only"`
	TelemetryValueDiffs  int `json:"telemetry_value_diffs"`
	// ReferenceTicks counts the relay's recorded ticks compared with the
	// replay's (NOT_SHOWN ticks, never on screen, are counted apart in
	// ReferenceSkipped); Agree those with the same state. Differences
	// lists every tick where they disagree.
	ReferenceTicks   int              `json:"reference_ticks"`
	ReferenceSkipped int              `json:"reference_skipped"`
	Agree            int              `json:"agree"`
	Differences      []TickDifference `json:"differences"`
	// Line is PairingLine's one-line summary.
	Line string `json:"line"`
	// Decisions is the one-line comparison with the relay's ticks.
	Decisions string `json:"decisions"`
}

// TickDifference is one tick where the replay decided otherwise than the
// relay recorded.
type TickDifference struct {
	Tick             int     `json:"tick"` // replay tick = session frames.csv index
	Relay            string  `json:"relay"`
	Replay           string  `json:"replay"`
	RelayConfidence  float64 `json:"relay_confidence"`
	ReplayConfidence Float   `json:"replay_confidence"`
	RelayCutoff      float64 `json:"relay_cutoff"`
	RelayAgeMs       float64 `json:"relay_age_ms"`
	ReplayAgeMs      float64 `json:"replay_age_ms"`
}

// frameGetter returns the image of a tick (owned by the getter, valid until
// a later Get evicts it).
type frameGetter interface {
	Get(k int) (gocv.Mat, error)
	Close()
}

// replayInput is what one replay runs on: a tick per frame row with its
// capture, arrival and (recorded) deadline, whether a true frame exists to
// score it, the images, and the telemetry with its arrivals.
type replayInput struct {
	captureUs, arrivalUs, deadlineUs []int64
	hasTruth                         []bool
	frames                           frameGetter
	telemetry                        []recording.TelemetryRow
	// telLost marks telemetry rows that never reached the receiver
	// (nil: decided by telemetryArrivals alone).
	telLost []bool
	pairing *PairingReport
	// reference are the relay's recorded ticks by replay tick (nil: none).
	reference map[int]recording.SessionTick
	// whyNoTruth explains why tick k has no true frame and says how to
	// get such ticks scored ("" if nothing would help); ticks with the
	// same explanation are counted together.
	whyNoTruth func(k int) (why, how string)
}

// indexInput is the replay of one recording by itself: frame i is tick i.
func indexInput(cfg ReplayConfig, rec *recording.Recording, width, height int) (replayInput, error) {
	in := replayInput{captureUs: make([]int64, len(rec.Frames)), hasTruth: make([]bool, len(rec.Frames)), telemetry: rec.Telemetry}
	for i, f := range rec.Frames {
		in.captureUs[i] = f.CaptureUs
		in.hasTruth[i] = !f.NoImage
	}
	var err error
	if in.arrivalUs, in.deadlineUs, err = replayArrivals(cfg, rec, in.captureUs); err != nil {
		return replayInput{}, err
	}
	fs, err := newFrameSource(rec, width, height)
	if err != nil {
		return replayInput{}, fmt.Errorf("replay: %w", err)
	}
	in.frames = fs
	arr := cfg.ArrivalsFile
	if arr == "" {
		arr = "SESSION/" + recording.ArrivalsFile
	}
	how := fmt.Sprintf("replay the vehicle's onboard recording of the drive against this session: stopgap replay --drive ONBOARD --arrivals %s --out REPORT", arr)
	in.whyNoTruth = func(int) (string, string) {
		return "lost on the live link, so missing from its recording too", how
	}
	if ticks := filepath.Join(rec.Dir, recording.ShownFile); cfg.ArrivalsFile != "" && fileExists(ticks) {
		in.reference, err = readReference(ticks, nil, cfg.Logger)
		if err != nil {
			in.frames.Close()
			return replayInput{}, err
		}
	}
	return in, nil
}

// pairedSession opens the live session an arrivals file belongs to when it
// is not the drive's own: the session's recording (nil if the file stands
// alone) and its arrivals. ok is false when the replay should index the
// drive's frames directly (no arrivals file, the drive's own, or a
// standalone file without t_capture_us).
func pairedSession(cfg ReplayConfig, log *slog.Logger) (sess *recording.Recording, arrivals []recording.Arrival, ok bool, err error) {
	if cfg.ArrivalsFile == "" {
		return nil, nil, false, nil
	}
	dir := filepath.Dir(cfg.ArrivalsFile)
	if sameDir(dir, cfg.Drive) {
		return nil, nil, false, nil
	}
	if fileExists(filepath.Join(dir, recording.FramesFile)) {
		sess, err = recording.Open(dir)
		if err != nil {
			return nil, nil, false, fmt.Errorf("replay: the session beside %s: %w", cfg.ArrivalsFile, err)
		}
		for _, w := range sess.Warnings {
			log.Warn("session recording tolerated", "session", dir, "warning", w)
		}
		if filepath.Base(cfg.ArrivalsFile) != recording.ArrivalsFile || sess.Arrivals == nil {
			if err := sess.LoadArrivals(cfg.ArrivalsFile); err != nil {
				return nil, nil, false, fmt.Errorf("replay: %w", err)
			}
		}
		return sess, sess.Arrivals, true, nil
	}
	arr, err := recording.ReadArrivals(cfg.ArrivalsFile)
	if err != nil {
		return nil, nil, false, fmt.Errorf("replay: %w", err)
	}
	for _, a := range arr {
		if !a.HasCapture {
			return nil, nil, false, nil // an old standalone file: indices into the drive
		}
	}
	return nil, arr, true, nil
}

// pairedInput is the replay of a live session's timing (arrivals, deadlines,
// telemetry arrivals, and the relay's ticks as the reference) on the
// vehicle's onboard recording: a tick per session row, its images and true
// frames from the onboard frame paired with it (recording.PairFrames).
func pairedInput(cfg ReplayConfig, onboard, sess *recording.Recording, arrivals []recording.Arrival, width, height int, log *slog.Logger) (in replayInput, err error) {
	var sessFrames []recording.Frame
	sessName := cfg.ArrivalsFile
	if sess != nil {
		sessFrames, sessName = sess.Frames, sess.Dir
		if sess.Camera.Width != onboard.Camera.Width || sess.Camera.Height != onboard.Camera.Height {
			return replayInput{}, fmt.Errorf("replay: the session %s is %dx%d but the onboard recording %s is %dx%d; pair recordings of the same camera: %w",
				sess.Dir, sess.Camera.Width, sess.Camera.Height, onboard.Dir, onboard.Camera.Width, onboard.Camera.Height, ErrReplayInput)
		}
	}
	rows, err := recording.SessionFrames(arrivals, sessFrames)
	if err != nil {
		return replayInput{}, fmt.Errorf("replay: %s: %w", cfg.ArrivalsFile, err)
	}
	tol := int64(math.Round(cfg.PairToleranceMs * 1000))
	p, err := recording.PairFrames(rows, onboard.Frames, tol)
	if err != nil {
		return replayInput{}, fmt.Errorf("replay: pairing %s with the onboard recording %s: %w", sessName, onboard.Dir, err)
	}
	rep := &PairingReport{Session: sessName, Onboard: onboard.Dir, ToleranceMs: float64(p.ToleranceUs) / 1000,
		OffsetMs: float64(p.OffsetUs) / 1000, SessionFrames: len(rows), Paired: p.Paired(),
		PairedRTP: p.Count(recording.PairedRTP), PairedTime: p.Count(recording.PairedTime), Unpaired: map[string]int{}}
	for _, h := range p.How {
		if !h.Paired() {
			rep.Unpaired[h.String()]++
		}
	}

	n := len(rows)
	in = replayInput{captureUs: make([]int64, n), arrivalUs: make([]int64, n), deadlineUs: make([]int64, n), hasTruth: make([]bool, n), pairing: rep}
	src := make([]frameRef, n)
	withDeadline := 0
	byIndex := map[int]recording.Arrival{}
	for _, a := range arrivals {
		byIndex[a.Index] = a
	}
	for k, s := range rows {
		a := byIndex[s.Index]
		in.captureUs[k] = s.CaptureUs
		in.arrivalUs[k] = NeverArrivesUs
		if a.Arrived {
			in.arrivalUs[k] = a.ArrivalUs
		}
		if a.HasDeadline {
			in.deadlineUs[k] = a.DeadlineUs
			withDeadline++
		}
		src[k] = frameRef{idx: -1}
		if j := p.Onboard[k]; j >= 0 && !onboard.Frames[j].NoImage {
			src[k] = frameRef{idx: j}
			in.hasTruth[k] = true
			continue
		}
		if !a.Arrived {
			continue
		}
		// Arrived, but the vehicle has no image of it: hold the session's
		// own copy if it has one, as the relay did.
		if sess != nil && s.Index < len(sess.Frames) && !sess.Frames[s.Index].NoImage {
			src[k] = frameRef{session: true, idx: s.Index}
			rep.HeldFromSession++
			continue
		}
		return replayInput{}, fmt.Errorf("replay: session frame %d (t_capture_us %d) arrived but has no onboard frame (%s) and no image in the session; "+
			"replay the session by itself (--drive SESSION) or pair it with a complete onboard recording: %w", s.Index, s.CaptureUs, p.How[k], ErrReplayInput)
	}
	if withDeadline != n {
		in.deadlineUs = nil
	}

	pf := &pairedFrames{src: src}
	if pf.onboard, err = newFrameSource(onboard, width, height); err != nil {
		return replayInput{}, fmt.Errorf("replay: %w", err)
	}
	if rep.HeldFromSession > 0 {
		if pf.session, err = newFrameSource(sess, width, height); err != nil {
			pf.Close()
			return replayInput{}, fmt.Errorf("replay: %w", err)
		}
	}
	in.frames = pf
	defer func() {
		if err != nil {
			pf.Close()
		}
	}()
	if sess != nil && p.Count(recording.PairedTime) > 0 {
		if err := checkPairingByImage(sess, onboard, rows, p, pf.onboard, width, height); err != nil {
			return replayInput{}, err
		}
	}

	// Telemetry: the vehicle's rows, each arriving when the session
	// received it, lost if it never did.
	in.telemetry = append([]recording.TelemetryRow(nil), onboard.Telemetry...)
	in.telLost = make([]bool, len(in.telemetry))
	rep.TelemetryOnboard = len(onboard.Telemetry)
	if sess != nil {
		tp := recording.PairTelemetry(sess.Telemetry, onboard.Telemetry, 0)
		got := make([]bool, len(sess.Telemetry))
		for j, s := range tp {
			if s < 0 {
				in.telLost[j] = true
				continue
			}
			got[s] = true
			rep.TelemetryPaired++
			srow := sess.Telemetry[s]
			row := &in.telemetry[j]
			if row.SpeedMps != srow.SpeedMps || row.YawRateRps != srow.YawRateRps || row.HasAccel != srow.HasAccel ||
				row.AccelMps2 != srow.AccelMps2 || row.HasSteer != srow.HasSteer || row.SteerRad != srow.SteerRad {
				rep.TelemetryValueDiffs++
			}
			row.ArrivalUs, row.HasArrival = srow.ArrivalUs, srow.HasArrival
		}
		for s, ok := range got {
			if !ok && sess.Telemetry[s].HasArrival {
				in.telemetry = append(in.telemetry, sess.Telemetry[s])
				in.telLost = append(in.telLost, false)
				rep.TelemetrySessionOnly++
			}
		}
		if ticks := filepath.Join(sess.Dir, recording.ShownFile); fileExists(ticks) {
			if in.reference, err = readReference(ticks, rows, log); err != nil {
				return replayInput{}, err
			}
		}
	} else {
		// A standalone arrivals file: telemetry shares the fate of the video.
		in.telLost = nil
	}
	rep.Line = "pairing: " + p.Summary()
	in.whyNoTruth = func(k int) (string, string) {
		switch h := p.How[k]; h {
		case recording.UnpairedBefore:
			return "captured before the onboard recording starts", "start the onboard recording before the session"
		case recording.UnpairedAfter:
			return "captured after the onboard recording ends: the session outlived it", "keep the onboard recording running until the session ends"
		case recording.UnpairedNoFrame, recording.UnpairedRTP:
			return "not in the onboard recording (" + h.String() + ")",
				"record every frame on board with rtp_timestamp on both sides, or widen --pair-tolerance-ms if the clocks are known to agree"
		}
		return "the paired onboard frame has no image", "record every frame's image on board"
	}
	return in, nil
}

// Image check of a pairing made by capture time (see checkPairingByImage).
const (
	// pairCheckFrames is how many session frames are compared.
	pairCheckFrames = 24
	// pairCheckMinVotes is the fewest decisive comparisons needed to judge.
	pairCheckMinVotes = 6
	// pairCheckMarginGrey is how much closer (mean absolute difference,
	// 8-bit grey levels) a neighbour must be to count against a pair: the
	// session's copy went through the video codec and JPEG, the onboard one
	// did not. A design choice, not a published figure.
	pairCheckMarginGrey = 0.5
)

// checkPairingByImage guards against what capture times alone cannot see:
// clocks that disagree by about a whole frame period pair every frame with a
// neighbour. For up to pairCheckFrames session frames paired by capture time
// that have an image in the session too, it compares the session's image
// with the paired onboard frame and its two neighbours (mean absolute
// difference over all channels). If, among the decisive comparisons, a
// neighbour is closer more often than the paired frame, it fails naming the
// first such frame.
func checkPairingByImage(sess, onboard *recording.Recording, rows []recording.SessionFrame, p recording.FramePairing, on *frameSource, width, height int) error {
	var cand []int
	for k, h := range p.How {
		if h == recording.PairedTime && rows[k].Index < len(sess.Frames) && !sess.Frames[rows[k].Index].NoImage {
			cand = append(cand, k)
		}
	}
	if len(cand) < pairCheckMinVotes {
		return nil
	}
	src, err := newFrameSource(sess, width, height)
	if err != nil {
		return fmt.Errorf("replay: %w", err)
	}
	defer src.Close()
	diff := gocv.NewMat()
	defer diff.Close()
	mad := func(a, b gocv.Mat) float64 {
		gocv.AbsDiff(a, b, &diff)
		m := diff.Mean()
		return (m.Val1 + m.Val2 + m.Val3) / 3
	}
	step := max(1, len(cand)/pairCheckFrames)
	votesFor, votesAgainst, firstBad, firstShift := 0, 0, -1, 0
	for n := 0; n < len(cand); n += step {
		k := cand[n]
		j := p.Onboard[k]
		simg, err := src.Get(rows[k].Index)
		if err != nil {
			return fmt.Errorf("replay: checking the pairing: %w", err)
		}
		img, err := on.Get(j)
		if err != nil {
			return fmt.Errorf("replay: checking the pairing: %w", err)
		}
		paired := mad(simg, img)
		best, bestShift := paired, 0
		for _, d := range []int{-1, 1} {
			if j+d < 0 || j+d >= len(onboard.Frames) || onboard.Frames[j+d].NoImage {
				continue
			}
			nb, err := on.Get(j + d)
			if err != nil {
				return fmt.Errorf("replay: checking the pairing: %w", err)
			}
			if v := mad(simg, nb); v < best {
				best, bestShift = v, d
			}
		}
		switch {
		case bestShift == 0:
			votesFor++
		case paired-best > pairCheckMarginGrey:
			votesAgainst++
			if firstBad < 0 {
				firstBad, firstShift = k, bestShift
			}
		}
	}
	if votesFor+votesAgainst < pairCheckMinVotes || votesAgainst <= votesFor {
		return nil
	}
	s := rows[firstBad]
	return fmt.Errorf("replay: pairing by capture time looks wrong: on %d of %d session frames checked, the session's own image matches an onboard frame next to the paired one better; "+
		"the first, session frame %d (t_capture_us %d), matches onboard frame %d rather than %d. The two clocks disagree by about a frame period, "+
		"which capture times cannot reveal: record rtp_timestamp on both sides or correct one clock: %w",
		votesAgainst, votesFor+votesAgainst, s.Index, s.CaptureUs, p.Onboard[firstBad]+firstShift, p.Onboard[firstBad], recording.ErrPairing)
}

// readReference reads the relay's shown.csv and keys it by replay tick
// (rows, if given, maps replay tick k to session index rows[k].Index).
func readReference(path string, rows []recording.SessionFrame, log *slog.Logger) (map[int]recording.SessionTick, error) {
	ticks, warns, err := recording.ReadSessionTicks(path)
	if err != nil {
		return nil, fmt.Errorf("replay: the relay's decisions: %w", err)
	}
	if log == nil {
		log = slog.Default()
	}
	for _, w := range warns {
		log.Warn("relay ticks tolerated", "file", path, "warning", w)
	}
	bySession := map[int]recording.SessionTick{}
	for _, t := range ticks {
		bySession[t.Tick] = t
	}
	if rows == nil {
		return bySession, nil
	}
	out := map[int]recording.SessionTick{}
	for k, r := range rows {
		if t, ok := bySession[r.Index]; ok {
			out[k] = t
		}
	}
	return out, nil
}

// compareReference fills rep's comparison of the replay's ticks with the
// relay's (it creates rep if the replay was not paired).
func compareReference(ref map[int]recording.SessionTick, rows []TickRow, rep *PairingReport) {
	for k, r := range rows {
		t, ok := ref[k]
		if !ok {
			continue
		}
		if t.State == display.StateNotShown {
			rep.ReferenceSkipped++
			continue
		}
		rep.ReferenceTicks++
		if t.State.String() == r.State {
			rep.Agree++
			continue
		}
		rep.Differences = append(rep.Differences, TickDifference{Tick: k, Relay: t.State.String(), Replay: r.State,
			RelayConfidence: t.Confidence, ReplayConfidence: Float(r.Confidence), RelayCutoff: t.Cutoff,
			RelayAgeMs: t.AgeMs, ReplayAgeMs: r.AgeMs})
	}
	rep.Decisions = fmt.Sprintf("decisions: the replay agrees with the relay's recorded state on %d of %d ticks", rep.Agree, rep.ReferenceTicks)
	if n := len(rep.Differences); n > 0 {
		d := rep.Differences[0]
		verb := "differ"
		if n == 1 {
			verb = "differs"
		}
		rep.Decisions += fmt.Sprintf("; %d %s (first: tick %d, relay %s at confidence %.4g with cutoff %.3g, replay %s; all listed in the report)",
			n, verb, d.Tick, d.Relay, d.RelayConfidence, d.RelayCutoff, d.Replay)
	}
	if rep.ReferenceSkipped > 0 {
		rep.Decisions += fmt.Sprintf("; %d ticks the relay skipped (never shown) not compared", rep.ReferenceSkipped)
	}
}

// unscoredNote returns the one line that says how many missing ticks could
// not be scored, why, and how to get them scored, or "" if every one was.
// noTruth lists the missing ticks without a true frame; noFrameYet counts
// those before the first real frame.
func unscoredNote(in replayInput, missing int, noTruth []int, noFrameYet int) string {
	if len(noTruth)+noFrameYet == 0 {
		return ""
	}
	type group struct {
		why, how string
		n        int
	}
	var groups []*group
	byWhy := map[string]*group{}
	for _, k := range noTruth {
		why, how := in.whyNoTruth(k)
		g := byWhy[why]
		if g == nil {
			g = &group{why: why, how: how}
			byWhy[why] = g
			groups = append(groups, g)
		}
		g.n++
	}
	var parts, hows []string
	seenHow := map[string]bool{}
	for _, g := range groups {
		parts = append(parts, fmt.Sprintf("%d %s", g.n, g.why))
		if g.how != "" && !seenHow[g.how] {
			seenHow[g.how] = true
			hows = append(hows, g.how)
		}
	}
	if noFrameYet > 0 {
		parts = append(parts, fmt.Sprintf("%d before the first real frame, with nothing to show", noFrameYet))
	}
	s := fmt.Sprintf("%d of %d missing ticks could not be scored: %s", len(noTruth)+noFrameYet, missing, strings.Join(parts, "; "))
	if len(hows) > 0 {
		s += ". To score them: " + strings.Join(hows, "; ")
	}
	return s
}

// frameRef locates a tick's image: frame idx of the onboard recording, or
// of the session's when session is set; idx -1 means none.
type frameRef struct {
	session bool
	idx     int
}

// pairedFrames serves tick images from the onboard recording (and, for
// arrived frames the vehicle did not record, from the session's).
type pairedFrames struct {
	onboard, session *frameSource
	src              []frameRef
}

// Get returns the image of tick k.
func (p *pairedFrames) Get(k int) (gocv.Mat, error) {
	r := p.src[k]
	switch {
	case r.idx < 0:
		return gocv.Mat{}, fmt.Errorf("tick %d has no image in either recording: %w", k, ErrReplayInput)
	case r.session:
		return p.session.Get(r.idx)
	}
	return p.onboard.Get(r.idx)
}

// Close closes both sources.
func (p *pairedFrames) Close() {
	if p.onboard != nil {
		p.onboard.Close()
	}
	if p.session != nil {
		p.session.Close()
	}
}

func fileExists(path string) bool {
	st, err := os.Stat(path)
	return err == nil && st.Mode().IsRegular()
}

// sameDir reports whether a and b name the same directory.
func sameDir(a, b string) bool {
	sa, err := os.Stat(a)
	if err != nil {
		return filepath.Clean(a) == filepath.Clean(b)
	}
	sb, err := os.Stat(b)
	if err != nil {
		return false
	}
	return os.SameFile(sa, sb)
}
