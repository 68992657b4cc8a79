package records

import (
	"errors"
	"io"
	"math"
	"strings"
	"testing"
	"unicode/utf8"
)

func TestReaderNamesLines(t *testing.T) {
	t.Parallel()
	in := "value,time,series,extra\n1.5,2026-01-01T00:00:00Z,a,x\n\n2,2026-01-01T01:00:00+01:00,b,y\nNaN,2026-01-01T00:00:00Z,c,z\n"
	rd, err := NewReader(strings.NewReader(in), "f.csv", "series", "time", "value")
	if err != nil {
		t.Fatal(err)
	}
	var lines []int
	for {
		if err := rd.Next(); errors.Is(err, io.EOF) {
			break
		} else if err != nil {
			t.Fatal(err)
		}
		lines = append(lines, rd.Line())
		_, err := rd.Float(rd.Column("value"))
		if rd.String(rd.Column("series")) == "c" {
			var le *LineError
			if !errors.As(err, &le) || le.Line != 5 || !strings.Contains(err.Error(), "f.csv:5:") {
				t.Errorf("NaN row: err = %v, want f.csv:5", err)
			}
		} else if err != nil {
			t.Error(err)
		}
	}
	if len(lines) != 3 || lines[0] != 2 || lines[1] != 4 || lines[2] != 5 {
		t.Errorf("lines = %v, want [2 4 5] (blank line 3 skipped)", lines)
	}
}

func TestReaderHeaderErrors(t *testing.T) {
	t.Parallel()
	for _, c := range []struct{ in, want string }{
		{"", "empty file"},
		{"series,time\n", "missing column value"},
		{"series,series,time,value\n", "appears twice"},
		{"\"series,time\n", "quote"},
	} {
		_, err := NewReader(strings.NewReader(c.in), "h.csv", "series", "time", "value")
		if err == nil || !strings.Contains(err.Error(), c.want) || !strings.Contains(err.Error(), "h.csv:1:") {
			t.Errorf("header %q: err = %v, want h.csv:1 … %s", c.in, err, c.want)
		}
	}
	if _, err := NewReader(strings.NewReader("\ufeffseries,time,value\n"), "bom.csv", "series", "time", "value"); err != nil {
		t.Errorf("byte-order mark before the header: %v", err)
	}
}

// FuzzReader feeds arbitrary bytes: the reader must never panic, every error
// must name a line ≥ 1, a row it accepts has the header's field count and
// UTF-8 fields, a row it refuses on its own (ErrRow) leaves it reading on,
// and a number it accepts is finite and in the plain decimal grammar.
func FuzzReader(f *testing.F) {
	f.Add("series,time,value\na,2026-01-01T00:00:00Z,1\n")
	f.Add("series,time,value\na,2026-01-01T00:00:00Z,NaN\nb,x,1e400\n")
	f.Add("value,series,time\n\"1\",\"a\nb\",2026-01-01T00:00:00+14:00\n")
	f.Add("series,time,value\n\"unterminated,1,2\n")
	f.Add("series,time,value\na\n,,,,,\n")
	f.Add("series,time,value\na,2026-01-01T00:00:00Z,0x1p3\nb,2026-01-01T00:00:00Z,1_000\nc,2026-01-01T00:00:00Z,1e-400\n")
	f.Add("series,time,value\na\xff,2026-01-01T00:00:00Z,1\nb,2026-01-01T00:00:00Z,.5\n")
	f.Add("series,time,value\na,2026-01-01T00:00:00Z,1,5\nb,2026-01-01T00:00:00Z,5.\n")
	f.Fuzz(func(t *testing.T, in string) {
		rd, err := NewReader(strings.NewReader(in), "fuzz.csv", "series", "time", "value")
		if err != nil {
			checkLine(t, err)
			return
		}
		last := 1
		for range 10000 {
			err := rd.Next()
			if errors.Is(err, io.EOF) {
				return
			}
			if err != nil {
				checkLine(t, err)
				if errors.Is(err, ErrRow) {
					continue
				}
				return
			}
			if rd.Line() < last {
				t.Fatalf("line went back from %d to %d", last, rd.Line())
			}
			last = rd.Line()
			if len(rd.rec) != len(rd.names) {
				t.Fatalf("line %d: accepted %d fields under a header of %d", rd.Line(), len(rd.rec), len(rd.names))
			}
			for _, f := range rd.rec {
				if !utf8.ValidString(f) {
					t.Fatalf("line %d: accepted the field %q, not UTF-8", rd.Line(), f)
				}
			}
			if v, err := rd.Float(rd.Column("value")); err == nil && (math.IsNaN(v) || math.IsInf(v, 0)) {
				t.Fatalf("accepted non-finite %v", v)
			} else if err == nil && !decimalGrammar.MatchString(strings.TrimSpace(rd.String(rd.Column("value")))) {
				t.Fatalf("accepted %q, not a plain decimal", rd.String(rd.Column("value")))
			} else if err != nil {
				checkLine(t, err)
			}
			if _, err := rd.Time(rd.Column("time")); err != nil {
				checkLine(t, err)
			}
		}
	})
}

func checkLine(t *testing.T, err error) {
	t.Helper()
	var le *LineError
	if !errors.As(err, &le) || le.Line < 1 {
		t.Fatalf("error without a line: %v", err)
	}
}
