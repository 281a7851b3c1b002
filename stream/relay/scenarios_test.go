package relay

import (
	"context"
	"fmt"
	"math"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"testing"

	"gocv.io/x/gocv"

	"stopgap/bench"
	"stopgap/predictor"
	"stopgap/stream/console"
	"stopgap/stream/recording"
)

// decisionScenarios is the one table of scenarios that both drivers of the
// display clock (cadence.Clock) run: the live relay on a fake clock, and the
// offline replay of what the relay recorded. Frames are 30 fps; telemetry is
// sent with each frame and lost with it.
var decisionScenarios = []struct {
	name   string
	frames int
	srFrom int              // first frame delivered after the first sender report
	drop   func(i int) bool // frames lost on the link
	lateUs map[int]int64    // extra link delay per frame
	// cutoffFrom sets the operator's cutoff once the console was sent
	// tick i (the operator reacts to what is shown); the relay reads it
	// once per tick.
	cutoffFrom map[int]float64
}{
	{name: "clean", frames: 30},
	{name: "gap", frames: 40, drop: between(15, 22)},
	{name: "losses at session start", frames: 40, drop: between(0, 2)},
	{name: "losses at session start, then a gap", frames: 40, drop: func(i int) bool { return i <= 1 || i >= 10 && i <= 13 }},
	{name: "late frames", frames: 40, lateUs: map[int]int64{4: 30_000, 5: 30_000, 20: 45_000}},
	{name: "late frame in a gap", frames: 40, drop: between(15, 18), lateUs: map[int]int64{19: 70_000}},
	{name: "first frame very late", frames: 40, lateUs: map[int]int64{0: 70_000}},
	{name: "sender report late", frames: 40, srFrom: 6},
	{name: "sender report late, gap at the switch", frames: 40, srFrom: 6, drop: between(6, 8)},
	{name: "sender report late, first vehicle-clock frame very late", frames: 40, srFrom: 5, lateUs: map[int]int64{5: 70_000}},
	{name: "cutoff changed mid-gap", frames: 45, drop: between(10, 32), cutoffFrom: map[int]float64{0: 0.3, 17: 0.999, 25: 0.05}},
	{name: "gap longer than the age cap", frames: 50, drop: between(8, 40)},
	{name: "outage past the age cap, first frame after it two ticks late", frames: 60, drop: between(8, 40), lateUs: map[int]int64{41: 75_000, 42: 50_000}},
}

func setCutoff(t *testing.T, r *Relay, c float64) {
	if _, err := r.console.SetCutoff(console.CutoffRequest{Cutoff: &c}); err != nil {
		t.Errorf("setting the cutoff to %v: %v", c, err)
	}
}

func between(lo, hi int) func(int) bool { return func(i int) bool { return i >= lo && i <= hi } }

// TestRelayAndReplayDecideAlike runs decisionScenarios through the relay,
// then replays each recording with its recorded arrivals and the cutoffs the
// relay recorded, and requires identical rows: state, age (ms, 3 decimals),
// confidence and cutoff (4 decimals) on every tick. Where the relay's
// schedule is all in the recording (the sender report from the start), the
// replay also runs on its own schedule, without the recorded deadlines: the
// clock's rule must give the relay's decisions again. There the replay's
// grid starts from the recording's mean frame interval, not the relay's
// configured rate, so grid times (and ages) may differ by 1 µs, which can
// move a confidence computed right at a telemetry sample's time: states and
// cutoffs must be identical, ages within 2 µs.
func TestRelayAndReplayDecideAlike(t *testing.T) {
	for _, sc := range decisionScenarios {
		t.Run(sc.name, func(t *testing.T) {
			clock := &fakeClock{}
			dir := filepath.Join(t.TempDir(), "rec")
			r := testRelay(t, clock, dir)
			v := newFakeVehicle(t, clock, sc.frames, sc.drop)
			v.srFrom = sc.srFrom
			v.extraUs = func(i int) int64 { return sc.lateUs[i] }
			if c, ok := sc.cutoffFrom[0]; ok {
				setCutoff(t, r, c)
			}
			// Called on the display loop after each tick went out.
			r.TraceFrames(func(tr FrameTrace) {
				for i, c := range sc.cutoffFrom {
					if i > 0 && tr.TickUs == captureUs(i) {
						setCutoff(t, r, c)
					}
				}
			})
			runSession(t, r, v)
			relayRows := relayDecisionRows(t, dir)
			got := replayDecisionRows(t, dir, filepath.Join(dir, recording.ArrivalsFile))
			compareDecisionRows(t, "recorded schedule", relayRows, got)
			if sc.srFrom == 0 {
				own := withoutDeadlines(t, dir)
				compareStates(t, "replay's own schedule", relayRows, replayDecisionRows(t, dir, own))
			}
			if len(sc.cutoffFrom) > 0 {
				seen := map[string]bool{}
				for _, row := range relayRows {
					seen[row[strings.LastIndexByte(row, ',')+1:]] = true
				}
				if len(seen) < 2 {
					t.Errorf("the relay decided every tick with one cutoff %v; the scenario does not change it mid-gap", seen)
				}
			}
		})
	}
}

// relayDecisionRows returns the relay's ticks table rows without the tick
// column ("state,age_ms,confidence,cutoff"), in tick order.
func relayDecisionRows(t *testing.T, dir string) []string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(dir, ShownFile))
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSuffix(string(b), "\n"), "\n")
	if lines[0]+"\n" != ticksHeader {
		t.Fatalf("%s header %q", ShownFile, lines[0])
	}
	var out []string
	for n, l := range lines[1:] {
		k, rest, _ := strings.Cut(l, ",")
		if k != itoa(n) {
			t.Fatalf("%s line %d: tick %q", ShownFile, n+2, k)
		}
		out = append(out, rest)
	}
	return out
}

// replayDecisionRows replays the recording in dir with the arrivals file
// and the relay's recorded cutoffs and returns its rows as
// relayDecisionRows does.
func replayDecisionRows(t *testing.T, dir, arrivals string) []string {
	t.Helper()
	ticks, _, err := recording.ReadSessionTicks(filepath.Join(dir, ShownFile))
	if err != nil {
		t.Fatal(err)
	}
	var rows []string
	used := map[int][]float64{} // the cutoffs the replay read, per tick
	cutoffAt := func(k int) (float64, bool) {
		if k < len(ticks) {
			used[k] = append(used[k], ticks[k].Cutoff)
			return ticks[k].Cutoff, true
		}
		return 0, false
	}
	_, err = bench.Replay(context.Background(), bench.ReplayConfig{
		Drive: dir, Out: filepath.Join(t.TempDir(), "report"), ArrivalsFile: arrivals,
		Policy: predictor.DefaultPolicy(), CutoffAt: cutoffAt, Examples: -1, Logger: quietLogger(),
		Shown: func(row bench.TickRow, _ gocv.Mat) error {
			c := "not read once"
			if u := used[row.Tick]; len(u) == 1 {
				c = fmt.Sprintf("%.4f", u[0])
			}
			rows = append(rows, fmt.Sprintf("%s,%.3f,%.4f,%s", row.State, row.AgeMs, row.Confidence, c))
			return nil
		},
	})
	if err != nil {
		t.Fatalf("replay: %v", err)
	}
	return rows
}

// withoutDeadlines writes a copy of dir's arrivals file without the
// t_deadline_us column and returns its path.
func withoutDeadlines(t *testing.T, dir string) string {
	t.Helper()
	b, err := os.ReadFile(filepath.Join(dir, recording.ArrivalsFile))
	if err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSuffix(string(b), "\n"), "\n")
	drop := -1
	for i, h := range strings.Split(lines[0], ",") {
		if h == "t_deadline_us" {
			drop = i
		}
	}
	if drop < 0 {
		t.Fatalf("arrivals header %q has no t_deadline_us", lines[0])
	}
	var sb strings.Builder
	for _, l := range lines {
		f := strings.Split(l, ",")
		sb.WriteString(strings.Join(append(f[:drop:drop], f[drop+1:]...), ","))
		sb.WriteByte('\n')
	}
	path := filepath.Join(t.TempDir(), recording.ArrivalsFile)
	if err := os.WriteFile(path, []byte(sb.String()), 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// compareDecisionRows requires the replay's rows to equal the relay's.
func compareDecisionRows(t *testing.T, what string, relay, replay []string) {
	t.Helper()
	if len(relay) == 0 {
		t.Fatalf("%s: the relay recorded no ticks", what)
	}
	if len(replay) != len(relay) {
		t.Errorf("%s: replay has %d ticks, the relay %d", what, len(replay), len(relay))
	}
	var diff []string
	for k := range min(len(relay), len(replay)) {
		if relay[k] != replay[k] {
			diff = append(diff, fmt.Sprintf("tick %d: relay %s, replay %s", k, relay[k], replay[k]))
		}
	}
	if len(diff) > 0 {
		t.Errorf("%s: %d of %d ticks differ:\n%s", what, len(diff), len(relay), strings.Join(diff, "\n"))
	}
}

// compareStates requires the replay's states and cutoffs to equal the
// relay's, and ages to agree within 2 µs.
func compareStates(t *testing.T, what string, relay, replay []string) {
	t.Helper()
	if len(replay) != len(relay) {
		t.Errorf("%s: replay has %d ticks, the relay %d", what, len(replay), len(relay))
	}
	var diff []string
	for k := range min(len(relay), len(replay)) {
		a, b := strings.Split(relay[k], ","), strings.Split(replay[k], ",")
		ageA, errA := strconv.ParseFloat(a[1], 64)
		ageB, errB := strconv.ParseFloat(b[1], 64)
		if a[0] != b[0] || a[3] != b[3] || errA != nil || errB != nil || math.Abs(ageA-ageB) > 0.0021 {
			diff = append(diff, fmt.Sprintf("tick %d: relay %s, replay %s", k, relay[k], replay[k]))
		}
	}
	if len(diff) > 0 {
		t.Errorf("%s: %d of %d ticks differ:\n%s", what, len(diff), len(relay), strings.Join(diff, "\n"))
	}
}
