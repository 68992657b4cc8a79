// Package records reads the CSV files the aftercast CLI takes (pairs,
// forecasts, actuals, training history) into typed rows, naming the file's
// line number in every error. Columns are found by header name, in any
// order; extra columns are ignored.
package records

import (
	"encoding/csv"
	"errors"
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"time"
)

// LineError is an input error at one line of a file.
type LineError struct {
	File string
	Line int
	Err  error
}

func (e *LineError) Error() string {
	if e.File == "" {
		return fmt.Sprintf("line %d: %v", e.Line, e.Err)
	}
	return fmt.Sprintf("%s:%d: %v", e.File, e.Line, e.Err)
}

func (e *LineError) Unwrap() error { return e.Err }

// Reader reads rows of a CSV file with a header line.
type Reader struct {
	file string
	cr   *csv.Reader
	col  map[string]int
	rec  []string
	line int
}

// NewReader reads the header from r and checks that every required column
// is present. file names the input in errors.
func NewReader(r io.Reader, file string, required ...string) (*Reader, error) {
	cr := csv.NewReader(r)
	cr.ReuseRecord = true
	cr.FieldsPerRecord = -1 // checked per row below, with our own message
	head, err := cr.Read()
	if err == io.EOF {
		return nil, &LineError{file, 1, errors.New("empty file: want a header line")}
	}
	if err != nil {
		return nil, &LineError{file, 1, fmt.Errorf("reading header: %w", unwrapParse(err))}
	}
	rd := &Reader{file: file, cr: cr, col: make(map[string]int, len(head)), line: 1}
	for i, h := range head {
		h = strings.TrimSpace(strings.TrimPrefix(h, "\ufeff"))
		if _, dup := rd.col[h]; dup && h != "" {
			return nil, &LineError{file, 1, fmt.Errorf("column %q appears twice in the header", h)}
		}
		rd.col[h] = i
	}
	var missing []string
	for _, c := range required {
		if _, ok := rd.col[c]; !ok {
			missing = append(missing, c)
		}
	}
	if len(missing) > 0 {
		return nil, &LineError{file, 1, fmt.Errorf("missing column %s (header must name %s)",
			strings.Join(missing, ", "), strings.Join(required, ","))}
	}
	return rd, nil
}

// Has reports whether the header names column c.
func (r *Reader) Has(c string) bool { _, ok := r.col[c]; return ok }

// Next advances to the next row. It returns io.EOF at the end. Blank lines
// are skipped by the CSV reader and do not count as rows.
func (r *Reader) Next() error {
	rec, err := r.cr.Read()
	if err == io.EOF {
		return io.EOF
	}
	line, _ := r.cr.FieldPos(0)
	if err != nil {
		var pe *csv.ParseError
		if errors.As(err, &pe) {
			line = pe.Line
		}
		return &LineError{r.file, line, unwrapParse(err)}
	}
	r.rec, r.line = rec, line
	return nil
}

// Line is the file line of the current row.
func (r *Reader) Line() int { return r.line }

// Errorf makes an error at the current row's line.
func (r *Reader) Errorf(format string, args ...any) error {
	return &LineError{r.file, r.line, fmt.Errorf(format, args...)}
}

// String is the current row's value of column c ("" when the column is
// absent or the row is short).
func (r *Reader) String(c string) string {
	i, ok := r.col[c]
	if !ok || i >= len(r.rec) {
		return ""
	}
	return r.rec[i]
}

// Required is the value of column c, an error when it is empty.
func (r *Reader) Required(c string) (string, error) {
	s := strings.TrimSpace(r.String(c))
	if s == "" {
		return "", r.Errorf("column %s is empty", c)
	}
	return s, nil
}

// Float parses column c as a finite number.
func (r *Reader) Float(c string) (float64, error) {
	s, err := r.Required(c)
	if err != nil {
		return 0, err
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		return 0, r.Errorf("column %s: %q is not a number", c, s)
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, r.Errorf("column %s: %q is not a finite number (NaN and Inf are refused)", c, s)
	}
	return v, nil
}

// Time parses column c as an RFC 3339 time with an offset.
func (r *Reader) Time(c string) (time.Time, error) {
	s, err := r.Required(c)
	if err != nil {
		return time.Time{}, err
	}
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return time.Time{}, r.Errorf("column %s: %q is not an RFC 3339 time such as 2026-01-31T05:00:00+01:00", c, s)
	}
	return t, nil
}

// unwrapParse drops encoding/csv's own "record on line N" prefix, which
// LineError already carries.
func unwrapParse(err error) error {
	var pe *csv.ParseError
	if errors.As(err, &pe) {
		return pe.Err
	}
	return err
}
