// Package records reads the CSV files the aftercast CLI takes (pairs,
// forecasts, actuals, training history) into typed rows, naming the file's
// line number in every error. Columns are found by header name, in any
// order; extra columns are ignored.
package records

import (
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
	sp   splitter
	col  map[string]int
	rec  []string
	line int
}

// Column is a column of the header, resolved once so that reading a field
// does not look its name up again on every row.
type Column struct {
	name string
	idx  int // -1 when the header lacks it
}

// Column resolves the header's column named name.
func (r *Reader) Column(name string) Column {
	if i, ok := r.col[name]; ok {
		return Column{name, i}
	}
	return Column{name, -1}
}

// readBuffer is the input chunk size: large, because with 4 KiB reads the
// syscalls cost a tenth of scoring a big file.
const readBuffer = 256 << 10

// NewReader reads the header from r and checks that every required column
// is present. file names the input in errors.
func NewReader(r io.Reader, file string, required ...string) (*Reader, error) {
	rd := &Reader{file: file, sp: splitter{r: r}}
	head, line, err := rd.sp.next()
	if err == io.EOF {
		return nil, &LineError{file, 1, errors.New("empty file: want a header line")}
	}
	if err != nil {
		return nil, &LineError{file, line, fmt.Errorf("reading header: %w", err)}
	}
	rd.line = line
	rd.col = make(map[string]int, len(head))
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

// Present reports whether the header names the column.
func (c Column) Present() bool { return c.idx >= 0 }

// Next advances to the next row. It returns io.EOF at the end. Blank lines
// are skipped and do not count as rows.
func (r *Reader) Next() error {
	rec, line, err := r.sp.next()
	if err == io.EOF {
		return io.EOF
	}
	if err != nil {
		return &LineError{r.file, line, err}
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
// absent or the row is short). It shares memory with a large input chunk:
// strings.Clone what outlives the row.
func (r *Reader) String(c Column) string {
	if c.idx < 0 || c.idx >= len(r.rec) {
		return ""
	}
	return r.rec[c.idx]
}

// Required is the value of column c, an error when it is empty.
func (r *Reader) Required(c Column) (string, error) {
	s := strings.TrimSpace(r.String(c))
	if s == "" {
		return "", r.Errorf("column %s is empty", c.name)
	}
	return s, nil
}

// Float parses column c as a finite number.
func (r *Reader) Float(c Column) (float64, error) {
	s, err := r.Required(c)
	if err != nil {
		return 0, err
	}
	v, err := strconv.ParseFloat(s, 64)
	if err != nil {
		return 0, r.Errorf("column %s: %q is not a number", c.name, s)
	}
	if math.IsNaN(v) || math.IsInf(v, 0) {
		return 0, r.Errorf("column %s: %q is not a finite number (NaN and Inf are refused)", c.name, s)
	}
	return v, nil
}

// Time parses column c as an RFC 3339 time with an offset.
func (r *Reader) Time(c Column) (time.Time, error) {
	s, err := r.Required(c)
	if err != nil {
		return time.Time{}, err
	}
	t, err := time.Parse(time.RFC3339Nano, s)
	if err != nil {
		return time.Time{}, r.Errorf("column %s: %q is not an RFC 3339 time such as 2026-01-31T05:00:00+01:00", c.name, s)
	}
	return t, nil
}
