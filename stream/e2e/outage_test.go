package e2e

import (
	"context"
	"encoding/csv"
	"fmt"
	"os"
	"path/filepath"
	"strconv"
	"testing"
	"time"

	"stopgap/bench"
	"stopgap/internal/display"
	"stopgap/predictor"
	"stopgap/stream/console/consoletest"
	"stopgap/stream/recording"
	"stopgap/stream/relay"
)

// readTicks reads a ticks.csv (the relay's or bench's: both have "tick" and
// "state" columns) into tick -> state.
func readTicks(t *testing.T, path string) map[int]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	rows, err := csv.NewReader(f).ReadAll()
	if err != nil {
		t.Fatalf("%s: %v", path, err)
	}
	if len(rows) < 2 {
		t.Fatalf("%s: no rows", path)
	}
	ti, si := -1, -1
	for i, h := range rows[0] {
		switch h {
		case "tick":
			ti = i
		case "state":
			si = i
		}
	}
	if ti < 0 || si < 0 {
		t.Fatalf("%s: header %v lacks tick or state", path, rows[0])
	}
	out := map[int]string{}
	for n, r := range rows[1:] {
		k, err := strconv.Atoi(r[ti])
		if err != nil {
			t.Fatalf("%s line %d: tick %q: %v", path, n+2, r[ti], err)
		}
		out[k] = r[si]
	}
	return out
}

// TestOutage500ms cuts the link for 500 ms while the relay records, then
// checks (1) every tick whose frame was lost in the cut is PREDICTED or
// STALE, never LIVE; (2) the relay asks for a keyframe within one frame
// period of the first video packet after the cut, measured from that packet
// to the first request after the link's return (keyframeRequestDelay; it may
// come first, on the sender's telemetry) (loopback RTT is well under a
// millisecond, so this bounds the relay's reaction); (3) replaying the relay's
// recording with bench.Replay and the recorded arrivals reproduces the live
// per-tick states.
func TestOutage500ms(t *testing.T) {
	if testing.Short() {
		t.Skip("WebRTC loopback run of about 6 s")
	}
	r := startRig(t, rigOptions{width: 320, height: 180, driveS: 8, record: true})
	waitFor(t, "LIVE ticks", 10*time.Second, func() bool { return r.relay.Stats().TicksLive > 45 })
	const outage = 500 * time.Millisecond
	cutAt := time.Now()
	if _, err := r.link.OutageNow(outage); err != nil {
		t.Fatal(err)
	}
	endAt := cutAt.Add(outage)
	live0 := r.relay.Stats().TicksLive
	time.Sleep(outage + 300*time.Millisecond)
	waitFor(t, "LIVE again after the cut", 5*time.Second, func() bool { return r.relay.Stats().TicksLive > live0+15 })
	cutoff := r.relay.Console().Cutoff()
	st := r.relay.Stats()
	r.stop() // closes the recording
	t.Logf("relay %+v", st)
	period := r.veh.FramePeriod()

	rec, err := recording.Open(r.recordDir)
	if err != nil {
		t.Fatalf("relay recording: %v", err)
	}
	ticks := readTicks(t, filepath.Join(r.recordDir, relay.ShownFile))

	t.Run("labelled", func(t *testing.T) {
		// Frames captured in [cut + 5 ms, end - 15 ms] certainly had all their packets
		// dropped (they go on the wire a few ms after capture); their ticks must be labelled.
		lo, hi := cutAt.Add(5*time.Millisecond).UnixMicro(), endAt.Add(-15*time.Millisecond).UnixMicro()
		n, notShown := 0, 0
		for _, f := range rec.Frames {
			if f.CaptureUs < lo || f.CaptureUs > hi {
				continue
			}
			n++
			switch s := ticks[f.Index]; s {
			case "PREDICTED", "STALE":
			case "NOT_SHOWN":
				// The display loop was more than a period behind (a
				// starved CPU): the tick was not drawn, and the console
				// says so; it was not passed as live.
				notShown++
			case "":
				t.Errorf("tick %d (capture %d us, in the cut) has no shown.csv row", f.Index, f.CaptureUs)
			default:
				t.Errorf("tick %d (capture %d us, in the cut) was %s", f.Index, f.CaptureUs, s)
			}
		}
		want := int((outage - 20*time.Millisecond) / period)
		if n < want-1 {
			t.Errorf("found %d ticks in the cut, want about %d: the recording's capture times do not match the vehicle's", n, want)
		}
		t.Logf("%d ticks inside the 500 ms cut, all labelled PREDICTED or STALE or, %d of them, NOT_SHOWN", n, notShown)
	})

	t.Run("keyframe request", func(t *testing.T) {
		r.mu.Lock()
		defer r.mu.Unlock()
		resume, pli, err := keyframeRequestDelay(r.wire, r.plis, endAt)
		if err != nil {
			t.Fatal(err)
		}
		d := pli.Sub(resume)
		t.Logf("first packet after the cut on the wire -> first keyframe request at the vehicle after the link's return: %v (frame period %v; negative: asked on the sender's telemetry, before its first video packet)", d, period)
		if d >= period {
			t.Errorf("keyframe request %v after the first packet past the cut, want < one frame period %v", d, period)
		}
	})

	t.Run("replay agreement", func(t *testing.T) {
		checkReplayAgreement(t, r.recordDir, cutoff, "e2e-outage-recording")
	})
}

// keyframeRequestDelay returns the first packet the link let through at or
// after endAt (the end of an outage) and the first keyframe request the
// vehicle received after the link's return: after the last packet the link
// dropped at or after endAt (the scripted end is not exact to the packet),
// or at or after endAt if it dropped none. Requests sent during the outage
// (a loss in its first 200 ms asks for one) say nothing about the reaction
// to its end, so they are not counted. The request may come before the
// first video packet through: the relay also sees the link return on the
// sender's telemetry and RTCP, which the link carries too. It fails if either
// is missing.
func keyframeRequestDelay(wire []wireEvent, plis []time.Time, endAt time.Time) (resume, pli time.Time, err error) {
	back := endAt
	for _, w := range wire {
		if w.at.Before(endAt) {
			continue
		}
		if w.kept {
			resume = w.at
			break
		}
		back = w.at.Add(time.Nanosecond)
	}
	if resume.IsZero() {
		return resume, pli, fmt.Errorf("no packet went through after the cut ended at %v", endAt)
	}
	for _, p := range plis {
		if !p.Before(back) {
			pli = p
			break
		}
	}
	if pli.IsZero() {
		return resume, pli, fmt.Errorf("no keyframe request after the link's return (%v)", back)
	}
	return resume, pli, nil
}

// TestKeyframeRequestDelay checks the measurement on made-up timelines: a
// request sent during the outage must not stand in for the reaction to the
// link's return, dropped packets after the cut do not count as its end, and
// a request after the return but before the first video packet counts.
func TestKeyframeRequestDelay(t *testing.T) {
	t0 := time.Unix(1000, 0)
	ms := func(n int) time.Time { return t0.Add(time.Duration(n) * time.Millisecond) }
	endAt := ms(500)
	wire := []wireEvent{{at: ms(10), kept: true}, {at: ms(100)}, {at: ms(505)}, {at: ms(512), kept: true}, {at: ms(545), kept: true}}
	for _, tc := range []struct {
		name    string
		plis    []time.Time
		want    time.Duration // from the first packet through (512 ms)
		wantErr bool
	}{
		{"prompt request", []time.Time{ms(514)}, 2 * time.Millisecond, false},
		{"request during the outage, late one after", []time.Time{ms(120), ms(320), ms(700)}, 188 * time.Millisecond, false},
		{"only requests during the outage", []time.Time{ms(120), ms(320), ms(505)}, 0, true},
		{"request on the sender's other packets, before its first video packet", []time.Time{ms(120), ms(508)}, -4 * time.Millisecond, false},
	} {
		t.Run(tc.name, func(t *testing.T) {
			resume, pli, err := keyframeRequestDelay(wire, tc.plis, endAt)
			if tc.wantErr {
				if err == nil {
					t.Fatalf("delay %v, want an error", pli.Sub(resume))
				}
				return
			}
			if err != nil {
				t.Fatal(err)
			}
			if !resume.Equal(ms(512)) || pli.Sub(resume) != tc.want {
				t.Errorf("resume %v, delay %v; want %v, %v", resume.Sub(t0), pli.Sub(resume), 512*time.Millisecond, tc.want)
			}
		})
	}
}

// checkReplayAgreement replays a relay's recording (closed) with bench.Replay,
// its recorded arrivals and the operator's cutoff, and wants the replay's
// per-tick states to be the relay's (shown.csv): at least 95 % the same
// state and 98 % the same LIVE or not, over the ticks in both that the relay
// did not leave NOT_SHOWN. On a miss it logs each differing tick and keeps
// the recording's CSVs and the replay's ticks in the artifact directory
// named artifact.
func checkReplayAgreement(t *testing.T, recordDir string, cutoff float64, artifact string) {
	t.Helper()
	rec, err := recording.Open(recordDir)
	if err != nil {
		t.Fatalf("relay recording: %v", err)
	}
	ticks := readTicks(t, filepath.Join(recordDir, relay.ShownFile))
	out := filepath.Join(t.TempDir(), "replay")
	pol := predictor.DefaultPolicy()
	pol.CutoffConfidence = cutoff
	_, err = bench.Replay(context.Background(), bench.ReplayConfig{
		Drive: recordDir, Out: out, ArrivalsFile: filepath.Join(recordDir, "arrivals.csv"),
		Policy: pol, AllowanceMs: relay.DefaultAllowanceMs, Examples: -1, Logger: quietLogger(),
	})
	if err != nil {
		t.Fatalf("bench.Replay on the relay's recording: %v", err)
	}
	replayed := readTicks(t, filepath.Join(out, bench.TicksFile))
	var both, same, liveSame, skipped int
	var diffs []string
	for k, ls := range ticks {
		rs, ok := replayed[k]
		if !ok {
			continue
		}
		if ls == display.StateNotShown.String() {
			skipped++
			continue
		}
		both++
		if ls == rs {
			same++
		} else if len(diffs) < 10 {
			diffs = append(diffs, fmt.Sprintf("tick %d live %s replay %s", k, ls, rs))
		}
		if (ls == "LIVE") == (rs == "LIVE") {
			liveSame++
		}
	}
	if both == 0 {
		t.Fatal("no tick in both the relay's shown.csv and the replay's ticks.csv")
	}
	agree, liveAgree := float64(same)/float64(both), float64(liveSame)/float64(both)
	t.Logf("replay vs live over %d ticks (%d NOT_SHOWN left out): state agreement %.1f%%, LIVE/not-LIVE agreement %.1f%%; first differences %v",
		both, skipped, 100*agree, 100*liveAgree, diffs)
	if t.Failed() || agree < 0.95 || liveAgree < 0.98 {
		arr, err := recording.ReadArrivals(filepath.Join(recordDir, "arrivals.csv"))
		if err == nil {
			byIdx := map[int]recording.Arrival{}
			for _, a := range arr {
				byIdx[a.Index] = a
			}
			for k := range ticks {
				if rs, ok := replayed[k]; ok && rs != ticks[k] {
					a := byIdx[k]
					t.Logf("tick %d: live %s, replay %s; capture %d, arrived %v at %+d us after deadline (deadline recorded %v)",
						k, ticks[k], rs, rec.Frames[k].CaptureUs, a.Arrived, a.ArrivalUs-a.DeadlineUs, a.HasDeadline)
				}
			}
		}
		t.Logf("live ticks %d, replayed ticks %d, recorded frames %d", len(ticks), len(replayed), len(rec.Frames))
		keep := filepath.Join(consoletest.ArtifactDir(t), artifact)
		_ = os.MkdirAll(keep, 0o755)
		for _, name := range []string{"arrivals.csv", "frames.csv", relay.ShownFile, "telemetry.csv"} {
			if data, err := os.ReadFile(filepath.Join(recordDir, name)); err == nil {
				_ = os.WriteFile(filepath.Join(keep, name), data, 0o644)
			}
		}
		if data, err := os.ReadFile(filepath.Join(out, bench.TicksFile)); err == nil {
			_ = os.WriteFile(filepath.Join(keep, "replay-ticks.csv"), data, 0o644)
		}
		t.Logf("relay recording CSVs and the replay's ticks.csv kept in %s", keep)
	}
	if liveAgree < 0.98 {
		t.Errorf("LIVE/not-LIVE agreement %.1f%%, want >= 98%%", 100*liveAgree)
	}
	if agree < 0.95 {
		t.Errorf("state agreement %.1f%%, want >= 95%%", 100*agree)
	}
}
