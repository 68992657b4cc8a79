package evaluate

import (
	"errors"
	"fmt"
	"strings"
	"testing"

	"github.com/aftercast/aftercast/cmd/aftercast/internal/records"
)

// strictCases are rows of a pairs file (line 3, after a good row) that the
// strict reading refuses, with the reason their error gives.
var strictCases = []struct{ name, row, want string }{
	{"a field more", "s,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,2,5", "row has 6 fields, the header has 5 (quote a field that contains a comma)"},
	{"a field less", "s,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1", "row has 4 fields, the header has 5"},
	{"latin-1 key", "s\xe9,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,2", `column series: "s\xe9" is not valid UTF-8 (byte 0xe9 at offset 1; the file must be UTF-8)`},
	{"hexadecimal", "s,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,0x1p3,2", `column forecast: "0x1p3" is not a plain decimal number (hexadecimal is refused)`},
	{"digit separator", "s,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,1_000", `column actual: "1_000" is not a plain decimal number ("_" between digits is refused)`},
	{"underflow", "s,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1e-400,2", `column forecast: "1e-400" underflows float64: it is not zero but rounds to 0`},
	{"overflow", "s,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,1e400", `column actual: "1e400" overflows float64 (its magnitude is above 1.8e308)`},
	{"NaN", "s,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,nan,2", `column forecast: "nan" is not a finite number (NaN and Inf are refused)`},
}

func TestStrictPairsFile(t *testing.T) {
	t.Parallel()
	for _, c := range strictCases {
		t.Run(c.name, func(t *testing.T) {
			t.Parallel()
			// With and without --step: inferring the step reads the file too.
			for _, step := range []string{"1h", ""} {
				in := writeFile(t, header+"s,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,2\n"+c.row+"\n")
				_, err := File(in, "", Options{Step: step})
				checkLineError(t, err, in, 3, c.want)
			}
		})
	}
}

func TestStrictHistoryFile(t *testing.T) {
	t.Parallel()
	for _, c := range []struct{ name, row, want string }{
		{"a field more", "s,2026-01-01T00:00:00Z,1,5", "row has 4 fields, the header has 3 (quote a field that contains a comma)"},
		{"a field less", "s,2026-01-01T00:00:00Z", "row has 2 fields, the header has 3"},
		{"latin-1 key", "s\xe9,2026-01-01T00:00:00Z,1", `column series: "s\xe9" is not valid UTF-8 (byte 0xe9 at offset 1; the file must be UTF-8)`},
		{"hexadecimal", "s,2026-01-01T00:00:00Z,0x1p3", `column value: "0x1p3" is not a plain decimal number (hexadecimal is refused)`},
		{"digit separator", "s,2026-01-01T00:00:00Z,1_000", `column value: "1_000" is not a plain decimal number ("_" between digits is refused)`},
		{"underflow", "s,2026-01-01T00:00:00Z,1e-400", `column value: "1e-400" underflows float64: it is not zero but rounds to 0`},
		{"overflow", "s,2026-01-01T00:00:00Z,-1e400", `column value: "-1e400" overflows float64 (its magnitude is above 1.8e308)`},
		{"Inf", "s,2026-01-01T00:00:00Z,Infinity", `column value: "Infinity" is not a finite number (NaN and Inf are refused)`},
	} {
		t.Run(c.name, func(t *testing.T) {
			t.Parallel()
			in := writeFile(t, header+"s,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,2\n")
			hist := writeFile(t, "series,time,value\ns,2025-12-31T23:00:00Z,1\n"+c.row+"\n")
			_, err := File(in, hist, Options{Step: "1h"})
			checkLineError(t, err, hist, 3, c.want)
		})
	}
}

func checkLineError(t *testing.T, err error, file string, line int, reason string) {
	t.Helper()
	le, ok := errors.AsType[*records.LineError](err)
	if want := fmt.Sprintf("%s:%d: %s", file, line, reason); !ok || le.File != file || le.Line != line || !strings.HasPrefix(le.Error(), want) {
		t.Errorf("err = %v\nwant it to start with %s", err, want)
	}
}
