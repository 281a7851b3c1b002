package recording

import (
	"bytes"
	"fmt"
	"math"
	"strconv"
	"strings"
)

// row is one data line of a CSV file.
type row struct {
	line       int      // 1-based line number
	fields     []string // trimmed fields
	terminated bool     // the line ended with '\n'
}

// table is a CSV file split into header and rows, not yet interpreted.
type table struct {
	file  string
	ncol  int            // number of header fields
	cols  map[string]int // column name -> 0-based field position
	rows  []row
	warns []string
	// strictTail makes an incomplete last line an error instead of a
	// dropped line (for files read without a warnings channel).
	strictTail bool
}

// col returns the 0-based position of a column, or -1.
func (t *table) col(name string) int {
	if i, ok := t.cols[name]; ok {
		return i
	}
	return -1
}

// splitTable splits data into header and rows and checks the header:
// required columns present, no empty or duplicate names. Unknown columns
// (neither required nor optional) produce a warning. Row contents are not
// checked here (field counts neither), so that the last row can be judged by
// the caller's crash-tolerance rule.
func splitTable(file string, data []byte, required, optional []string) (*table, error) {
	data = bytes.TrimPrefix(data, utf8BOM)
	t := &table{file: file, cols: map[string]int{}}
	if len(data) == 0 {
		return nil, &ParseError{File: file, Line: 1, Err: fmt.Errorf("%w (%s)", ErrEmpty, strings.Join(required, ","))}
	}
	lineNo := 0
	for len(data) > 0 {
		lineNo++
		var ln []byte
		terminated := false
		if i := bytes.IndexByte(data, '\n'); i >= 0 {
			ln, data, terminated = data[:i], data[i+1:], true
		} else {
			ln, data = data, nil
		}
		ln = bytes.TrimSuffix(ln, []byte{'\r'})
		if lineNo == 1 {
			if !terminated {
				return nil, &ParseError{File: file, Line: 1, Err: fmt.Errorf("%w: the header line has no line end; the file is truncated", ErrHeader)}
			}
			if err := t.header(ln, required, optional); err != nil {
				return nil, err
			}
			continue
		}
		r := row{line: lineNo, terminated: terminated}
		if len(bytes.TrimSpace(ln)) > 0 {
			r.fields = strings.Split(string(ln), ",")
			for i := range r.fields {
				r.fields[i] = strings.TrimSpace(r.fields[i])
			}
		}
		t.rows = append(t.rows, r)
	}
	return t, nil
}

func (t *table) header(ln []byte, required, optional []string) error {
	names := strings.Split(string(ln), ",")
	t.ncol = len(names)
	known := map[string]bool{}
	for _, n := range required {
		known[n] = true
	}
	for _, n := range optional {
		known[n] = true
	}
	for i, n := range names {
		n = strings.TrimSpace(n)
		if strings.ContainsRune(n, '"') {
			return &ParseError{File: t.file, Line: 1, Column: i + 1, Err: fmt.Errorf("%w: header %q (remove the quotes)", ErrQuote, n)}
		}
		if n == "" {
			return &ParseError{File: t.file, Line: 1, Column: i + 1, Err: fmt.Errorf("%w: empty column name", ErrHeader)}
		}
		if _, dup := t.cols[n]; dup {
			return &ParseError{File: t.file, Line: 1, Column: i + 1, Err: fmt.Errorf("%w: column %q appears twice", ErrHeader, n)}
		}
		t.cols[n] = i
		if !known[n] {
			t.warns = append(t.warns, fmt.Sprintf("%s line 1, column %d: unknown column %q ignored", t.file, i+1, n))
		}
	}
	var missing []string
	for _, n := range required {
		if _, ok := t.cols[n]; !ok {
			missing = append(missing, n)
		}
	}
	if len(missing) > 0 {
		return &ParseError{File: t.file, Line: 1, Err: fmt.Errorf("%w: %s (the header must name at least: %s)",
			ErrMissingColumn, strings.Join(missing, ", "), strings.Join(required, ","))}
	}
	return nil
}

// rowReader interprets the fields of one row; its methods record the first
// error with file, line and column.
type rowReader struct {
	t   *table
	r   row
	err error
}

// check verifies the field count and the absence of quotes.
func (rr *rowReader) check() bool {
	if len(rr.r.fields) == 0 {
		rr.fail(0, fmt.Errorf("%w; remove it", ErrEmptyLine))
		return false
	}
	if len(rr.r.fields) != rr.t.ncol {
		rr.fail(0, fmt.Errorf("%w: %d fields, the header has %d", ErrFieldCount, len(rr.r.fields), rr.t.ncol))
		return false
	}
	for i, f := range rr.r.fields {
		if strings.ContainsRune(f, '"') {
			rr.fail(i+1, fmt.Errorf("%w: field %q", ErrQuote, f))
			return false
		}
	}
	return true
}

func (rr *rowReader) fail(col int, err error) {
	if rr.err == nil {
		rr.err = &ParseError{File: rr.t.file, Line: rr.r.line, Column: col, Err: err}
	}
}

// field returns the raw field of a column ("" and false if the column is
// absent).
func (rr *rowReader) field(name string) (string, int, bool) {
	i := rr.t.col(name)
	if i < 0 {
		return "", 0, false
	}
	return rr.r.fields[i], i + 1, true
}

// value returns the text of a column and its 1-based position; ok is false
// after an earlier error or when the field is blank or absent, which is an
// ErrBlank failure if required.
func (rr *rowReader) value(name string, required bool) (s string, col int, ok bool) {
	if rr.err != nil {
		return "", 0, false
	}
	s, col, present := rr.field(name)
	if !present || s == "" {
		if required {
			rr.fail(col, fmt.Errorf("%w: %s", ErrBlank, name))
		}
		return "", col, false
	}
	return s, col, true
}

// int64 parses a required integer column.
func (rr *rowReader) int64(name string) int64 {
	v, _ := rr.optInt64(name, true)
	return v
}

// optInt64 parses an integer column; blank or absent gives ok=false unless
// required.
func (rr *rowReader) optInt64(name string, required bool) (int64, bool) {
	s, col, ok := rr.value(name, required)
	if !ok {
		return 0, false
	}
	v, err := strconv.ParseInt(s, 10, 64)
	if err != nil {
		rr.fail(col, fmt.Errorf("%w: %s %q is not an integer (write whole microseconds or an index, e.g. 1500000)", ErrSyntax, name, s))
		return 0, false
	}
	return v, true
}

// optRTP parses an optional RTP timestamp column: a decimal integer in
// [0, 2^32-1] (RFC 3550 section 5.1: 32 bits, 90 kHz for video).
func (rr *rowReader) optRTP(name string) (uint32, bool) {
	s, col, ok := rr.value(name, false)
	if !ok {
		return 0, false
	}
	v, err := strconv.ParseUint(s, 10, 32)
	if err != nil {
		rr.fail(col, fmt.Errorf("%w: %s %q is not an RTP timestamp (a whole number from 0 to 4294967295); leave it blank if unknown", ErrSyntax, name, s))
		return 0, false
	}
	return uint32(v), true
}

// float parses a required float column.
func (rr *rowReader) float(name string) float64 {
	v, _ := rr.optFloat(name, true)
	return v
}

// optFloat parses a float column; blank or absent gives ok=false unless
// required. NaN and infinities are errors.
func (rr *rowReader) optFloat(name string, required bool) (float64, bool) {
	s, col, ok := rr.value(name, required)
	if !ok {
		return 0, false
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil && !isRange(err) {
		rr.fail(col, fmt.Errorf("%w: %s %q is not a decimal number", ErrSyntax, name, s))
		return 0, false
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		rr.fail(col, fmt.Errorf("%w: %s %q; write a finite number or leave optional columns blank", ErrNotFinite, name, s))
		return 0, false
	}
	return v, true
}

// isRange reports a strconv range error (the value is then ±Inf or 0, and
// ±Inf is caught as not finite).
func isRange(err error) bool {
	ne, ok := err.(*strconv.NumError)
	return ok && ne.Err == strconv.ErrRange
}

// colOf returns the 1-based column of a name for error reports.
func (rr *rowReader) colOf(name string) int { return rr.t.col(name) + 1 }
