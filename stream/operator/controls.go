package operator

import (
	"bytes"
	"crypto/subtle"
	"encoding/json"
	"errors"
	"fmt"
	"io"
	"math"
	"net/http"
	"os"
	"path/filepath"
	"strconv"
	"strings"
	"sync"
	"time"

	"stopgap/filter"
	"stopgap/stream/console"
)

// The operator control log: what the operator commanded, recorded by the
// relay beside its recording so that a fit (and later the motion model) can
// use it.
//
// The operator station POSTs its inputs to the relay's /api/controls with
// the console's bearer token, as JSON objects of at most MaxControlBytes,
// one per line (Content-Type application/json or application/x-ndjson; up
// to MaxControlsPerPost lines per request, so a station sampling at 60 Hz
// can batch a few samples per request):
//
//	{"t_us": 1712345678901234, "operator": "alice", "steer_rad": -0.021, "throttle": 0.3, "brake": 0}
//	{"t_us": 1712345678921234, "operator": "alice", "steer_rad": -0.020, "speed_mps": 8.5}
//
// operator is the name of the operator profile driving (required; the
// relay rejects names that are not profiles). t_us is when the input was
// sampled (sent), microseconds on the operator
// station's clock; steer_rad the commanded front road-wheel angle in
// radians, positive to the left (ISO 8855), within ±MaxSteerRad; throttle
// and brake the pedal positions in [0, 1]; speed_mps the commanded
// longitudinal speed, within ±MaxCommandSpeedMps (a station whose vehicle
// takes a speed set-point sends it; the motion model then uses it). t_us,
// steer_rad and either both pedals or speed_mps (or all three) are
// required. The relay
// answers {"accepted": n, "rejected": m} (and "error" for the first
// rejected line); a bad line never stops the others. Lines are rejected and
// counted (ControlCounts) for a bad token, malformed or out-of-range values
// (JSON has no NaN: a NaN is malformed), an operator with no profile, and a
// t_us not after the same operator's previous one.
//
// ControlsFile (CSV, one header line, no quoting) gets one row per accepted
// sample, in arrival order:
//
//	t_us,t_arrival_us,steer_rad,throttle,brake,speed_mps
//
// with throttle and brake, or speed_mps, blank when the sample had none
// (files written before speed_mps and operator existed lack those columns).
// t_arrival_us is when the relay received it, microseconds on the receiver
// (relay) clock, the clock of arrivals.csv's deadlines: a fit lines controls
// up with the display ticks by t_arrival_us (on a station next to the relay
// the transfer takes milliseconds); t_us orders samples within a batch and
// is what a motion model fed with commanded steering would use once the
// station's clock is mapped to the vehicle's.
const (
	ControlsFile       = "controls.csv"
	ControlsHeader     = "t_us,t_arrival_us,steer_rad,throttle,brake,speed_mps,operator"
	MaxControlBytes    = 1024
	MaxControlsPerPost = 64
	// MaxSteerRad bounds a commanded road-wheel angle: 90 degrees, beyond
	// any vehicle's steering lock.
	MaxSteerRad = math.Pi / 2
	// MaxCommandSpeedMps bounds a commanded speed: 120 m/s (432 km/h).
	MaxCommandSpeedMps = 120
)

// requiredColumns are the ControlsFile columns every file has.
var requiredColumns = []string{"t_us", "t_arrival_us", "steer_rad", "throttle", "brake"}

// ErrBadControl is wrapped by errors about a control message or row.
var ErrBadControl = errors.New("operator: bad control sample")

// Control is one operator input sample; see ControlsFile.
type Control struct {
	TUs       int64   `json:"t_us"`
	Operator  string  `json:"operator"` // operator profile name; "" in files made before it existed
	SteerRad  float64 `json:"steer_rad"`
	Throttle  float64 `json:"throttle"` // used only if HasPedals
	Brake     float64 `json:"brake"`    // used only if HasPedals
	HasPedals bool    `json:"-"`
	SpeedMps  float64 `json:"speed_mps"` // commanded speed; used only if HasSpeed
	HasSpeed  bool    `json:"-"`
	ArrivalUs int64   `json:"-"` // receiver clock; set by the relay
}

// Command returns c as the motion filter's control input: the commanded
// road-wheel angle and, if given, speed, sent at TUs. TUs is taken as on
// the vehicle clock: the station's clock must be synchronised with the
// vehicle's. The pedals are not a command the model follows.
func (c Control) Command() filter.Command {
	return filter.Command{TimeUs: c.TUs, SteerRad: c.SteerRad, SpeedMps: c.SpeedMps, HasSpeed: c.HasSpeed}
}

// check validates the ranges.
func (c Control) check() error {
	switch {
	case c.TUs <= 0:
		return fmt.Errorf("%w: t_us %d; want microseconds > 0 on the station's clock", ErrBadControl, c.TUs)
	case !(math.Abs(c.SteerRad) <= MaxSteerRad):
		return fmt.Errorf("%w: steer_rad %v; want radians within ±%.4g", ErrBadControl, c.SteerRad, MaxSteerRad)
	case !c.HasPedals && !c.HasSpeed:
		return fmt.Errorf("%w: neither pedals (throttle and brake) nor speed_mps; send one of them", ErrBadControl)
	case c.HasPedals && !(c.Throttle >= 0 && c.Throttle <= 1):
		return fmt.Errorf("%w: throttle %v; want a pedal position in [0, 1]", ErrBadControl, c.Throttle)
	case c.HasPedals && !(c.Brake >= 0 && c.Brake <= 1):
		return fmt.Errorf("%w: brake %v; want a pedal position in [0, 1]", ErrBadControl, c.Brake)
	case c.HasSpeed && !(math.Abs(c.SpeedMps) <= MaxCommandSpeedMps):
		return fmt.Errorf("%w: speed_mps %v; want m/s within ±%d", ErrBadControl, c.SpeedMps, MaxCommandSpeedMps)
	}
	return nil
}

// DecodeControl decodes one control message strictly: one JSON object of at
// most MaxControlBytes with the keys t_us and steer_rad, throttle and brake
// (both or neither) and speed_mps (optional if the pedals are given), no
// other key, values in range.
func DecodeControl(data []byte) (Control, error) {
	if len(data) > MaxControlBytes {
		return Control{}, fmt.Errorf("%w: %d bytes, at most %d", ErrBadControl, len(data), MaxControlBytes)
	}
	var raw struct {
		TUs      *int64   `json:"t_us"`
		Operator *string  `json:"operator"`
		SteerRad *float64 `json:"steer_rad"`
		Throttle *float64 `json:"throttle"`
		Brake    *float64 `json:"brake"`
		SpeedMps *float64 `json:"speed_mps"`
	}
	dec := json.NewDecoder(bytes.NewReader(data))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&raw); err != nil {
		return Control{}, fmt.Errorf("%w: %v; send {\"t_us\", \"steer_rad\", \"throttle\", \"brake\"} and/or \"speed_mps\"", ErrBadControl, err)
	}
	if _, err := dec.Token(); err != io.EOF {
		return Control{}, fmt.Errorf("%w: extra data after the JSON object", ErrBadControl)
	}
	if raw.Operator == nil {
		return Control{}, fmt.Errorf("%w: operator is required: the name of your operator profile", ErrBadControl)
	}
	if raw.TUs == nil || raw.SteerRad == nil || (raw.Throttle == nil) != (raw.Brake == nil) || (raw.Throttle == nil && raw.SpeedMps == nil) {
		return Control{}, fmt.Errorf("%w: t_us, steer_rad and throttle and brake (or speed_mps) are required", ErrBadControl)
	}
	if err := console.CheckProfileName(*raw.Operator); err != nil {
		return Control{}, fmt.Errorf("%w: operator: %v", ErrBadControl, err)
	}
	c := Control{TUs: *raw.TUs, Operator: *raw.Operator, SteerRad: *raw.SteerRad}
	if raw.Throttle != nil {
		c.Throttle, c.Brake, c.HasPedals = *raw.Throttle, *raw.Brake, true
	}
	if raw.SpeedMps != nil {
		c.SpeedMps, c.HasSpeed = *raw.SpeedMps, true
	}
	return c, c.check()
}

// AppendJSON appends c as a control message (the inverse of DecodeControl).
func (c Control) AppendJSON(b []byte) []byte {
	b = append(b, `{"t_us":`...)
	b = strconv.AppendInt(b, c.TUs, 10)
	b = append(b, `,"operator":`...)
	b = strconv.AppendQuote(b, c.Operator)
	b = append(b, `,"steer_rad":`...)
	b = strconv.AppendFloat(b, c.SteerRad, 'g', -1, 64)
	if c.HasPedals {
		b = append(b, `,"throttle":`...)
		b = strconv.AppendFloat(b, c.Throttle, 'g', -1, 64)
		b = append(b, `,"brake":`...)
		b = strconv.AppendFloat(b, c.Brake, 'g', -1, 64)
	}
	if c.HasSpeed {
		b = append(b, `,"speed_mps":`...)
		b = strconv.AppendFloat(b, c.SpeedMps, 'g', -1, 64)
	}
	return append(b, '}')
}

// appendRow appends c as a ControlsFile row with its newline.
func (c Control) appendRow(b []byte) []byte {
	b = strconv.AppendInt(b, c.TUs, 10)
	b = append(b, ',')
	b = strconv.AppendInt(b, c.ArrivalUs, 10)
	b = append(b, ',')
	b = strconv.AppendFloat(b, c.SteerRad, 'g', -1, 64)
	for _, v := range []struct {
		x  float64
		ok bool
	}{{c.Throttle, c.HasPedals}, {c.Brake, c.HasPedals}, {c.SpeedMps, c.HasSpeed}} {
		b = append(b, ',')
		if v.ok {
			b = strconv.AppendFloat(b, v.x, 'g', -1, 64)
		}
	}
	b = append(b, ',')
	b = append(b, c.Operator...)
	return append(b, '\n')
}

// ControlsWriter appends rows to a recording's ControlsFile. Each row is one
// write(2) on a file opened for appending, so a crash leaves at most a torn
// last line, which ReadControls skips. Safe for concurrent use.
type ControlsWriter struct {
	mu   sync.Mutex
	f    *os.File
	line []byte
	path string
}

// CreateControls creates dir/ControlsFile (it must not exist) and writes the
// header.
func CreateControls(dir string) (*ControlsWriter, error) {
	path := filepath.Join(dir, ControlsFile)
	f, err := os.OpenFile(path, os.O_WRONLY|os.O_CREATE|os.O_EXCL|os.O_APPEND, 0o644)
	if err != nil {
		return nil, fmt.Errorf("operator: control log: %w", err)
	}
	if _, err := f.WriteString(ControlsHeader + "\n"); err != nil {
		f.Close()
		return nil, fmt.Errorf("operator: control log %s: %w", path, err)
	}
	return &ControlsWriter{f: f, path: path}, nil
}

// Write appends one row.
func (w *ControlsWriter) Write(c Control) error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.f == nil {
		return fmt.Errorf("operator: control log %s is closed", w.path)
	}
	w.line = c.appendRow(w.line[:0])
	if _, err := w.f.Write(w.line); err != nil {
		return fmt.Errorf("operator: control log %s: %w", w.path, err)
	}
	return nil
}

// Close syncs and closes the file.
func (w *ControlsWriter) Close() error {
	w.mu.Lock()
	defer w.mu.Unlock()
	if w.f == nil {
		return nil
	}
	err := w.f.Sync()
	if cerr := w.f.Close(); err == nil {
		err = cerr
	}
	w.f = nil
	return err
}

// ReadControls reads a ControlsFile.
func ReadControls(path string) ([]Control, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("operator: control log: %w", err)
	}
	return ParseControls(path, data)
}

// ParseControls decodes the content of a ControlsFile; name is quoted in
// errors. Columns are found by name in any order (unknown ones ignored); an
// incomplete last line (no newline: a crash while writing) is dropped.
// Errors are *FileError naming the line and field.
func ParseControls(name string, data []byte) ([]Control, error) {
	text := string(data)
	if i := strings.LastIndexByte(text, '\n'); i < len(text)-1 {
		text = text[:i+1] // torn last line
	}
	lines := strings.Split(strings.TrimSuffix(text, "\n"), "\n")
	if len(lines) == 0 || lines[0] == "" {
		return nil, &FileError{Path: name, Line: 1, Err: fmt.Errorf("%w: no header; want %s", ErrBadControl, ControlsHeader)}
	}
	col := map[string]int{}
	for i, h := range strings.Split(strings.TrimSuffix(lines[0], "\r"), ",") {
		col[h] = i
	}
	for _, need := range requiredColumns {
		if _, ok := col[need]; !ok {
			return nil, &FileError{Path: name, Line: 1, Err: fmt.Errorf("%w: no column %s; want %s", ErrBadControl, need, ControlsHeader)}
		}
	}
	out := make([]Control, 0, len(lines)-1)
	var lastArrival int64
	for n, line := range lines[1:] {
		ln := n + 2
		f := strings.Split(strings.TrimSuffix(line, "\r"), ",")
		get := func(k string) (string, error) {
			i := col[k]
			if i >= len(f) {
				return "", &FileError{Path: name, Line: ln, Err: fmt.Errorf("%w: %d fields, no %s", ErrBadControl, len(f), k)}
			}
			return f[i], nil
		}
		var c Control
		for _, k := range []string{"t_us", "t_arrival_us"} {
			s, err := get(k)
			if err != nil {
				return nil, err
			}
			v, err := strconv.ParseInt(s, 10, 64)
			if err != nil {
				return nil, &FileError{Path: name, Line: ln, Err: fmt.Errorf("%w: %s %q is not an integer of microseconds", ErrBadControl, k, s)}
			}
			if k == "t_us" {
				c.TUs = v
			} else {
				c.ArrivalUs = v
			}
		}
		var blank [2]bool // throttle, brake
		for _, k := range []string{"steer_rad", "throttle", "brake", "speed_mps"} {
			if _, ok := col[k]; !ok {
				continue // speed_mps: older files
			}
			s, err := get(k)
			if err != nil {
				return nil, err
			}
			if s == "" && k != "steer_rad" {
				switch k {
				case "throttle":
					blank[0] = true
				case "brake":
					blank[1] = true
				}
				continue
			}
			v, err := strconv.ParseFloat(s, 64)
			if err != nil {
				return nil, &FileError{Path: name, Line: ln, Err: fmt.Errorf("%w: %s %q is not a number", ErrBadControl, k, s)}
			}
			switch k {
			case "steer_rad":
				c.SteerRad = v
			case "throttle":
				c.Throttle = v
			case "brake":
				c.Brake = v
			default:
				c.SpeedMps, c.HasSpeed = v, true
			}
		}
		if i, ok := col["operator"]; ok && i < len(f) && f[i] != "" {
			if err := console.CheckProfileName(f[i]); err != nil {
				return nil, &FileError{Path: name, Line: ln, Err: fmt.Errorf("%w: operator: %v", ErrBadControl, err)}
			}
			c.Operator = f[i]
		}
		if blank[0] != blank[1] {
			return nil, &FileError{Path: name, Line: ln, Err: fmt.Errorf("%w: throttle and brake are both given or both blank", ErrBadControl)}
		}
		c.HasPedals = !blank[0]
		if err := c.check(); err != nil {
			return nil, &FileError{Path: name, Line: ln, Err: err}
		}
		if c.ArrivalUs < lastArrival {
			return nil, &FileError{Path: name, Line: ln, Err: fmt.Errorf("%w: t_arrival_us %d is before the previous row's %d; rows are in arrival order", ErrBadControl, c.ArrivalUs, lastArrival)}
		}
		lastArrival = c.ArrivalUs
		out = append(out, c)
	}
	return out, nil
}

// ControlCounts counts what the control channel received, per outcome.
type ControlCounts struct {
	Accepted uint64 `json:"accepted"`
	// BadToken counts requests refused for a missing or wrong token (their
	// lines are not read).
	BadToken uint64 `json:"bad_token"`
	// Invalid counts lines that are not a valid control message (malformed
	// JSON, NaN, missing keys, values out of range, too many lines).
	Invalid uint64 `json:"invalid"`
	// UnknownOperator counts lines naming no known operator profile.
	UnknownOperator uint64 `json:"unknown_operator"`
	// OutOfOrder counts lines whose t_us is not after the same operator's
	// previous accepted one.
	OutOfOrder uint64 `json:"out_of_order"`
	// NotRecorded counts valid lines the control log failed to write
	// (rejected: the sender may send them again).
	NotRecorded uint64 `json:"not_recorded"`
}

// Rejected returns the number of rejected lines (bad-token requests
// included).
func (c ControlCounts) Rejected() uint64 {
	return c.BadToken + c.Invalid + c.UnknownOperator + c.OutOfOrder + c.NotRecorded
}

// ControlsChannel serves POST /api/controls (see ControlsFile): it checks
// the bearer token (constant time), decodes each line, checks that the
// operator is known and that t_us increases per operator, stamps accepted
// lines with Now in microseconds (the receiver clock), appends them to Log
// and hands them to Sink. Bad lines are counted (Counts) and reported to
// the sender, never fatal: the others in the request still count.
//
// Configure the exported fields before serving; do not change them after.
type ControlsChannel struct {
	// Token is the console's bearer token; required.
	Token string
	// Log, if set, records accepted lines.
	Log *ControlsWriter
	// Now is the receiver clock; nil means time.Now.
	Now func() time.Time
	// Known reports whether name is an operator profile; nil accepts any
	// valid name (at most MaxControlOperators different ones).
	Known func(name string) bool
	// Sink, if set, receives every accepted control (for example the
	// relay's motion filter, as a command). It must not block.
	Sink func(Control)

	mu     sync.Mutex
	last   map[string]int64 // newest accepted t_us per operator
	counts ControlCounts
}

// MaxControlOperators bounds how many operators a channel without Known
// tracks.
const MaxControlOperators = 64

// Counts returns the counts so far.
func (ch *ControlsChannel) Counts() ControlCounts {
	ch.mu.Lock()
	defer ch.mu.Unlock()
	return ch.counts
}

// ServeHTTP implements http.Handler.
func (ch *ControlsChannel) ServeHTTP(rw http.ResponseWriter, r *http.Request) {
	reply := func(status int, v any) {
		rw.Header().Set("Content-Type", "application/json")
		rw.WriteHeader(status)
		json.NewEncoder(rw).Encode(v)
	}
	if r.Method != http.MethodPost {
		rw.Header().Set("Allow", "POST")
		reply(http.StatusMethodNotAllowed, map[string]string{"error": "POST control samples"})
		return
	}
	want := []byte("Bearer " + ch.Token)
	if ch.Token == "" || subtle.ConstantTimeCompare([]byte(r.Header.Get("Authorization")), want) != 1 {
		ch.mu.Lock()
		ch.counts.BadToken++
		ch.mu.Unlock()
		rw.Header().Set("WWW-Authenticate", `Bearer realm="stopgap"`)
		reply(http.StatusUnauthorized, map[string]string{"error": "missing or wrong bearer token; use the console token"})
		return
	}
	ct := r.Header.Get("Content-Type")
	if i := strings.IndexByte(ct, ';'); i >= 0 {
		ct = ct[:i]
	}
	if ct = strings.TrimSpace(ct); ct != "application/json" && ct != "application/x-ndjson" {
		reply(http.StatusUnsupportedMediaType, map[string]string{"error": "Content-Type must be application/json or application/x-ndjson"})
		return
	}
	body, err := io.ReadAll(http.MaxBytesReader(rw, r.Body, MaxControlsPerPost*(MaxControlBytes+1)))
	if err != nil {
		reply(http.StatusRequestEntityTooLarge, map[string]string{"error": fmt.Sprintf("at most %d lines of %d bytes", MaxControlsPerPost, MaxControlBytes)})
		return
	}
	now := ch.Now
	if now == nil {
		now = time.Now
	}
	arrival := now().UnixMicro()
	var res struct {
		Accepted int    `json:"accepted"`
		Rejected int    `json:"rejected"`
		Error    string `json:"error,omitempty"`
	}
	for n, line := range bytes.Split(body, []byte{'\n'}) {
		if len(bytes.TrimSpace(line)) == 0 {
			continue
		}
		c, err := ch.accept(n, line, arrival)
		if err != nil {
			res.Rejected++
			if res.Error == "" {
				res.Error = fmt.Sprintf("line %d: %v", n+1, err)
			}
			continue
		}
		res.Accepted++
		if ch.Sink != nil {
			ch.Sink(c)
		}
	}
	status := http.StatusOK
	if res.Accepted == 0 && res.Rejected > 0 {
		status = http.StatusBadRequest
	}
	reply(status, res)
}

// accept checks line n of a request and records it; it counts the outcome.
func (ch *ControlsChannel) accept(n int, line []byte, arrivalUs int64) (Control, error) {
	var c Control
	var err error
	if n >= MaxControlsPerPost {
		err = fmt.Errorf("%w: more than %d lines in one request", ErrBadControl, MaxControlsPerPost)
	} else {
		c, err = DecodeControl(line)
	}
	ch.mu.Lock()
	defer ch.mu.Unlock()
	if err != nil {
		ch.counts.Invalid++
		return c, err
	}
	prev, seen := ch.last[c.Operator]
	switch {
	case ch.Known != nil && !ch.Known(c.Operator), ch.Known == nil && !seen && len(ch.last) >= MaxControlOperators:
		ch.counts.UnknownOperator++
		return c, fmt.Errorf("%w: operator %q has no profile; send the name of your operator profile", ErrBadControl, c.Operator)
	case seen && c.TUs <= prev:
		ch.counts.OutOfOrder++
		return c, fmt.Errorf("%w: t_us %d is not after this operator's previous %d; send samples in order on one clock", ErrBadControl, c.TUs, prev)
	}
	if ch.last == nil {
		ch.last = map[string]int64{}
	}
	c.ArrivalUs = arrivalUs
	if ch.Log != nil {
		if err := ch.Log.Write(c); err != nil {
			ch.counts.NotRecorded++
			return c, err
		}
	}
	ch.last[c.Operator] = c.TUs
	ch.counts.Accepted++
	return c, nil
}
