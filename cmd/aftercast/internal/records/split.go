package records

import (
	"errors"
	"fmt"
	"io"
	"strings"
	"unicode/utf8"
)

// maxRecord bounds one record, so that a file without line breaks cannot
// make the reader hold all of it.
const maxRecord = 1 << 20

// splitter cuts RFC 4180 CSV into records. It exists because
// encoding/csv spends half the time of scoring a large file. It reads the
// input in large chunks, each turned into one string, so that the fields of
// an ordinary record are substrings of it: no allocation or copy per
// record. Quoted fields (with "" escapes and line breaks inside) are
// handled too, and malformed quoting is an error as in encoding/csv's strict
// mode. Fields alias the chunk: callers that keep one must clone it.
//
// It does not judge the bytes of a field, but it notes whether a record's
// lines are valid UTF-8 (one check per line is much cheaper than one per
// field): its fields are then valid too, since quotes and commas, which
// are ASCII, are all it takes out.
type splitter struct {
	r      io.Reader
	buf    []byte
	chunk  string // unread part of the current chunk
	eof    bool
	line   int // physical lines consumed
	quoted []byte
	ends   []int
	fields []string
	// notUTF8 is set when a line of the record next returned last is not
	// valid UTF-8.
	notUTF8 bool
}

var (
	errBareQuote    = errors.New(`bare " in a field that is not quoted`)
	errQuote        = errors.New(`extraneous or missing " in a quoted field`)
	errUnterminated = errors.New(`quoted field is not closed before the end of the file`)
)

// fill reads another chunk, keeping the unread tail of the last one in
// front of it. It returns false when the input is exhausted.
func (s *splitter) fill() (bool, error) {
	if s.eof {
		return false, nil
	}
	if s.buf == nil {
		s.buf = make([]byte, readBuffer)
	}
	n := copy(s.buf, s.chunk)
	if n == len(s.buf) {
		if len(s.buf) >= maxRecord {
			return false, fmt.Errorf("line is longer than %d bytes", maxRecord)
		}
		s.buf = append(s.buf, make([]byte, len(s.buf))...)
	}
	m, err := io.ReadAtLeast(s.r, s.buf[n:], 1)
	switch {
	case err == io.EOF || err == io.ErrUnexpectedEOF:
		s.eof = true
	case err != nil:
		return false, err
	}
	s.chunk = string(s.buf[:n+m])
	return m > 0, nil
}

// physical returns the next line without its line break; ok is false at
// the end of the input.
func (s *splitter) physical() (line string, ok bool, err error) {
	for {
		if i := strings.IndexByte(s.chunk, '\n'); i >= 0 {
			line, s.chunk = s.chunk[:i], s.chunk[i+1:]
			break
		}
		more, err := s.fill()
		if err != nil {
			return "", false, err
		}
		if !more {
			if s.chunk == "" {
				return "", false, nil
			}
			line, s.chunk = s.chunk, ""
			break
		}
	}
	s.line++
	if !utf8.ValidString(line) {
		s.notUTF8 = true
	}
	return strings.TrimSuffix(line, "\r"), true, nil
}

// next returns the fields of the next non-blank record and the line it
// starts on. The fields stay valid until the following call.
func (s *splitter) next() ([]string, int, error) {
	s.notUTF8 = false
	for {
		b, ok, err := s.physical()
		if err != nil {
			return nil, s.line + 1, err
		}
		if !ok {
			return nil, s.line + 1, io.EOF
		}
		if len(b) == 0 {
			continue
		}
		start := s.line
		if strings.IndexByte(b, '"') < 0 {
			s.fields = s.fields[:0]
			rec := b
			for {
				i := indexComma(rec)
				if i < 0 {
					s.fields = append(s.fields, rec)
					return s.fields, start, nil
				}
				s.fields = append(s.fields, rec[:i])
				rec = rec[i+1:]
			}
		}
		f, err := s.parseQuoted(b)
		return f, start, err
	}
}

func indexComma(s string) int { return strings.IndexByte(s, ',') }

// parseQuoted handles a record with quotes, reading further lines while a
// quoted field is open.
func (s *splitter) parseQuoted(b string) ([]string, error) {
	s.quoted, s.ends = s.quoted[:0], s.ends[:0]
	const (
		fieldStart = iota
		unquoted
		inQuotes
		afterQuote
	)
	state := fieldStart
	for {
		for i := 0; i < len(b); i++ {
			c := b[i]
			switch state {
			case fieldStart, unquoted:
				switch {
				case c == '"' && state == fieldStart:
					state = inQuotes
				case c == '"':
					return nil, errBareQuote
				case c == ',':
					s.ends = append(s.ends, len(s.quoted))
					state = fieldStart
				default:
					s.quoted = append(s.quoted, c)
					state = unquoted
				}
			case inQuotes:
				if c == '"' {
					state = afterQuote
				} else {
					s.quoted = append(s.quoted, c)
				}
			case afterQuote:
				switch c {
				case '"': // "" is an escaped quote
					s.quoted = append(s.quoted, '"')
					state = inQuotes
				case ',':
					s.ends = append(s.ends, len(s.quoted))
					state = fieldStart
				default:
					return nil, errQuote
				}
			}
			if len(s.quoted) > maxRecord {
				return nil, fmt.Errorf("record is longer than %d bytes", maxRecord)
			}
		}
		if state != inQuotes {
			break
		}
		next, ok, err := s.physical()
		if err != nil {
			return nil, err
		}
		if !ok {
			return nil, errUnterminated
		}
		s.quoted = append(s.quoted, '\n')
		b = next
	}
	s.ends = append(s.ends, len(s.quoted))
	rec := string(s.quoted)
	s.fields = s.fields[:0]
	from := 0
	for _, e := range s.ends {
		s.fields = append(s.fields, rec[from:e])
		from = e
	}
	return s.fields, nil
}
