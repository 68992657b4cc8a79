// Package records reads the CSV files the aftercast CLI takes (pairs,
// forecasts, actuals, training history, backtests) into typed rows, naming
// the file's line number in every error. Columns are found by header name,
// in any order; extra columns are ignored. It is strict about the rest:
// every row has as many fields as the header, every field is UTF-8, and a
// number is a plain decimal literal that fits a float64 (see parseDecimal
// for the grammar).
package records

import (
	"errors"
	"fmt"
	"io"
	"strings"
	"time"
	"unicode/utf8"
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
	file  string
	sp    splitter
	col   map[string]int
	names []string // header names, by position
	rec   []string
	line  int
}

// ErrRow is matched (errors.Is) by an error of Next that refuses one row on
// its own, leaving the reader good for the rows after it: a row whose field
// count differs from the header's, or a field that is not UTF-8. Other
// errors of Next (broken quoting, unreadable input) end the file.
var ErrRow = errors.New("row refused")

// rowError is a reason that refuses one row.
type rowError struct{ error }

func (rowError) Is(target error) bool { return target == ErrRow }

func (e rowError) Unwrap() error { return e.error }

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
	if errors.Is(err, io.EOF) {
		return nil, &LineError{file, 1, errors.New("empty file: want a header line")}
	}
	if err != nil {
		return nil, &LineError{file, line, fmt.Errorf("reading header: %w", err)}
	}
	rd.line = line
	rd.col = make(map[string]int, len(head))
	rd.names = make([]string, len(head))
	for i, h := range head {
		if !utf8.ValidString(h) {
			return nil, &LineError{file, line, fmt.Errorf("header: column %d: %s", i+1, invalidUTF8(h))}
		}
		h = strings.Clone(strings.TrimSpace(strings.TrimPrefix(h, "\ufeff")))
		rd.names[i] = h
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
// are skipped and do not count as rows. A row with more or fewer fields
// than the header, or with a field that is not UTF-8, is refused with an
// error that matches ErrRow; the row has no fields then, and Next may be
// called again for the rows after it. Any other error ends the file.
func (r *Reader) Next() error {
	rec, line, err := r.sp.next()
	if errors.Is(err, io.EOF) {
		return io.EOF
	}
	r.rec, r.line = nil, line
	if err != nil {
		return &LineError{r.file, line, err}
	}
	if len(rec) != len(r.names) {
		why := fmt.Errorf("row has %s, the header has %d", fields(len(rec)), len(r.names))
		if len(rec) > len(r.names) {
			why = fmt.Errorf("%w (quote a field that contains a comma)", why)
		}
		return &LineError{r.file, line, rowError{why}}
	}
	if r.sp.notUTF8 {
		for i, f := range rec {
			if !utf8.ValidString(f) {
				return &LineError{r.file, line, rowError{fmt.Errorf("%s: %s", r.columnName(i), invalidUTF8(f))}}
			}
		}
	}
	r.rec = rec
	return nil
}

func fields(n int) string {
	if n == 1 {
		return "1 field"
	}
	return fmt.Sprintf("%d fields", n)
}

// columnName names the header's column i in messages.
func (r *Reader) columnName(i int) string {
	if r.names[i] == "" {
		return fmt.Sprintf("column %d", i+1)
	}
	return "column " + r.names[i]
}

// invalidUTF8 says where s, which is not valid UTF-8, goes wrong.
func invalidUTF8(s string) string {
	at := 0
	for at < len(s) {
		c, n := utf8.DecodeRuneInString(s[at:])
		if c == utf8.RuneError && n <= 1 {
			break
		}
		at += n
	}
	return fmt.Sprintf("%s is not valid UTF-8 (byte 0x%02x at offset %d; the file must be UTF-8)", quote(s), s[at], at)
}

// quote is s quoted for a message, cut short when it is long.
func quote(s string) string {
	const limit = 60
	if len(s) > limit {
		return fmt.Sprintf("%q…", s[:limit])
	}
	return fmt.Sprintf("%q", s)
}

// Line is the file line of the current row.
func (r *Reader) Line() int { return r.line }

// Errorf makes an error at the current row's line.
func (r *Reader) Errorf(format string, args ...any) error {
	return &LineError{r.file, r.line, fmt.Errorf(format, args...)}
}

// String is the current row's value of column c ("" when the header lacks
// the column). It shares memory with a large input chunk:
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

// Float parses column c, without the spaces around it, as a plain decimal
// number that fits a float64 (see parseDecimal). The error says why a
// value is refused: `column forecast: "0x1p3" is not a plain decimal
// number (hexadecimal is refused)`.
func (r *Reader) Float(c Column) (float64, error) {
	s, err := r.Required(c)
	if err != nil {
		return 0, err
	}
	v, err := parseDecimal(s)
	if err != nil {
		return 0, r.Errorf("column %s: %s %w", c.name, quote(s), err)
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
