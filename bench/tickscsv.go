package bench

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"os"
	"strconv"
)

// ErrTicksCSV means a ticks.csv file cannot be read back; the wrapping
// *TicksCSVError names the file, line and column.
var ErrTicksCSV = errors.New("bench: ticks.csv unreadable")

// TicksCSVError reports one bad cell or line of a ticks.csv file. It wraps
// ErrTicksCSV and the cause.
type TicksCSVError struct {
	File   string // path as given
	Line   int    // 1-based line, 0 for the whole file
	Column string // column name, "" for the whole line
	Err    error
}

// Error implements error.
func (e *TicksCSVError) Error() string {
	where := e.File
	if e.Line > 0 {
		where += ":" + strconv.Itoa(e.Line)
	}
	if e.Column != "" {
		where += " column " + e.Column
	}
	return fmt.Sprintf("%s: %v; the file is not a ticks.csv written by this version, rerun the replay that wrote it", where, e.Err)
}

// Unwrap returns ErrTicksCSV and the cause.
func (e *TicksCSVError) Unwrap() []error { return []error{ErrTicksCSV, e.Err} }

// ReadTicksCSV reads back a ticks.csv written by a replay report (see
// TicksCSVHeader): the header must match exactly, every row must pass
// TickRow.Validate. Numbers are read with strconv.ParseFloat, which inverts
// the shortest exact form the writer uses, so a row reads back to the
// same bits it was written from; an empty cell is NaN, "inf" is +Inf.
// name is used in errors only.
func ReadTicksCSV(r io.Reader, name string) ([]TickRow, error) {
	cr := csv.NewReader(r)
	cr.ReuseRecord = true
	head := TicksCSVHeader()
	cr.FieldsPerRecord = len(head)
	bad := func(line int, col string, err error) error {
		return &TicksCSVError{File: name, Line: line, Column: col, Err: err}
	}
	rec, err := cr.Read()
	if err == io.EOF {
		return nil, bad(0, "", errors.New("empty file, no header"))
	}
	if err != nil {
		return nil, bad(1, "", err)
	}
	for i, h := range head {
		if rec[i] != h {
			return nil, bad(1, h, fmt.Errorf("header has %q where %q belongs", rec[i], h))
		}
	}
	var rows []TickRow
	for {
		rec, err := cr.Read()
		if err == io.EOF {
			return rows, nil
		}
		line, _ := cr.FieldPos(0)
		if err != nil {
			return nil, bad(line, "", err)
		}
		var perr error
		col := 0
		num := func() float64 {
			c := col
			col++
			if perr != nil {
				return 0
			}
			switch s := rec[c]; s {
			case "":
				return math.NaN()
			case "inf":
				return math.Inf(1)
			case "-inf":
				return math.Inf(-1)
			default:
				v, err := strconv.ParseFloat(s, 64)
				if err != nil || math.IsNaN(v) || math.IsInf(v, 0) {
					perr = bad(line, head[c], fmt.Errorf("%q is not a number (empty, inf or a finite decimal)", s))
				}
				return v
			}
		}
		var r TickRow
		tick, err := strconv.Atoi(rec[0])
		if err != nil || tick < 0 {
			return nil, bad(line, head[0], fmt.Errorf("%q is not a tick index >= 0", rec[0]))
		}
		target, err := strconv.ParseInt(rec[1], 10, 64)
		if err != nil {
			return nil, bad(line, head[1], fmt.Errorf("%q is not a time in us", rec[1]))
		}
		r.Tick, r.TargetUs, r.State = tick, target, rec[2]
		col = 3
		r.AgeMs = num()
		r.Confidence = num()
		for _, s := range []*Scores{&r.Hold, &r.Rotation, &r.Predicted} {
			s.PSNRdB, s.SSIM, s.MAE = num(), num(), num()
		}
		r.SynthMs, r.UnfilledShare, r.LabelShare = num(), num(), num()
		r.Warp.PSNRdB, r.Warp.SSIM, r.Warp.MAE = num(), num(), num()
		r.SigmaPx, r.MisalignPx, r.MisalignMrad, r.TruthMisalignMrad = num(), num(), num(), num()
		r.MarkRecall, r.MarkPrecision, r.MarkChangedShare, r.MarkMarkedShare = num(), num(), num(), num()
		if perr != nil {
			return nil, perr
		}
		if err := r.Validate(); err != nil {
			return nil, bad(line, "", err)
		}
		if n := len(rows); n > 0 && r.Tick <= rows[n-1].Tick {
			return nil, bad(line, head[0], fmt.Errorf("tick %d after tick %d, want increasing ticks", r.Tick, rows[n-1].Tick))
		}
		rows = append(rows, r)
	}
}

// readTicksFile reads path with ReadTicksCSV.
func readTicksFile(path string) ([]TickRow, error) {
	f, err := os.Open(path)
	if err != nil {
		return nil, fmt.Errorf("bench: %w", err)
	}
	defer f.Close()
	return ReadTicksCSV(f, path)
}

// TicksCSVHeader returns the column names of ticks.csv (a new slice).
// Metric columns are <method>_psnr_db, <method>_ssim, <method>_mae for
// hold, rotation and predicted. Empty cells are NaN (not measured); an
// infinite PSNR (identical frames) is written as "inf".
func TicksCSVHeader() []string {
	h := []string{"tick", "target_us", "state", "age_ms", "confidence"}
	for _, m := range Methods() {
		h = append(h, m.String()+"_psnr_db", m.String()+"_ssim", m.String()+"_mae")
	}
	return append(h, "synth_ms", "unfilled_share", "label_share",
		"warp_psnr_db", "warp_ssim", "warp_mae", "sigma_px", "misalign_px", "misalign_mrad", "truth_misalign_mrad",
		"mark_recall", "mark_precision", "mark_changed_share", "mark_marked_share")
}

// csvFloat formats v for ticks.csv: shortest exact form, "" for NaN,
// "inf"/"-inf" for infinities.
func csvFloat(v float64) string {
	switch {
	case math.IsNaN(v):
		return ""
	case math.IsInf(v, 1):
		return "inf"
	case math.IsInf(v, -1):
		return "-inf"
	}
	return strconv.FormatFloat(v, 'g', -1, 64)
}

func writeTicksCSV(path string, ticks []TickRow) error {
	return writeFile(path, func(w io.Writer) error { return writeTicks(w, ticks) })
}

// writeTicks writes ticks as ticks.csv to w (see TicksCSVHeader).
func writeTicks(w io.Writer, ticks []TickRow) error {
	cw := csv.NewWriter(w)
	if err := cw.Write(TicksCSVHeader()); err != nil {
		return err
	}
	rec := make([]string, 0, len(TicksCSVHeader()))
	for i := range ticks {
		r := &ticks[i]
		rec = append(rec[:0], strconv.Itoa(r.Tick), strconv.FormatInt(r.TargetUs, 10), r.State,
			csvFloat(r.AgeMs), csvFloat(r.Confidence))
		for _, m := range Methods() {
			sc := r.MethodScores(m)
			rec = append(rec, csvFloat(sc.PSNRdB), csvFloat(sc.SSIM), csvFloat(sc.MAE))
		}
		rec = append(rec, csvFloat(r.SynthMs), csvFloat(r.UnfilledShare), csvFloat(r.LabelShare),
			csvFloat(r.Warp.PSNRdB), csvFloat(r.Warp.SSIM), csvFloat(r.Warp.MAE),
			csvFloat(r.SigmaPx), csvFloat(r.MisalignPx), csvFloat(r.MisalignMrad), csvFloat(r.TruthMisalignMrad),
			csvFloat(r.MarkRecall), csvFloat(r.MarkPrecision), csvFloat(r.MarkChangedShare), csvFloat(r.MarkMarkedShare))
		if err := cw.Write(rec); err != nil {
			return err
		}
	}
	cw.Flush()
	return cw.Error()
}
