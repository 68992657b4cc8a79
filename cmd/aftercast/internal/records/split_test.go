package records

import (
	"encoding/csv"
	"errors"
	"io"
	"slices"
	"strings"
	"testing"
	"testing/iotest"
)

// FuzzSplitterMatchesEncodingCSV checks our splitter against the standard
// library's strict reader: the same records where it accepts the input, and
// an error where it refuses it. Input is fed one byte per read to cross
// chunk boundaries everywhere. The Reader on top of the splitter is checked
// against encoding/csv's field count rule (FieldsPerRecord 0, the header's
// count): the same records on the same lines, and a record that
// encoding/csv refuses with ErrFieldCount refused on its own (ErrRow).
func FuzzSplitterMatchesEncodingCSV(f *testing.F) {
	for _, s := range []string{
		"a,b,c\n1,2,3\n",
		"a,\"b,c\",d\r\n\"x\"\"y\",,\n",
		"\"multi\nline\",2\n\n\nlast",
		"a,\"b\"c\n",
		"a,b\"c\n",
		"\"open,1\n2\n",
		",\n,,\n",
		"a,b\n1,2,3\n\"x\ny\",z\n4\n",
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
			if errors.Is(err, io.EOF) {
				break
			}
			if err != nil {
				gotErr = err
				break
			}
			if sp.notUTF8 {
				t.Fatalf("input %q: record %q of valid UTF-8 marked as not UTF-8", in, rec)
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
		if len(want) > 0 {
			matchFieldCounts(t, in)
		}
	})
}

// matchFieldCounts reads in, which encoding/csv reads without error, with
// a Reader and with encoding/csv holding every record to the header's
// field count.
func matchFieldCounts(t *testing.T, in string) {
	t.Helper()
	rd, err := NewReader(iotest.OneByteReader(strings.NewReader(in)), "f.csv")
	if err != nil {
		if !strings.Contains(err.Error(), "appears twice in the header") {
			t.Fatalf("input %q: header refused: %v", in, err)
		}
		return
	}
	cr := csv.NewReader(strings.NewReader(in))
	if _, err := cr.Read(); err != nil {
		t.Fatalf("input %q: encoding/csv header: %v", in, err)
	}
	for {
		rec, cerr := cr.Read()
		err := rd.Next()
		if cerr == io.EOF {
			if !errors.Is(err, io.EOF) {
				t.Fatalf("input %q: encoding/csv ends, the reader: %v", in, err)
			}
			return
		}
		line, _ := cr.FieldPos(0)
		switch {
		case errors.Is(cerr, csv.ErrFieldCount):
			le, ok := errors.AsType[*LineError](err)
			if !errors.Is(err, ErrRow) || !ok || le.Line != line {
				t.Fatalf("input %q: encoding/csv refuses %q on line %d for its field count; the reader: %v", in, rec, line, err)
			}
		case cerr != nil:
			t.Fatalf("input %q: encoding/csv: %v", in, cerr)
		case err != nil || rd.Line() != line || !slices.Equal(rd.rec, rec):
			t.Fatalf("input %q: encoding/csv reads %q on line %d; the reader %q on line %d, %v", in, rec, line, rd.rec, rd.Line(), err)
		}
	}
}

func utf8Valid(s string) bool { return strings.ToValidUTF8(s, "\uFFFD") == s }
