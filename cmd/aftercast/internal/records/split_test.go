package records

import (
	"encoding/csv"
	"io"
	"slices"
	"strings"
	"testing"
	"testing/iotest"
)

// FuzzSplitterMatchesEncodingCSV checks our splitter against the standard
// library's strict reader: the same records where it accepts the input, and
// an error where it refuses it. Input is fed one byte per read to cross
// chunk boundaries everywhere.
func FuzzSplitterMatchesEncodingCSV(f *testing.F) {
	for _, s := range []string{
		"a,b,c\n1,2,3\n",
		"a,\"b,c\",d\r\n\"x\"\"y\",,\n",
		"\"multi\nline\",2\n\n\nlast",
		"a,\"b\"c\n",
		"a,b\"c\n",
		"\"open,1\n2\n",
		",\n,,\n",
	} {
		f.Add(s)
	}
	f.Fuzz(func(t *testing.T, in string) {
		if strings.ContainsAny(in, "\r\x00") || !utf8Valid(in) {
			return // encoding/csv rewrites \r\n inside quotes and validates UTF-8 runes differently
		}
		cr := csv.NewReader(strings.NewReader(in))
		cr.FieldsPerRecord = -1
		want, wantErr := cr.ReadAll()
		sp := splitter{r: iotest.OneByteReader(strings.NewReader(in))}
		var got [][]string
		var gotErr error
		for {
			rec, _, err := sp.next()
			if err == io.EOF {
				break
			}
			if err != nil {
				gotErr = err
				break
			}
			got = append(got, slices.Clone(rec))
		}
		if (wantErr != nil) != (gotErr != nil) {
			t.Fatalf("input %q: encoding/csv err %v, ours %v", in, wantErr, gotErr)
		}
		if wantErr != nil {
			return
		}
		if len(got) != len(want) {
			t.Fatalf("input %q: %d records, encoding/csv %d: %q vs %q", in, len(got), len(want), got, want)
		}
		for i := range want {
			if !slices.Equal(got[i], want[i]) {
				t.Fatalf("input %q record %d: %q, encoding/csv %q", in, i, got[i], want[i])
			}
		}
	})
}

func utf8Valid(s string) bool { return strings.ToValidUTF8(s, "\uFFFD") == s }
