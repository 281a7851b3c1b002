package bench

import (
	"context"
	"encoding/json"
	"errors"
	"fmt"
	"log/slog"
	"os"
	"path/filepath"
	"strings"
	"testing"

	"stopgap/bench/simdrive"
	"stopgap/stream/recording"
)

// A vehicle powered on at onboardT0Us records the drive on board; a relay
// session starts sessionFirst frames later, maps RTP timestamps to the
// vehicle clock with a sender-report offset of srOffsetUs, and receives
// frames linkUs after capture.
const (
	onboardT0Us  = 1_700_000_000_000_000
	sessionFirst = 12
	srOffsetUs   = 40_000
	linkUs       = 60_000
	rtpBase      = 4_294_900_000 // wraps during the drive
)

// pairFixture is an onboard recording and a relay-like session recording of
// one simulated drive.
type pairFixture struct {
	drive, onboard, session string
	// onboardLost: camera frames the onboard recorder did not keep;
	// sessionLost: camera frames that never reached the relay.
	onboardLost, sessionLost map[int]bool
	rows                     int // session rows
}

func (fx pairFixture) camFrame(row int) int { return sessionFirst + row }

// newPairFixture writes the two recordings. withRTP controls whether
// either side records RTP timestamps; offsetUs is the session's capture-time
// offset from the onboard clock.
func newPairFixture(t *testing.T, withRTP bool, offsetUs int64) pairFixture {
	t.Helper()
	return newPairFixtureOn(t, pairDrive(t), withRTP, offsetUs)
}

// pairDrive renders the small drive the pairing fixtures record.
func pairDrive(t *testing.T) string {
	t.Helper()
	return smallDrive(t, simdrive.Config{Width: 160, Height: 90, DurationS: 3.5, Seed: 3})
}

// newPairFixtureOn is newPairFixture on an already rendered drive (only
// read, so several fixtures may share it).
func newPairFixtureOn(t *testing.T, drive string, withRTP bool, offsetUs int64) pairFixture {
	t.Helper()
	rec, err := recording.Open(drive)
	if err != nil {
		t.Fatal(err)
	}
	dir := t.TempDir()
	fx := pairFixture{drive: drive, onboard: filepath.Join(dir, "onboard"), session: filepath.Join(dir, "session"),
		onboardLost: map[int]bool{70: true, 80: true}, sessionLost: map[int]bool{80: true}}
	for c := 40; c < 52; c++ { // an outage
		fx.sessionLost[c] = true
	}
	for c := 0; c < len(rec.Frames); c += 11 {
		fx.sessionLost[c] = true
	}
	must := func(err error) {
		t.Helper()
		if err != nil {
			t.Fatal(err)
		}
	}
	img := func(c int) []byte {
		p, err := rec.FramePath(c)
		must(err)
		b, err := os.ReadFile(p)
		must(err)
		return b
	}
	t0 := rec.Frames[0].CaptureUs
	capUs := func(c int) int64 { return onboardT0Us + rec.Frames[c].CaptureUs - t0 }
	rtpOf := func(c int) uint32 { return uint32(rtpBase + (capUs(c)-onboardT0Us)*9/100) }

	ob, err := recording.Create(fx.onboard, rec.Camera)
	must(err)
	n := 0
	for c := range rec.Frames {
		if fx.onboardLost[c] {
			continue
		}
		if withRTP {
			must(ob.WriteFrameRTP(n, capUs(c), rtpOf(c), img(c), "jpg"))
		} else {
			must(ob.WriteFrame(n, capUs(c), img(c), "jpg"))
		}
		n++
	}
	for _, r := range rec.Telemetry {
		r.TimeUs = onboardT0Us + r.TimeUs - t0
		must(ob.WriteTelemetry(r))
	}
	must(ob.Close())

	// The session: rows for camera frames sessionFirst .. end-8 (the
	// vehicle recorded longer than the session lasted).
	ss, err := recording.Create(fx.session, rec.Camera)
	must(err)
	period := float64(rec.Frames[1].CaptureUs - rec.Frames[0].CaptureUs)
	c0 := capUs(sessionFirst) + offsetUs
	for r := 0; sessionFirst+r < len(rec.Frames)-8; r++ {
		c := fx.camFrame(r)
		nominal := c0 + int64(float64(r)*period+0.5)
		deadline := nominal + (linkUs - srOffsetUs) + DefaultAllowanceMs*1000
		a := recording.Arrival{Index: r, DeadlineUs: deadline, HasDeadline: true}
		if fx.sessionLost[c] {
			must(ss.WriteMissingFrame(r, nominal))
		} else {
			capture := capUs(c) + offsetUs + int64(r%3) - 1 // 90 kHz rounding
			must(ss.WriteFrame(r, capture, img(c), "jpg"))
			a.Arrived, a.ArrivalUs = true, capUs(c)+linkUs
			if r%23 == 5 {
				a.ArrivalUs += 45_000 // late
			}
			a.RTPTimestamp, a.HasRTP = rtpOf(c), withRTP
		}
		must(ss.WriteArrivalRow(a))
		fx.rows++
	}
	outageFrom, outageTo := capUs(40), capUs(52)
	for _, r := range rec.Telemetry {
		r.TimeUs = onboardT0Us + r.TimeUs - t0
		if r.TimeUs < capUs(sessionFirst)-500_000 || r.TimeUs >= outageFrom && r.TimeUs < outageTo {
			continue
		}
		r.ArrivalUs, r.HasArrival = r.TimeUs+linkUs, true
		must(ss.WriteTelemetry(r))
	}
	must(ss.Close())
	return fx
}

// writeReferenceTicks replays the session by itself (as the relay decided,
// see stream/relay's replay tests) and writes its states as the relay's
// shown.csv, with the state of flip (if >= 0) changed to STALE/PREDICTED.
func writeReferenceTicks(t *testing.T, fx pairFixture, flip int) []string {
	t.Helper()
	out := filepath.Join(t.TempDir(), "self")
	cfg := baseReplay(fx.session, out)
	cfg.ArrivalsFile = filepath.Join(fx.session, recording.ArrivalsFile)
	cfg.Examples = -1
	if _, err := Replay(context.Background(), cfg); err != nil {
		t.Fatalf("replaying the session by itself: %v", err)
	}
	b, err := os.ReadFile(filepath.Join(out, TicksFile))
	if err != nil {
		t.Fatal(err)
	}
	var states []string
	var sb strings.Builder
	sb.WriteString("tick,state,age_ms,confidence,cutoff\n")
	for i, line := range strings.Split(strings.TrimSpace(string(b)), "\n")[1:] {
		col := strings.Split(line, ",")
		st := col[2]
		states = append(states, st)
		if i == flip {
			st = map[string]string{TickPredicted: TickStale, TickStale: TickPredicted, TickLive: TickStale}[st]
		}
		fmt.Fprintf(&sb, "%s,%s,%s,%s,0.5000\n", col[0], st, col[3], col[4])
	}
	if err := os.WriteFile(filepath.Join(fx.session, recording.ShownFile), []byte(sb.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	return states
}

// TestReplayPairedSession replays a session's drops on the onboard
// recording: the two start at different frames, both lost rows, and the
// session's capture times carry a sender-report offset. Every session row
// pairs (by RTP timestamp or, for frames that never arrived, by capture
// time after the measured offset), every missing tick the vehicle recorded
// is scored, the replay's states equal the relay's, and the one tick made to
// differ is listed.
func TestReplayPairedSession(t *testing.T) {
	fx := newPairFixture(t, true, srOffsetUs)
	const flip = 44 - sessionFirst // inside the outage
	want := writeReferenceTicks(t, fx, flip)

	out := filepath.Join(t.TempDir(), "paired")
	cfg := baseReplay(fx.onboard, out)
	cfg.ArrivalsFile = filepath.Join(fx.session, recording.ArrivalsFile)
	sum, err := Replay(context.Background(), cfg)
	if err != nil {
		t.Fatalf("paired replay: %v", err)
	}
	p := sum.Pairing
	if p == nil {
		t.Fatal("no pairing in the summary")
	}
	// Camera frame 70 (arrived) and 80 (lost) are not on board.
	if p.SessionFrames != fx.rows || p.Paired != fx.rows-2 || p.HeldFromSession != 1 ||
		p.Unpaired[recording.UnpairedRTP.String()] != 1 || p.Unpaired[recording.UnpairedNoFrame.String()] != 1 {
		t.Errorf("pairing %+v; want %d rows, all but camera frames 70 and 80 paired", p, fx.rows)
	}
	if p.OffsetMs < 39.99 || p.OffsetMs > 40.01 {
		t.Errorf("offset %v ms, want 40", p.OffsetMs)
	}
	if p.TelemetryValueDiffs != 0 || p.TelemetrySessionOnly != 0 || p.TelemetryPaired == 0 || p.TelemetryPaired >= p.TelemetryOnboard {
		t.Errorf("telemetry: %+v", p)
	}
	if sum.TicksTotal != fx.rows || sum.TicksUnscored != 1 || sum.Methods.Predicted.Frames != sum.TicksMissing-1 {
		t.Errorf("ticks %d missing %d scored %d unscored %d; want %d ticks and only camera frame 80 unscored",
			sum.TicksTotal, sum.TicksMissing, sum.Methods.Predicted.Frames, sum.TicksUnscored, fx.rows)
	}
	if !strings.HasPrefix(sum.UnscoredNote, "1 of ") || !strings.Contains(sum.UnscoredNote, "1 not in the onboard recording (no onboard frame within the tolerance)") ||
		!strings.Contains(sum.UnscoredNote, "To score them: record every frame on board") {
		t.Errorf("unscored note %q", sum.UnscoredNote)
	}
	if p.ReferenceTicks != fx.rows || p.Agree != fx.rows-1 || len(p.Differences) != 1 || p.Differences[0].Tick != flip ||
		p.Differences[0].Replay != want[flip] {
		t.Errorf("decisions: %s; differences %+v; want only tick %d (replay %s)", p.Decisions, p.Differences, flip, want[flip])
	}
	html, err := os.ReadFile(filepath.Join(out, "report.html"))
	if err != nil {
		t.Fatal(err)
	}
	for _, s := range []string{templateEscape(p.Line), `id="differences"`, templateEscape(sum.UnscoredNote)} {
		if !strings.Contains(string(html), s) {
			t.Errorf("report.html lacks %q", s)
		}
	}
	var js struct {
		Pairing *PairingReport `json:"pairing"`
	}
	b, _ := os.ReadFile(filepath.Join(out, "summary.json"))
	if err := json.Unmarshal(b, &js); err != nil || js.Pairing == nil || len(js.Pairing.Differences) != 1 {
		t.Errorf("summary.json pairing: %v %+v", err, js.Pairing)
	}
}

// templateEscape escapes what html/template escapes in our lines.
func templateEscape(s string) string {
	return strings.NewReplacer("&", "&amp;", "<", "&lt;", ">", "&gt;", `"`, "&#34;", "'", "&#39;", "+", "&#43;").Replace(s)
}

// TestReplayPairedSessionKilled: a session recording cut by a kill (a
// partial last line in each file, arrivals one row behind frames.csv) still
// pairs and scores up to its last whole arrivals row.
func TestReplayPairedSessionKilled(t *testing.T) {
	fx := newPairFixture(t, true, srOffsetUs)
	writeReferenceTicks(t, fx, -1)
	cut := func(name string, keep int) {
		path := filepath.Join(fx.session, name)
		b, err := os.ReadFile(path)
		if err != nil {
			t.Fatal(err)
		}
		lines := strings.SplitAfter(string(b), "\n")
		half := lines[keep+1]
		if err := os.WriteFile(path, []byte(strings.Join(lines[:keep+1], "")+half[:len(half)/2]), 0o644); err != nil {
			t.Fatal(err)
		}
	}
	const whole = 60 // whole arrivals rows left
	// Telemetry is cut at the same moment: after the last samples that
	// arrived by the last whole row's tick.
	sess, err := recording.Open(fx.session)
	if err != nil {
		t.Fatal(err)
	}
	keepTel := 0
	for _, r := range sess.Telemetry {
		if r.ArrivalUs <= sess.Arrivals[whole-1].DeadlineUs {
			keepTel++
		}
	}
	cut(recording.FramesFile, whole+1)
	cut(recording.ArrivalsFile, whole)
	cut(recording.ShownFile, whole-3)
	cut(recording.TelemetryFile, keepTel+1)

	cfg := baseReplay(fx.onboard, filepath.Join(t.TempDir(), "killed"))
	cfg.ArrivalsFile = filepath.Join(fx.session, recording.ArrivalsFile)
	var warnings strings.Builder
	cfg.Logger = slog.New(slog.NewTextHandler(&warnings, nil))
	sum, err := Replay(context.Background(), cfg)
	if err != nil {
		t.Fatalf("replay of a killed session: %v", err)
	}
	missingOnboard := 0
	for r := 0; r < whole; r++ {
		if fx.sessionLost[fx.camFrame(r)] && fx.onboardLost[fx.camFrame(r)] {
			missingOnboard++
		}
	}
	if sum.TicksTotal != whole || sum.Pairing.Paired+missingOnboard > whole || sum.Pairing.ReferenceTicks != whole-3 ||
		len(sum.Pairing.Differences) != 0 || sum.Methods.Predicted.Frames != sum.TicksMissing-sum.TicksUnscored {
		t.Errorf("ticks %d (want %d), pairing %+v, scored %d of %d missing", sum.TicksTotal, whole, sum.Pairing,
			sum.Methods.Predicted.Frames, sum.TicksMissing)
	}
	if n := strings.Count(warnings.String(), "dropped incomplete last line"); n != 4 {
		t.Errorf("%d cut lines reported, want 4:\n%s", n, warnings.String())
	}
}

// TestReplayPairedClocksDisagree: without RTP timestamps, a session whose
// capture times are 15 ms off the onboard clock cannot be paired; the error
// names the first unpaired frame and no report is written.
func TestReplayPairedClocksDisagree(t *testing.T) {
	drive := pairDrive(t)
	fx := newPairFixtureOn(t, drive, false, 15_000)
	out := filepath.Join(t.TempDir(), "off")
	cfg := baseReplay(fx.onboard, out)
	cfg.ArrivalsFile = filepath.Join(fx.session, recording.ArrivalsFile)
	_, err := Replay(context.Background(), cfg)
	var pe *recording.PairError
	if !errors.As(err, &pe) || pe.SessionIndex != 0 {
		t.Fatalf("err %v, want a PairError naming session frame 0", err)
	}
	for _, s := range []string{"session frame 0 (t_capture_us", "clocks disagree", fx.session} {
		if !strings.Contains(err.Error(), s) {
			t.Errorf("message %q lacks %q", err, s)
		}
	}
	if _, err := os.Stat(out); !errors.Is(err, os.ErrNotExist) {
		t.Errorf("a report appeared: %v", err)
	}
	// A whole frame period (plus 3 ms) apart: every frame finds a
	// neighbour within the tolerance; the session's own images tell.
	fx = newPairFixtureOn(t, drive, false, 33_333+3_000)
	cfg = baseReplay(fx.onboard, filepath.Join(t.TempDir(), "one-off"))
	cfg.ArrivalsFile = filepath.Join(fx.session, recording.ArrivalsFile)
	_, err = Replay(context.Background(), cfg)
	if !errors.Is(err, recording.ErrPairing) || !strings.Contains(err.Error(), "matches onboard frame") {
		t.Errorf("one frame period apart: err %v, want the image check to reject the pairing", err)
	}
	// The same session with its clocks in agreement pairs by capture time.
	fx = newPairFixtureOn(t, drive, false, 3_000)
	cfg = baseReplay(fx.onboard, filepath.Join(t.TempDir(), "ok"))
	cfg.ArrivalsFile = filepath.Join(fx.session, recording.ArrivalsFile)
	cfg.Examples = -1
	sum, err := Replay(context.Background(), cfg)
	if err != nil || sum.Pairing.PairedTime != fx.rows-2 || sum.Pairing.PairedRTP != 0 {
		t.Errorf("3 ms apart: err %v, pairing %+v", err, sum.Pairing)
	}
}

// TestReplayUnscoredLine: a session replayed by itself cannot score the
// frames it lost; the summary says how many and how to score them, in one
// line, instead of a NaN.
func TestReplayUnscoredLine(t *testing.T) {
	fx := newPairFixture(t, true, srOffsetUs)
	out := filepath.Join(t.TempDir(), "self")
	cfg := baseReplay(fx.session, out)
	cfg.ArrivalsFile = filepath.Join(fx.session, recording.ArrivalsFile)
	cfg.Examples = -1
	sum, err := Replay(context.Background(), cfg)
	if err != nil {
		t.Fatal(err)
	}
	lost := 0
	for r := 0; r < fx.rows; r++ {
		if fx.sessionLost[fx.camFrame(r)] {
			lost++
		}
	}
	if sum.TicksUnscored != lost || !strings.HasPrefix(sum.UnscoredNote, fmt.Sprintf("%d of %d missing ticks could not be scored", lost, sum.TicksMissing)) ||
		!strings.Contains(sum.UnscoredNote, "stopgap replay --drive ONBOARD --arrivals "+cfg.ArrivalsFile) {
		t.Errorf("unscored %d (want %d), note %q", sum.TicksUnscored, lost, sum.UnscoredNote)
	}
	html, _ := os.ReadFile(filepath.Join(out, "report.html"))
	if !strings.Contains(string(html), `id="unscored"`) || strings.Contains(string(html), "NaN") {
		t.Errorf("report.html: unscored line missing or a NaN shown")
	}
}
