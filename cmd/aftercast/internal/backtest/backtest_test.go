package backtest

import (
	"errors"
	"io"
	"reflect"
	"strings"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
)

// The backtest file of these tests: columns in another order, an extra
// column, a blank line and a quoted field spanning two lines, so that a
// row's line is not its index + 2.
const testBacktest = "actual,note,target_time,series,origin_time,forecast\n" + // 1
	"10,a,2026-01-01T01:00:00Z,h,2026-01-01T00:00:00Z,8\n" + // 2: rows[0]
	"\n" + // 3
	"0,\"two\nlines\",2026-01-01T02:00:00Z,h,2026-01-01T01:00:00Z,1\n" + // 4-5: rows[1]
	"5,c,2026-01-01T04:00:00+01:00,d,2026-01-01T02:00:00+01:00,5\n" // 6: rows[2], series d

const testTraining = "value,series,time\n" + // 1
	"4,h,2025-12-31T23:00:00Z\n" + // 2: training_actuals[0]
	"\n" + // 3
	"6,h,2026-01-01T00:00:00Z\n" // 4: training_actuals[1]

func readTest(t *testing.T) *Import {
	t.Helper()
	var im Import
	if err := im.ReadBacktest(strings.NewReader(testBacktest), "bt.csv"); err != nil {
		t.Fatal(err)
	}
	if err := im.ReadTraining(strings.NewReader(testTraining), "hist.csv"); err != nil {
		t.Fatal(err)
	}
	return &im
}

func TestReadKeepsRowsAndLines(t *testing.T) {
	t.Parallel()
	im := readTest(t)
	if im.Rows() != 3 || im.TrainingActuals() != 2 || im.Series() != 2 {
		t.Fatalf("rows %d training %d series %d, want 3 2 2", im.Rows(), im.TrainingActuals(), im.Series())
	}
	msgs := collect(t, im.Messages("m1", 5000, 1<<20))
	if len(msgs) != 2 {
		t.Fatalf("%d messages, want 2 (rows, then training actuals)", len(msgs))
	}
	r := msgs[0].GetRows()[2]
	if r.GetSeries() != "d" || !r.GetOriginTime().AsTime().Equal(time.Date(2026, 1, 1, 1, 0, 0, 0, time.UTC)) ||
		!r.GetTargetTime().AsTime().Equal(time.Date(2026, 1, 1, 3, 0, 0, 0, time.UTC)) || r.GetForecast() != 5 || r.GetActual() != 5 {
		t.Errorf("rows[2] = %v", r)
	}
	if a := msgs[1].GetTrainingActuals()[1]; a.GetSeries() != "h" || a.GetValue() != 6 {
		t.Errorf("training_actuals[1] = %v", a)
	}
}

func TestLocateMapsViolationsToLines(t *testing.T) {
	t.Parallel()
	im := readTest(t)
	for _, c := range []struct {
		field, reason, want string
	}{
		{"rows[0].target_time", "off grid", "bt.csv:2: target_time: off grid"},
		{"rows[1].series", "unknown series", "bt.csv:4: series: unknown series"},
		{"rows[2]", "a second row", "bt.csv:6: a second row"},
		{"training_actuals[0].value", "not finite", "hist.csv:2: value: not finite"},
		{"training_actuals[1].series", "no rows", "hist.csv:4: series: no rows"},
		// Fields naming no row of this import are passed on as they are.
		{"rows[3].series", "beyond", "rows[3].series: beyond"},
		{"rows[-1]", "negative", "rows[-1]: negative"},
		{"rows[x].series", "not a number", "rows[x].series: not a number"},
		{"rows[0]x", "garbled", "rows[0]x: garbled"},
		{"model", "required", "model: required"},
		{"rows", "no backtest rows", "rows: no backtest rows"},
		{"", "bare", "bare"},
	} {
		if got := im.Describe(c.field, c.reason); got != c.want {
			t.Errorf("Describe(%q):\n got %q\nwant %q", c.field, got, c.want)
		}
	}
}

func TestLocateCountsIndexesAcrossMessages(t *testing.T) {
	t.Parallel()
	var b strings.Builder
	b.WriteString("series,origin_time,target_time,forecast,actual\n")
	for i := range 12_000 {
		if i%1000 == 0 {
			b.WriteString("\n") // a blank line every 1000 rows shifts the lines
		}
		b.WriteString("h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,2\n")
	}
	var im Import
	if err := im.ReadBacktest(strings.NewReader(b.String()), "big.csv"); err != nil {
		t.Fatal(err)
	}
	msgs := collect(t, im.Messages("m1", 5000, 1<<20))
	if len(msgs) != 3 || len(msgs[0].GetRows()) != 5000 || len(msgs[2].GetRows()) != 2000 {
		t.Fatalf("%d messages, want 3 of 5000, 5000 and 2000 rows", len(msgs))
	}
	// rows[11234] is data row 11235, after the header and 12 blank lines.
	if where, sub, ok := im.Locate("rows[11234].target_time"); !ok || where != "big.csv:11248" || sub != "target_time" {
		t.Errorf("rows[11234] at %q %q %v, want big.csv:11248", where, sub, ok)
	}
}

func TestMessagesNameTheModelOnceAndRespectBounds(t *testing.T) {
	t.Parallel()
	im := readTest(t)
	msgs := collect(t, im.Messages("m1", 2, 1<<20))
	var rows, training []int
	for i, m := range msgs {
		if (i == 0) != (m.GetModel() == "m1") || (i > 0 && m.GetModel() != "") {
			t.Errorf("message %d names model %q", i, m.GetModel())
		}
		rows, training = append(rows, len(m.GetRows())), append(training, len(m.GetTrainingActuals()))
	}
	if !reflect.DeepEqual(rows, []int{2, 1, 0}) || !reflect.DeepEqual(training, []int{0, 0, 2}) {
		t.Errorf("rows per message %v, training %v; want [2 1 0] and [0 0 2]", rows, training)
	}
	// A byte bound smaller than any item sends one item per message.
	if msgs := collect(t, im.Messages("m1", 5000, 1)); len(msgs) != 5 {
		t.Errorf("%d messages with a 1-byte bound, want 5 (one item each)", len(msgs))
	}
	// Each call starts over, for a retry.
	if a, b := collect(t, im.Messages("m1", 2, 1<<20)), collect(t, im.Messages("m1", 2, 1<<20)); len(a) != len(b) {
		t.Errorf("a second stream has %d messages, the first %d", len(b), len(a))
	}
	// An empty import still names the model, for the server to refuse.
	var empty Import
	if msgs := collect(t, empty.Messages("m1", 10, 1<<20)); len(msgs) != 1 || msgs[0].GetModel() != "m1" {
		t.Errorf("empty import: %v", msgs)
	}
}

func TestReadReportsEveryBadRowByLine(t *testing.T) {
	t.Parallel()
	var im Import
	err := im.ReadBacktest(strings.NewReader("series,origin_time,target_time,forecast,actual\n"+
		"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,2\n"+ // 2 ok
		"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,NaN,2\n"+ // 3
		"h,yesterday,2026-01-01T01:00:00Z,1,2\n"+ // 4
		",2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,2\n"+ // 5
		"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,\n"), "bt.csv") // 6
	bad, ok := errors.AsType[*BadRows](err)
	if !ok {
		t.Fatalf("error %v, want *BadRows", err)
	}
	if bad.N != 4 || bad.Rows != 5 {
		t.Errorf("%d of %d rows bad, want 4 of 5", bad.N, bad.Rows)
	}
	msg := err.Error()
	for _, want := range []string{"4 of 5 rows of bt.csv cannot be read:", "\n  bt.csv:3: column forecast", "\n  bt.csv:4: column origin_time",
		"\n  bt.csv:5: column series is empty", "\n  bt.csv:6: column actual is empty"} {
		if !strings.Contains(msg, want) {
			t.Errorf("error lacks %q:\n%s", want, msg)
		}
	}

	if err := im.ReadTraining(strings.NewReader("series,when,value\n"), "hist.csv"); err == nil || !strings.Contains(err.Error(), "hist.csv:1: missing column time") {
		t.Errorf("missing column: %v", err)
	}
}

func TestBadRowsListIsBounded(t *testing.T) {
	t.Parallel()
	var b strings.Builder
	b.WriteString("series,time,value\n")
	for range MaxListed + 5 {
		b.WriteString("h,2026-01-01T00:00:00Z,x\n")
	}
	var im Import
	bad, ok := errors.AsType[*BadRows](im.ReadTraining(strings.NewReader(b.String()), "hist.csv"))
	if !ok || bad.N != MaxListed+5 || len(bad.List) != MaxListed || !strings.HasSuffix(bad.Error(), "(and 5 more)") {
		t.Errorf("bad rows %+v", bad)
	}
}

func collect(t *testing.T, next func() (*aftercastv1.ImportBaselineRequest, error)) []*aftercastv1.ImportBaselineRequest {
	t.Helper()
	var out []*aftercastv1.ImportBaselineRequest
	for {
		m, err := next()
		if errors.Is(err, io.EOF) {
			return out
		}
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, m)
		if len(out) > 100 {
			t.Fatal("no end of messages")
		}
	}
}

func TestReadIsStrict(t *testing.T) {
	t.Parallel()
	const head = "series,origin_time,target_time,forecast,actual\n"
	for _, c := range []struct{ name, row, want string }{
		{"a field more", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,2,5", "bt.csv:3: row has 6 fields, the header has 5 (quote a field that contains a comma)"},
		{"a field less", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1", "bt.csv:3: row has 4 fields, the header has 5"},
		{"latin-1 key", "h\xe9,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,2", `bt.csv:3: column series: "h\xe9" is not valid UTF-8 (byte 0xe9 at offset 1; the file must be UTF-8)`},
		{"hexadecimal", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,0x1p3,2", `bt.csv:3: column forecast: "0x1p3" is not a plain decimal number (hexadecimal is refused)`},
		{"digit separator", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,1_000", `bt.csv:3: column actual: "1_000" is not a plain decimal number ("_" between digits is refused)`},
		{"underflow", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1e-400,2", `bt.csv:3: column forecast: "1e-400" underflows float64: it is not zero but rounds to 0`},
		{"overflow", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,1e400", `bt.csv:3: column actual: "1e400" overflows float64 (its magnitude is above 1.8e308)`},
		{"NaN", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,NaN,2", `bt.csv:3: column forecast: "NaN" is not a finite number (NaN and Inf are refused)`},
	} {
		t.Run(c.name, func(t *testing.T) {
			t.Parallel()
			// Every bad row is reported, and the good ones around it are read.
			var im Import
			err := im.ReadBacktest(strings.NewReader(head+
				"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,2\n"+c.row+"\n"+
				"h,2026-01-01T00:00:00Z,2026-01-01T03:00:00Z,1e-320,2\n"), "bt.csv")
			bad, ok := errors.AsType[*BadRows](err)
			if !ok || bad.N != 1 || bad.Rows != 3 || !strings.HasPrefix(bad.List[0].Error(), c.want) {
				t.Fatalf("err = %v\nwant 1 of 3 rows bad: %s", err, c.want)
			}
			if im.Rows() != 2 || im.rows[1].forecast != 1e-320 {
				t.Errorf("kept %d rows %+v, want lines 2 and 4", im.Rows(), im.rows)
			}
		})
	}
	var im Import
	err := im.ReadTraining(strings.NewReader("series,time,value\nh,2026-01-01T00:00:00Z,1,\nh,2026-01-01T01:00:00Z,1_0\n"), "hist.csv")
	if bad, ok := errors.AsType[*BadRows](err); !ok || bad.N != 2 ||
		bad.List[0].Error() != "hist.csv:2: row has 4 fields, the header has 3 (quote a field that contains a comma)" ||
		bad.List[1].Error() != `hist.csv:3: column value: "1_0" is not a plain decimal number ("_" between digits is refused)` {
		t.Errorf("training: %v", err)
	}
}

func TestMessagesRefuseAModelThatIsNotUTF8(t *testing.T) {
	t.Parallel()
	im := readTest(t)
	if _, err := im.Messages("m\xff", 10, 1<<20)(); err == nil || err.Error() != `model "m\xff" is not valid UTF-8` {
		t.Errorf("err = %v, want the model refused", err)
	}
}
