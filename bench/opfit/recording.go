package opfit

import (
	"errors"
	"fmt"
	"io/fs"
	"math"
	"os"
	"path/filepath"
	"sort"
	"strconv"
	"strings"

	"stopgap/internal/display"
	"stopgap/stream/operator"
	"stopgap/stream/recording"
	"stopgap/stream/relay"
)

// PathFile, optional in a recording, is the reference route: CSV with the
// header "x_m,y_m", points in driving order in the frame of truth.csv (or of
// the dead-reckoned telemetry: the vehicle frame at the start of the drive).
const PathFile = "path.csv"

// readPath reads a PathFile.
func readPath(path string) (Path, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return Path{}, err
	}
	lines := strings.Split(strings.TrimSpace(string(data)), "\n")
	if lines[0] != "x_m,y_m" {
		return Path{}, fmt.Errorf("%s:1: header %q, want x_m,y_m: %w", path, lines[0], ErrBadData)
	}
	var p Path
	for n, l := range lines[1:] {
		f := strings.Split(l, ",")
		var x, y float64
		var err1, err2 error
		if len(f) == 2 {
			x, err1 = strconv.ParseFloat(f[0], 64)
			y, err2 = strconv.ParseFloat(f[1], 64)
		}
		if len(f) != 2 || err1 != nil || err2 != nil || math.IsNaN(x+y) || math.IsInf(x+y, 0) {
			return Path{}, fmt.Errorf("%s:%d: want two finite numbers x_m,y_m: %w", path, n+2, ErrBadData)
		}
		p.XM, p.YM = append(p.XM, x), append(p.YM, y)
	}
	if len(p.XM) < 2 {
		return Path{}, fmt.Errorf("%s: fewer than 2 points: %w", path, ErrBadData)
	}
	return p, nil
}

// LoadSession reads one recorded drive for a fit: the recording (with
// arrivals.csv holding the live display deadlines), the relay's
// relay.ShownFile
// and the operator's control log (operator.ControlsFile).
//
//   - Display times: a LIVE tick at its frame's arrival (it is shown at
//     once), any other at its deadline; receiver clock.
//   - Controls: the station's t_us mapped to the receiver clock by the
//     smallest t_arrival_us - t_us of the drive (the sample that waited
//     least), so that samples sent in one batch keep their spacing.
//   - True state: truth.csv when present (a simulated drive); otherwise the
//     path dead-reckoned from the full telemetry.csv (speed and yaw rate,
//     trapezoidal rule), which is the best record of where the vehicle went.
//     The vehicle and receiver clocks are taken as synchronised (NTP or
//     PTP); an offset between them shifts the reference by that much.
//   - Reference path: PathFile when present (the route the operator was
//     to follow, e.g. a simulated road's centre line); otherwise the driven
//     path itself, every 0.25 m: the follower is then asked what it would
//     have commanded to drive where the operator drove, which cannot see an
//     operator who was misled off the intended route and stayed off it.
func LoadSession(dir string) (Session, error) {
	rec, err := recording.Open(dir)
	if err != nil {
		return Session{}, err
	}
	if rec.Arrivals == nil {
		if err := rec.LoadArrivals(filepath.Join(dir, recording.ArrivalsFile)); err != nil {
			return Session{}, err
		}
	}
	ticks, err := readTicks(filepath.Join(dir, relay.ShownFile), rec)
	if err != nil {
		return Session{}, err
	}
	ctl, err := operator.ReadControls(filepath.Join(dir, operator.ControlsFile))
	if err != nil {
		if errors.Is(err, fs.ErrNotExist) {
			return Session{}, fmt.Errorf("%s: no %s: record with the operator station sending its controls: %w", dir, operator.ControlsFile, ErrTooLittleData)
		}
		return Session{}, err
	}
	if len(ctl) < 3 {
		return Session{}, fmt.Errorf("%s: %d control samples: %w", dir, len(ctl), ErrTooLittleData)
	}
	offset := int64(math.MaxInt64)
	for _, c := range ctl {
		offset = min(offset, c.ArrivalUs-c.TUs)
	}
	controls := make([]Control, len(ctl))
	for i, c := range ctl {
		controls[i] = Control{TUs: c.TUs + offset, SteerRad: c.SteerRad, Throttle: c.Throttle, Brake: c.Brake}
	}
	sort.SliceStable(controls, func(i, j int) bool { return controls[i].TUs < controls[j].TUs })

	var ts []int64
	var poses []Pose
	if len(rec.Truth) > 1 {
		for _, t := range rec.Truth {
			ts = append(ts, t.CaptureUs)
			poses = append(poses, Pose{XM: t.XM, YM: t.YM, YawRad: t.YawRad})
		}
	} else {
		if len(rec.Telemetry) < 2 {
			return Session{}, fmt.Errorf("%s: no truth.csv and %d telemetry samples: %w", dir, len(rec.Telemetry), ErrTooLittleData)
		}
		p := Pose{}
		for i, s := range rec.Telemetry {
			if i > 0 {
				prev := rec.Telemetry[i-1]
				h := float64(s.TimeUs-prev.TimeUs) / 1e6
				v := (s.SpeedMps + prev.SpeedMps) / 2
				yaw := p.YawRad + h*(s.YawRateRps+prev.YawRateRps)/2
				mid := (p.YawRad + yaw) / 2
				p = Pose{XM: p.XM + h*v*math.Cos(mid), YM: p.YM + h*v*math.Sin(mid), YawRad: yaw}
			}
			ts = append(ts, s.TimeUs)
			poses = append(poses, p)
		}
	}
	path, err := readPath(filepath.Join(dir, PathFile))
	if errors.Is(err, fs.ErrNotExist) {
		last := poses[0]
		path.XM, path.YM = []float64{last.XM}, []float64{last.YM}
		for _, p := range poses[1:] {
			if math.Hypot(p.XM-last.XM, p.YM-last.YM) >= 0.25 {
				path.XM, path.YM = append(path.XM, p.XM), append(path.YM, p.YM)
				last = p
			}
		}
	} else if err != nil {
		return Session{}, err
	}
	if len(path.XM) < 2 {
		return Session{}, fmt.Errorf("%s: the vehicle did not move: %w", dir, ErrTooLittleData)
	}
	truth := func(tUs int64) (Pose, bool) {
		i := sort.Search(len(ts), func(i int) bool { return ts[i] >= tUs })
		if i == 0 || i == len(ts) {
			return Pose{}, false
		}
		a, b := poses[i-1], poses[i]
		f := float64(tUs-ts[i-1]) / float64(ts[i]-ts[i-1])
		return Pose{XM: a.XM + f*(b.XM-a.XM), YM: a.YM + f*(b.YM-a.YM), YawRad: a.YawRad + f*(b.YawRad-a.YawRad)}, true
	}
	return Session{Ticks: ticks, Controls: controls, Truth: truth, Path: path}, nil
}

// readTicks reads the relay's shown.csv and gives each tick its display
// time from the recording's arrivals.
func readTicks(path string, rec *recording.Recording) ([]Tick, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("opfit: %w; a fit needs a drive recorded by the relay", err)
	}
	arr := make(map[int]recording.Arrival, len(rec.Arrivals))
	for _, a := range rec.Arrivals {
		arr[a.Index] = a
	}
	text := string(data)
	if i := strings.LastIndexByte(text, '\n'); i < len(text)-1 {
		text = text[:i+1] // a torn last line (crash)
	}
	lines := strings.Split(strings.TrimSuffix(text, "\n"), "\n")
	col := map[string]int{}
	for i, h := range strings.Split(lines[0], ",") {
		col[h] = i
	}
	for _, need := range []string{"tick", "state", "confidence", "cutoff"} {
		if _, ok := col[need]; !ok {
			return nil, fmt.Errorf("%s:1: no column %s: %w", path, need, ErrBadData)
		}
	}
	var out []Tick
	for n, line := range lines[1:] {
		f := strings.Split(line, ",")
		bad := func(why string) error { return fmt.Errorf("%s:%d: %s: %w", path, n+2, why, ErrBadData) }
		if len(f) < len(col) {
			return nil, bad("too few fields")
		}
		if f[col["state"]] == display.StateNotShown.String() {
			continue
		}
		shown, err := ParseShown(f[col["state"]])
		if err != nil {
			return nil, bad(err.Error())
		}
		idx, err1 := strconv.Atoi(f[col["tick"]])
		conf, err2 := strconv.ParseFloat(f[col["confidence"]], 64)
		cut, err3 := strconv.ParseFloat(f[col["cutoff"]], 64)
		if err1 != nil || err2 != nil || err3 != nil || !(conf >= 0 && conf <= 1) || !(cut >= 0 && cut <= 1) {
			return nil, bad("tick, confidence or cutoff is not a valid number")
		}
		a, ok := arr[idx]
		if !ok || !a.HasDeadline {
			return nil, bad(fmt.Sprintf("tick %d has no t_deadline_us in arrivals.csv", idx))
		}
		at := a.DeadlineUs
		if shown == ShownLive && a.Arrived && a.ArrivalUs < at {
			at = a.ArrivalUs
		}
		out = append(out, Tick{DisplayUs: at, Shown: shown, Confidence: conf, Cutoff: cut})
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].DisplayUs < out[j].DisplayUs })
	return out, nil
}
