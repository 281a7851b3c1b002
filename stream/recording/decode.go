package recording

import (
	"fmt"
	"path/filepath"
	"strings"
)

// Column names of the format.
const (
	colIndex      = "index"
	colCaptureUs  = "t_capture_us"
	colFile       = "file"
	colTimeUs     = "t_us"
	colSpeed      = "speed_mps"
	colYawRate    = "yaw_rate_rps"
	colAccel      = "accel_mps2"
	colSteer      = "steer_rad"
	colArrivalUs  = "t_arrival_us"
	colDeadlineUs = "t_deadline_us"
	colRTP        = "rtp_timestamp"
	colX          = "x_m"
	colY          = "y_m"
	colYaw        = "yaw_rad"
)

// eachRow runs fn on every row. fn must only commit its result when rr.err
// is nil on return. A failing row is an error, except an unterminated last
// row, which is dropped with a warning (dropped = true): that is what a
// writer killed mid-line leaves.
func eachRow(t *table, fn func(rr *rowReader)) (warns []string, dropped bool, err error) {
	warns = append(warns, t.warns...)
	for _, r := range t.rows {
		rr := rowReader{t: t, r: r}
		if rr.check() {
			fn(&rr)
		}
		if rr.err != nil {
			if !r.terminated && !t.strictTail {
				warns = append(warns, fmt.Sprintf("dropped incomplete last line (no line end, the writer was probably stopped mid-write): %v", rr.err))
				return warns, true, nil
			}
			return nil, false, rr.err
		}
	}
	return warns, false, nil
}

// framesResult is the outcome of decoding frames.csv.
type framesResult struct {
	frames   []Frame
	hasFiles bool // the file column is present
	warns    []string
	dropped  bool // an incomplete last line was dropped
}

// decodeFrames parses frames.csv. checkFile, if the file column is present,
// is called with each (slash-separated, local) file name and returns an
// error if the file is unusable.
func decodeFrames(file string, data []byte, checkFile func(rel string) error) (framesResult, error) {
	t, err := splitTable(file, data, []string{colIndex, colCaptureUs}, []string{colFile, colRTP})
	if err != nil {
		return framesResult{}, err
	}
	res := framesResult{hasFiles: t.col(colFile) >= 0}
	var prevUs int64
	res.warns, res.dropped, err = eachRow(t, func(rr *rowReader) {
		idx := rr.int64(colIndex)
		us := rr.int64(colCaptureUs)
		rtpTS, hasRTP := rr.optRTP(colRTP)
		if rr.err != nil {
			return
		}
		n := len(res.frames)
		switch {
		case idx < 0:
			rr.fail(rr.colOf(colIndex), fmt.Errorf("%w: index %d is negative; frames are numbered 0, 1, 2, ...", ErrIndex, idx))
		case n > 0 && idx == int64(res.frames[n-1].Index):
			rr.fail(rr.colOf(colIndex), fmt.Errorf("%w: index %d appears twice; each frame needs its own index", ErrIndex, idx))
		case idx != int64(n):
			rr.fail(rr.colOf(colIndex), fmt.Errorf("%w: index %d, expected %d; frames are numbered 0, 1, 2, ... without gaps", ErrIndex, idx, n))
		case n > 0 && us <= prevUs:
			rr.fail(rr.colOf(colCaptureUs), fmt.Errorf("%w: t_capture_us %d after %d on the previous line; sort rows by capture time, without repeats", ErrNotIncreasing, us, prevUs))
		}
		f := Frame{Index: int(idx), CaptureUs: us, RTPTimestamp: rtpTS, HasRTP: hasRTP}
		if res.hasFiles && rr.err == nil {
			name, col, _ := rr.field(colFile)
			switch {
			case name == "" && !rr.r.terminated:
				// "3,99999," cut before its file name by a crash looks
				// like a lost frame; an unterminated last line is
				// never taken as one.
				rr.fail(col, fmt.Errorf("%w: file is blank on an incomplete last line", ErrFrameFile))
			case name == "":
				// A frame that never reached the recorder.
				f.NoImage = true
			case !filepath.IsLocal(filepath.FromSlash(name)) || strings.ContainsRune(name, '\\'):
				rr.fail(col, fmt.Errorf("%w: %q must be a relative path inside the recording directory, using '/'", ErrFrameFile, name))
			default:
				if err := checkFile(name); err != nil {
					rr.fail(col, fmt.Errorf("%w: %q: %v", ErrFrameFile, name, err))
				}
			}
			f.File = name
		}
		if rr.err == nil {
			res.frames = append(res.frames, f)
			prevUs = us
		}
	})
	return res, err
}

// decodeTelemetry parses telemetry.csv.
func decodeTelemetry(file string, data []byte) ([]TelemetryRow, []string, bool, error) {
	t, err := splitTable(file, data, []string{colTimeUs, colSpeed, colYawRate}, []string{colAccel, colSteer, colArrivalUs})
	if err != nil {
		return nil, nil, false, err
	}
	var out []TelemetryRow
	warns, dropped, err := eachRow(t, func(rr *rowReader) {
		var s TelemetryRow
		s.TimeUs = rr.int64(colTimeUs)
		s.SpeedMps = rr.float(colSpeed)
		s.YawRateRps = rr.float(colYawRate)
		s.AccelMps2, s.HasAccel = rr.optFloat(colAccel, false)
		s.SteerRad, s.HasSteer = rr.optFloat(colSteer, false)
		s.ArrivalUs, s.HasArrival = rr.optInt64(colArrivalUs, false)
		if rr.err != nil {
			return
		}
		if n := len(out); n > 0 && s.TimeUs <= out[n-1].TimeUs {
			rr.fail(rr.colOf(colTimeUs), fmt.Errorf("%w: t_us %d after %d on the previous line; sort samples by vehicle time, without repeats", ErrNotIncreasing, s.TimeUs, out[n-1].TimeUs))
			return
		}
		out = append(out, s)
	})
	if err != nil {
		return nil, nil, false, err
	}
	return out, warns, dropped, nil
}

// decodeArrivals parses an arrivals file. nFrames < 0 skips the check
// against the frames and makes an incomplete last line an error. Otherwise
// an index >= nFrames is an error, except, when tolerateTail is set, in a
// trailing run of such rows at the end of the file: that is what a writer
// leaves when frames.csv lost its last lines, and those rows are dropped
// with a warning.
func decodeArrivals(file string, data []byte, nFrames int, tolerateTail bool) ([]Arrival, []string, bool, error) {
	t, err := splitTable(file, data, []string{colIndex, colArrivalUs}, []string{colDeadlineUs, colCaptureUs, colRTP})
	if err != nil {
		return nil, nil, false, err
	}
	t.strictTail = nFrames < 0
	out := []Arrival{}
	seen := map[int64]int{} // index -> line
	beyond, firstBeyondLine, firstBeyondIdx := 0, 0, int64(0)
	warns, dropped, err := eachRow(t, func(rr *rowReader) {
		idx := rr.int64(colIndex)
		us, ok := rr.optInt64(colArrivalUs, false)
		dl, hasDl := rr.optInt64(colDeadlineUs, false)
		capUs, hasCap := rr.optInt64(colCaptureUs, false)
		rtpTS, hasRTP := rr.optRTP(colRTP)
		if rr.err != nil {
			return
		}
		unknown := func(idx int64, line int) {
			rr.r.line = line
			rr.fail(rr.colOf(colIndex), fmt.Errorf("%w: index %d, but frames.csv has frames 0..%d; remove the row or use the arrivals file of this recording", ErrUnknownIndex, idx, nFrames-1))
		}
		switch {
		case idx < 0:
			rr.fail(rr.colOf(colIndex), fmt.Errorf("%w: index %d is negative", ErrUnknownIndex, idx))
			return
		case nFrames >= 0 && idx >= int64(nFrames) && !tolerateTail:
			unknown(idx, rr.r.line)
			return
		case beyond > 0 && idx < int64(nFrames):
			// A known frame after an unknown one: the unknown row was not
			// a crash trace but a wrong index.
			unknown(firstBeyondIdx, firstBeyondLine)
			return
		}
		if line, dup := seen[idx]; dup {
			rr.fail(rr.colOf(colIndex), fmt.Errorf("%w: index %d already has an arrival on line %d", ErrIndex, idx, line))
			return
		}
		seen[idx] = rr.r.line
		if nFrames >= 0 && idx >= int64(nFrames) {
			if beyond == 0 {
				firstBeyondLine, firstBeyondIdx = rr.r.line, idx
			}
			beyond++
			return
		}
		if n := len(out); hasCap && n > 0 && out[n-1].HasCapture && capUs <= out[n-1].CaptureUs {
			rr.fail(rr.colOf(colCaptureUs), fmt.Errorf("%w: t_capture_us %d after %d on the previous line; rows follow capture order", ErrNotIncreasing, capUs, out[n-1].CaptureUs))
			return
		}
		out = append(out, Arrival{Index: int(idx), ArrivalUs: us, Arrived: ok, DeadlineUs: dl, HasDeadline: hasDl,
			CaptureUs: capUs, HasCapture: hasCap, RTPTimestamp: rtpTS, HasRTP: hasRTP})
	})
	if err != nil {
		return nil, nil, false, err
	}
	if beyond > 0 {
		warns = append(warns, fmt.Sprintf("%s: dropped %d arrivals at the end of the file for frames after the last frame (the writer was probably stopped)", file, beyond))
	}
	return out, warns, dropped, nil
}

// decodeTruth parses truth.csv against the frames: indices 0, 1, 2, ...
// with the frames' capture times. Rows for frames beyond the last frame
// (necessarily a trailing run) are an error unless tolerateBeyond, when they
// are dropped with a warning.
func decodeTruth(file string, data []byte, frames []Frame, tolerateBeyond bool) ([]Truth, []string, bool, error) {
	t, err := splitTable(file, data, []string{colIndex, colCaptureUs, colX, colY, colYaw, colSpeed, colYawRate}, nil)
	if err != nil {
		return nil, nil, false, err
	}
	out := []Truth{}
	beyond := 0
	warns, dropped, err := eachRow(t, func(rr *rowReader) {
		var p Truth
		idx := rr.int64(colIndex)
		p.CaptureUs = rr.int64(colCaptureUs)
		p.XM = rr.float(colX)
		p.YM = rr.float(colY)
		p.YawRad = rr.float(colYaw)
		p.SpeedMps = rr.float(colSpeed)
		p.YawRateRps = rr.float(colYawRate)
		if rr.err != nil {
			return
		}
		want := int64(len(out) + beyond)
		if idx != want {
			rr.fail(rr.colOf(colIndex), fmt.Errorf("%w: index %d, expected %d; truth rows follow frames 0, 1, 2, ...", ErrIndex, idx, want))
			return
		}
		if idx >= int64(len(frames)) {
			if tolerateBeyond {
				beyond++
				return
			}
			rr.fail(rr.colOf(colIndex), fmt.Errorf("%w: index %d, but frames.csv has frames 0..%d", ErrUnknownIndex, idx, len(frames)-1))
			return
		}
		if fr := frames[idx]; p.CaptureUs != fr.CaptureUs {
			rr.fail(rr.colOf(colCaptureUs), fmt.Errorf("t_capture_us %d %w (frame %d was captured at %d)", p.CaptureUs, ErrMismatch, idx, fr.CaptureUs))
			return
		}
		p.Index = int(idx)
		out = append(out, p)
	})
	if err != nil {
		return nil, nil, false, err
	}
	if beyond > 0 {
		warns = append(warns, fmt.Sprintf("%s: dropped %d truth rows for frames after the last complete frame", file, beyond))
	}
	if len(out) < len(frames) {
		warns = append(warns, fmt.Sprintf("%s: truth covers frames 0..%d of 0..%d", file, len(out)-1, len(frames)-1))
	}
	return out, warns, dropped, nil
}
