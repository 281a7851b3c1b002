package recording

import (
	"fmt"
	"os"

	"stopgap/internal/display"
)

// The two per-tick tables. Their names live here, beside the recording's
// other file names (CameraFile and the rest), so that no two files of the
// project share one.
const (
	// ShownFile is the live relay's per-tick table in a session's
	// recording directory: what the operator was shown, one row per
	// display tick, header "tick,state,age_ms,confidence,cutoff"; tick =
	// frames.csv index, state a display.State name (NOT_SHOWN for a tick
	// decided but not put on screen), age_ms the age of the real picture
	// behind it, confidence in [0, 1], cutoff the operator's cutoff the
	// tick was decided with. A replay of the session compares its own
	// decisions with it (ReadSessionTicks).
	ShownFile = "shown.csv"
	// ReplayTicksFile is the replay's per-tick table in a report
	// directory (bench.TicksCSVHeader gives its columns): what the replay
	// decided on every tick and the scores of each method.
	ReplayTicksFile = "ticks.csv"
)

// Column names of TicksFile.
const (
	colTick       = "tick"
	colState      = "state"
	colAgeMs      = "age_ms"
	colConfidence = "confidence"
	colCutoff     = "cutoff"
)

// SessionTick is one row of a session's TicksFile.
type SessionTick struct {
	Tick       int           // frames.csv index of the tick
	State      display.State // what the operator was shown (display.State's names)
	AgeMs      float64       // age of the shown picture, ms
	Confidence float64       // confidence in [0, 1]
	Cutoff     float64       // the operator's cutoff at that tick
}

// ReadSessionTicks reads a session's TicksFile strictly (a [*ParseError]
// names file, line and column), except that an incomplete last line left by
// a killed writer is dropped with a warning. Rows come out in file order;
// a tick listed twice is an error.
func ReadSessionTicks(path string) ([]SessionTick, []string, error) {
	b, err := os.ReadFile(path)
	if err != nil {
		return nil, nil, fmt.Errorf("recording: reading the session's ticks: %w", err)
	}
	return decodeSessionTicks(path, b)
}

func decodeSessionTicks(file string, data []byte) ([]SessionTick, []string, error) {
	t, err := splitTable(file, data, []string{colTick, colState}, []string{colAgeMs, colConfidence, colCutoff})
	if err != nil {
		return nil, nil, err
	}
	var out []SessionTick
	seen := map[int64]int{}
	warns, _, err := eachRow(t, func(rr *rowReader) {
		k := rr.int64(colTick)
		name, col, _ := rr.value(colState, true)
		age, _ := rr.optFloat(colAgeMs, false)
		conf, _ := rr.optFloat(colConfidence, false)
		cut, _ := rr.optFloat(colCutoff, false)
		if rr.err != nil {
			return
		}
		st, stErr := display.ParseState(name)
		switch {
		case k < 0:
			rr.fail(rr.colOf(colTick), fmt.Errorf("%w: tick %d is negative", ErrIndex, k))
		case stErr != nil:
			rr.fail(col, fmt.Errorf("%w: %w", ErrSyntax, stErr))
		default:
			if line, dup := seen[k]; dup {
				rr.fail(rr.colOf(colTick), fmt.Errorf("%w: tick %d already listed on line %d", ErrIndex, k, line))
			}
		}
		if rr.err != nil {
			return
		}
		seen[k] = rr.r.line
		out = append(out, SessionTick{Tick: int(k), State: st, AgeMs: age, Confidence: conf, Cutoff: cut})
	})
	if err != nil {
		return nil, nil, err
	}
	return out, warns, nil
}
