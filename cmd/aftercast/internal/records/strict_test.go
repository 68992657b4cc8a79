package records

import (
	"errors"
	"io"
	"math"
	"regexp"
	"strconv"
	"strings"
	"testing"
)

// decimalGrammar is the grammar of parseDecimal written as a regular
// expression, the independent statement the tests hold it to.
var decimalGrammar = regexp.MustCompile(`^[+-]?([0-9]+(\.[0-9]*)?|\.[0-9]+)([eE][+-]?[0-9]+)?$`)

func TestParseDecimalAccepts(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		in   string
		want float64
	}{
		{"0", 0},
		{"-0", math.Copysign(0, -1)},
		{"5", 5},
		{"+5", 5},
		{"-0.25", -0.25},
		{"007", 7},
		{".5", 0.5},
		{"-.5", -0.5},
		{"5.", 5},
		{"5.e2", 500},
		{"1e3", 1000},
		{"+1E+3", 1000},
		{"2.5e-07", 2.5e-7},
		{"0e999", 0},        // a zero is never an underflow
		{"0.000e-99999", 0}, // nor is a zero with a huge exponent
		{"1e-320", 1e-320},  // subnormal, not zero: kept
		{"3e-324", 5e-324},  // rounds up to the smallest subnormal
		{"1.7976931348623157e308", math.MaxFloat64},
		{"-1.7976931348623157e308", -math.MaxFloat64},
		{"0.1", 0.1},
		{"123456789012345678901234567890", 123456789012345678901234567890},
	} {
		got, err := parseDecimal(c.in)
		if err != nil || got != c.want || math.Signbit(got) != math.Signbit(c.want) {
			t.Errorf("parseDecimal(%q) = %v, %v; want %v", c.in, got, err, c.want)
		}
	}
}

func TestParseDecimalRefuses(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		in   string
		want error
	}{
		{"", errNotNumber},
		{".", errNotNumber},
		{"-", errNotNumber},
		{"+-1", errNotNumber},
		{"e3", errNotNumber},
		{".e3", errNotNumber},
		{"1e", errNotNumber},
		{"1e+", errNotNumber},
		{"1.2.3", errNotNumber},
		{"1 000", errNotNumber},
		{" 1", errNotNumber}, // the Reader trims; parseDecimal does not
		{"abc", errNotNumber},
		{"1d", errNotNumber},
		{"1f", errNotNumber},
		{"٣", errNotNumber}, // a digit, but not an ASCII one
		{"0x1p3", errHex},
		{"0X10", errHex},
		{"-0x1p-2", errHex},
		{"0x1_0p0", errHex},
		{"1_000", errSeparator},
		{"1__0", errSeparator},
		{"1e1_0", errSeparator},
		{"1,5", errDecimalSep},
		{"1,000.5", errDecimalSep},
		{"NaN", errNotFinite},
		{"nan", errNotFinite},
		{"-NaN", errNotFinite},
		{"Inf", errNotFinite},
		{"+inf", errNotFinite},
		{"-Infinity", errNotFinite},
		{"1e400", errOverflow},
		{"-1e400", errOverflow},
		{"1.8e308", errOverflow},
		{"1e99999999999999999999", errOverflow},
		{"1e-400", errUnderflow},
		{"-1e-400", errUnderflow},
		{"2e-324", errUnderflow},
		{"0.0000001e-99999", errUnderflow},
	} {
		got, err := parseDecimal(c.in)
		if !errors.Is(err, c.want) || got != 0 {
			t.Errorf("parseDecimal(%q) = %v, %v; want %v", c.in, got, err, c.want)
		}
	}
}

// FuzzParseDecimal holds parseDecimal to the regular expression of its
// grammar and to strconv.ParseFloat: it accepts exactly the literals of
// the grammar whose value is finite and not an underflow, with
// ParseFloat's value.
func FuzzParseDecimal(f *testing.F) {
	for _, s := range []string{"1", "-.5", "5.", "1e-400", "1e400", "0x1p3", "1_000", "NaN", "0e999", "1e-320", "+1E+3"} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, s string) {
		got, err := parseDecimal(s)
		if !decimalGrammar.MatchString(s) {
			if err == nil {
				t.Fatalf("accepted %q, outside the grammar", s)
			}
			return
		}
		want, perr := strconv.ParseFloat(s, 64)
		if perr != nil && !math.IsInf(want, 0) {
			t.Fatalf("ParseFloat refuses %q of the grammar: %v", s, perr)
		}
		mantissa, _, _ := strings.Cut(strings.ToLower(s), "e")
		switch {
		case math.IsInf(want, 0):
			if !errors.Is(err, errOverflow) {
				t.Fatalf("%q: %v, %v; want an overflow", s, got, err)
			}
		case want == 0 && strings.ContainsAny(mantissa, "123456789"):
			if !errors.Is(err, errUnderflow) {
				t.Fatalf("%q: %v, %v; want an underflow", s, got, err)
			}
		case err != nil || got != want || math.Signbit(got) != math.Signbit(want):
			t.Fatalf("%q: %v, %v; want %v", s, got, err, want)
		}
	})
}

// readAllRows reads every row of in, gathering the errors that refuse a
// row; it fails the test on any other error.
func readAllRows(t *testing.T, in string, read func(rd *Reader) error) (rows []int, refused []error) {
	t.Helper()
	rd, err := NewReader(strings.NewReader(in), "s.csv", "series", "time", "value")
	if err != nil {
		t.Fatal(err)
	}
	for {
		err := rd.Next()
		if errors.Is(err, io.EOF) {
			return rows, refused
		}
		if err == nil && read != nil {
			err = read(rd)
		}
		if err != nil {
			if !errors.As(err, new(*LineError)) {
				t.Fatalf("error without a line: %v", err)
			}
			refused = append(refused, err)
			continue
		}
		rows = append(rows, rd.Line())
	}
}

func TestReaderRefusesRowsOnTheirOwn(t *testing.T) {
	t.Parallel()
	const head = "series,time,value,note\n"
	for _, c := range []struct {
		name, row, want string
	}{
		{"one field more", "a,2026-01-01T00:00:00Z,1,5,x", "s.csv:3: row has 5 fields, the header has 4 (quote a field that contains a comma)"},
		{"an empty field more", "a,2026-01-01T00:00:00Z,1,x,", "s.csv:3: row has 5 fields, the header has 4 (quote a field that contains a comma)"},
		{"one field less", "a,2026-01-01T00:00:00Z,1", "s.csv:3: row has 3 fields, the header has 4"},
		{"one field", "a", "s.csv:3: row has 1 field, the header has 4"},
		{"quoted, one field more", `"a","2026-01-01T00:00:00Z","1","x","y"`, "s.csv:3: row has 5 fields, the header has 4"},
		{"latin-1 key", "caf\xe9,2026-01-01T00:00:00Z,1,x", `s.csv:3: column series: "caf\xe9" is not valid UTF-8 (byte 0xe9 at offset 3; the file must be UTF-8)`},
		{"bad byte in an ignored column", "a,2026-01-01T00:00:00Z,1,\xff", `s.csv:3: column note: "\xff" is not valid UTF-8 (byte 0xff at offset 0;`},
		{"bad byte in a quoted field", "\"a\nb\xc3\",2026-01-01T00:00:00Z,1,x", `s.csv:3: column series: "a\nb\xc3" is not valid UTF-8 (byte 0xc3 at offset 3;`},
		{"surrogate half", "a\xed\xa0\x80,2026-01-01T00:00:00Z,1,x", `s.csv:3: column series: "a\xed\xa0\x80" is not valid UTF-8 (byte 0xed at offset 1;`},
		{"long field", strings.Repeat("k", 100) + "\xff,2026-01-01T00:00:00Z,1,x", `s.csv:3: column series: "` + strings.Repeat("k", 60) + `"… is not valid UTF-8 (byte 0xff at offset 100;`},
	} {
		t.Run(c.name, func(t *testing.T) {
			t.Parallel()
			// The refused row sits between two good ones, which are read.
			in := head + "a,2026-01-01T00:00:00Z,1,x\n" + c.row + "\n\nb,2026-01-01T00:00:00Z,2,y\n"
			rows, refused := readAllRows(t, in, nil)
			if len(rows) != 2 || rows[0] != 2 || rows[1] != 3+strings.Count(c.row, "\n")+2 {
				t.Errorf("rows read on lines %v, want the two good ones", rows)
			}
			if len(refused) != 1 {
				t.Fatalf("refused %v, want one row", refused)
			}
			if err := refused[0]; !errors.Is(err, ErrRow) || !strings.HasPrefix(err.Error(), c.want) {
				t.Errorf("error\n %q\nwant it to start with\n %q (and match ErrRow)", err, c.want)
			}
		})
	}
}

func TestReaderRefusesNumbers(t *testing.T) {
	t.Parallel()
	for _, c := range []struct{ value, want string }{
		{"0x1p3", `s.csv:2: column value: "0x1p3" is not a plain decimal number (hexadecimal is refused)`},
		{"1_000", `s.csv:2: column value: "1_000" is not a plain decimal number ("_" between digits is refused)`},
		{"1e-400", `s.csv:2: column value: "1e-400" underflows float64: it is not zero but rounds to 0 (the smallest non-zero float64 is 4.9e-324)`},
		{"1e400", `s.csv:2: column value: "1e400" overflows float64 (its magnitude is above 1.8e308)`},
		{"-1e400", `s.csv:2: column value: "-1e400" overflows float64 (its magnitude is above 1.8e308)`},
		{"NaN", `s.csv:2: column value: "NaN" is not a finite number (NaN and Inf are refused)`},
		{"-Infinity", `s.csv:2: column value: "-Infinity" is not a finite number (NaN and Inf are refused)`},
		{`"1,5"`, `s.csv:2: column value: "1,5" is not a number (write "." as the decimal separator and no thousands separator)`},
		{"1.2.3", `s.csv:2: column value: "1.2.3" is not a number`},
		{".", `s.csv:2: column value: "." is not a number`},
		{" ", `s.csv:2: column value is empty`},
		{strings.Repeat("9", 70) + "x", `s.csv:2: column value: "` + strings.Repeat("9", 60) + `"… is not a number`},
	} {
		_, refused := readAllRows(t, "series,time,value\na,2026-01-01T00:00:00Z,"+c.value+"\n", func(rd *Reader) error {
			_, err := rd.Float(rd.Column("value"))
			return err
		})
		if len(refused) != 1 || refused[0].Error() != c.want {
			t.Errorf("value %s: errors %v, want %q", c.value, refused, c.want)
		}
	}
	// What the grammar takes, with the spaces around a field trimmed.
	for _, c := range []struct {
		value string
		want  float64
	}{{".5", 0.5}, {"5.", 5}, {" -2.5e1 ", -25}, {"1e-320", 1e-320}, {"0e400", 0}} {
		var got float64
		rows, refused := readAllRows(t, "series,time,value\na,2026-01-01T00:00:00Z,"+c.value+"\n", func(rd *Reader) (err error) {
			got, err = rd.Float(rd.Column("value"))
			return err
		})
		if len(rows) != 1 || len(refused) != 0 || got != c.want {
			t.Errorf("value %q: %v (refused %v), want %v", c.value, got, refused, c.want)
		}
	}
}

func TestReaderRefusesAHeaderThatIsNotUTF8(t *testing.T) {
	t.Parallel()
	_, err := NewReader(strings.NewReader("\n\nseries,time,val\xfcue\n"), "h.csv", "series")
	want := `h.csv:3: header: column 3: "val\xfcue" is not valid UTF-8 (byte 0xfc at offset 3; the file must be UTF-8)`
	if err == nil || err.Error() != want {
		t.Errorf("err = %v\nwant %s", err, want)
	}
}

func TestReaderStopsOnBrokenQuoting(t *testing.T) {
	t.Parallel()
	// Broken quoting is not a row error: where the next row starts cannot
	// be known, so the file ends there.
	rd, err := NewReader(strings.NewReader("series,time,value\na,b,1\na,b\"c,2\na,b,3\n"), "q.csv", "series")
	if err != nil {
		t.Fatal(err)
	}
	if err := rd.Next(); err != nil {
		t.Fatal(err)
	}
	err = rd.Next()
	if err == nil || errors.Is(err, ErrRow) || err.Error() != `q.csv:3: bare " in a field that is not quoted` {
		t.Errorf("err = %v, want q.csv:3: bare quote, not a row error", err)
	}
}
