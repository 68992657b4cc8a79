package push

import (
	"errors"
	"io"
	"reflect"
	"strings"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/scoring"
)

// series are the series the tests' lookups know.
func testCache(t *testing.T, lookups *int) *SeriesCache {
	t.Helper()
	brussels, err := time.LoadLocation("Europe/Brussels")
	if err != nil {
		t.Fatal(err)
	}
	known := map[string]SeriesInfo{
		"h":  {Step: scoring.MustParseStep("1h", nil), Horizon: 24},
		"d":  {Step: scoring.MustParseStep("1d", brussels), Horizon: 7},
		"hh": {Step: scoring.MustParseStep("30m", nil), Horizon: 96},
	}
	return NewSeriesCache(func(key string) (SeriesInfo, bool, error) {
		if lookups != nil {
			*lookups++
		}
		if key == "down" {
			return SeriesInfo{}, false, errors.New("connection refused")
		}
		info, ok := known[key]
		return info, ok, nil
	})
}

// vec is a sent vector in a form easy to compare.
type vec struct {
	Series, Origin string
	Dense          []float64
	Sparse         map[int32]float64
	Issue          string
}

func readAll(t *testing.T, src *Forecasts) []vec {
	t.Helper()
	var out []vec
	for {
		fc, err := src.Next()
		if errors.Is(err, io.EOF) {
			return out
		}
		if err != nil {
			t.Fatal(err)
		}
		v := vec{Series: fc.GetSeries(), Origin: fc.GetOriginTime().AsTime().Format(time.RFC3339)}
		if fc.GetModel() != "m" {
			t.Errorf("model %q, want m", fc.GetModel())
		}
		if fc.GetIssueTime() != nil {
			v.Issue = fc.GetIssueTime().AsTime().Format(time.RFC3339)
		}
		switch x := fc.GetValues().(type) {
		case *aftercastv1.Forecast_Dense:
			v.Dense = x.Dense.GetValues()
		case *aftercastv1.Forecast_Sparse:
			v.Sparse = map[int32]float64{}
			for _, p := range x.Sparse.GetPoints() {
				v.Sparse[p.GetLead()] = p.GetValue()
			}
		}
		out = append(out, v)
	}
}

func newForecasts(t *testing.T, csv string, maxOpen int) *Forecasts {
	t.Helper()
	src, err := NewForecasts(strings.NewReader(csv), "f.csv", "m", testCache(t, nil), maxOpen)
	if err != nil {
		t.Fatal(err)
	}
	return src
}

func TestForecastsGroupsRowsIntoVectors(t *testing.T) {
	t.Parallel()
	// Columns in another order, an extra column, two series interleaved,
	// leads out of order, an origin written with another offset, one
	// vector with a gap (sparse).
	src := newForecasts(t, "forecast,note,target_time,origin_time,series\n"+
		"2,x,2026-01-01T02:00:00Z,2026-01-01T00:00:00Z,h\n"+ // 2
		"1,x,2026-01-01T01:00:00Z,2026-01-01T00:00:00Z,h\n"+ // 3
		"7,x,2026-01-01T00:30:00Z,2026-01-01T00:00:00Z,hh\n"+ // 4
		"3,x,2026-01-01T04:00:00+01:00,2026-01-01T01:00:00+01:00,h\n"+ // 5: lead 3 of the first origin
		"5,x,2026-01-01T04:00:00Z,2026-01-01T01:00:00Z,h\n"+ // 6: lead 3, sparse
		"8,x,2026-01-01T01:30:00Z,2026-01-01T00:00:00Z,hh\n", // 7: lead 3, sparse with lead 1
		DefaultMaxOpen)
	got := readAll(t, src)
	want := []vec{
		{Series: "h", Origin: "2026-01-01T00:00:00Z", Dense: []float64{1, 2, 3}},
		{Series: "hh", Origin: "2026-01-01T00:00:00Z", Sparse: map[int32]float64{1: 7, 3: 8}},
		{Series: "h", Origin: "2026-01-01T01:00:00Z", Sparse: map[int32]float64{3: 5}},
	}
	if !reflect.DeepEqual(got, want) {
		t.Fatalf("vectors\n got %+v\nwant %+v", got, want)
	}
	if src.Rows != 6 || src.Vectors != 3 || src.Points != 6 || src.Rejected.N != 0 {
		t.Errorf("rows %d vectors %d points %d rejected %d, want 6 3 6 0", src.Rows, src.Vectors, src.Points, src.Rejected.N)
	}
	for _, c := range []struct {
		index int64
		lead  int32
		line  int
	}{{0, 1, 3}, {0, 2, 2}, {0, 3, 5}, {1, 1, 4}, {1, 3, 7}, {2, 3, 6}} {
		if line, ok := src.Lines.Line(c.index, c.lead); !ok || line != c.line {
			t.Errorf("vector %d lead %d: line %d %v, want %d", c.index, c.lead, line, ok, c.line)
		}
	}
	if got := src.Lines.Item(0); !reflect.DeepEqual(got, []int{2, 3, 5}) {
		t.Errorf("lines of vector 0: %v, want [2 3 5]", got)
	}
}

func TestForecastsFlushesOldestVector(t *testing.T) {
	t.Parallel()
	// With two vectors open at most, the third origin sends the first;
	// a row for the first origin afterwards goes out as a vector of its
	// own, after the others in file order.
	src := newForecasts(t, "series,origin_time,target_time,forecast\n"+
		"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1\n"+
		"h,2026-01-01T01:00:00Z,2026-01-01T02:00:00Z,2\n"+
		"h,2026-01-01T02:00:00Z,2026-01-01T03:00:00Z,3\n"+
		"h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,4\n", 2)
	got := readAll(t, src)
	want := []vec{
		{Series: "h", Origin: "2026-01-01T00:00:00Z", Dense: []float64{1}},
		{Series: "h", Origin: "2026-01-01T01:00:00Z", Dense: []float64{2}},
		{Series: "h", Origin: "2026-01-01T02:00:00Z", Dense: []float64{3}},
		{Series: "h", Origin: "2026-01-01T00:00:00Z", Sparse: map[int32]float64{2: 4}},
	}
	if !reflect.DeepEqual(got, want) {
		t.Fatalf("vectors\n got %+v\nwant %+v", got, want)
	}
	if line, _ := src.Lines.Line(3, 2); line != 5 {
		t.Errorf("vector 3 lead 2 on line %d, want 5", line)
	}
}

func TestForecastsRejectsBadRows(t *testing.T) {
	t.Parallel()
	lookups := 0
	src, err := NewForecasts(strings.NewReader("series,origin_time,target_time,forecast,issued_at\n"+
		"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,2026-01-01T00:05:00Z\n"+ // 2 ok
		"h,2026-01-01T00:00:00Z,2026-01-01T01:20:00Z,1,\n"+ // 3 off grid
		"h,2026-01-01T00:00:00Z,2026-01-01T00:00:00Z,1,\n"+ // 4 lead 0
		"h,2026-01-01T00:00:00Z,2026-01-02T01:00:00Z,1,\n"+ // 5 lead 25 > 24
		"nope,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,\n"+ // 6 unknown series
		"nope,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,\n"+ // 7 unknown series, looked up once
		"h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,abc,\n"+ // 8 not a number
		"h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,NaN,\n"+ // 9 not finite
		"h,yesterday,2026-01-01T02:00:00Z,1,\n"+ // 10 bad time
		",2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,\n"+ // 11 no series
		"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,\n"+ // 12 exact repeat of line 2
		"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,9,\n"+ // 13 another value for lead 1
		"h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,2,2026-01-01T00:06:00Z\n"+ // 14 another issued_at
		"d,2026-03-29T00:00:00+01:00,2026-03-30T00:00:00+01:00,1,\n"+ // 15 1d in Brussels is 23 h here: off grid
		"d,2026-03-29T00:00:00+01:00,2026-03-30T00:00:00+02:00,1,\n"+ // 16 ok: lead 1
		"h,2026-01-01T00:00:00Z,2026-01-01T03:00:00Z,3,\n"), // 17 ok
		"f.csv", "m", testCache(t, &lookups), DefaultMaxOpen)
	if err != nil {
		t.Fatal(err)
	}
	got := readAll(t, src)
	want := []vec{
		{Series: "h", Origin: "2026-01-01T00:00:00Z", Sparse: map[int32]float64{1: 1, 3: 3}, Issue: "2026-01-01T00:05:00Z"},
		{Series: "d", Origin: "2026-03-28T23:00:00Z", Dense: []float64{1}},
	}
	if !reflect.DeepEqual(got, want) {
		t.Fatalf("vectors\n got %+v\nwant %+v", got, want)
	}
	wantReasons := map[int]string{
		3:  "not on the origin's step grid",
		4:  "lead is below 1",
		5:  "lead is beyond the horizon",
		6:  `series "nope" does not exist`,
		7:  `series "nope" does not exist`,
		8:  `column forecast: "abc" is not a number`,
		9:  "not a finite number",
		10: "column origin_time",
		11: "column series is empty",
		13: "lead 1 of origin 2026-01-01T00:00:00Z already has the value 1 from line 2",
		14: "issued_at 2026-01-01T00:06:00Z differs from 2026-01-01T00:05:00Z at line 2",
		15: "not on the origin's step grid",
	}
	if src.Rejected.N != int64(len(wantReasons)) || len(src.Rejected.List) != len(wantReasons) {
		t.Errorf("rejected %d (%d listed), want %d", src.Rejected.N, len(src.Rejected.List), len(wantReasons))
	}
	for _, r := range src.Rejected.List {
		if len(r.Lines) != 1 {
			t.Errorf("rejection %v: want one line", r)
			continue
		}
		if w, ok := wantReasons[r.Lines[0]]; !ok || !strings.Contains(r.Reason, w) {
			t.Errorf("line %d rejected for %q, want %q", r.Lines[0], r.Reason, w)
		}
		if strings.Contains(r.Reason, "f.csv") {
			t.Errorf("reason %q repeats the file name", r.Reason)
		}
	}
	if src.Duplicates != 1 {
		t.Errorf("duplicates %d, want 1 (line 12)", src.Duplicates)
	}
	if lookups != 3 {
		t.Errorf("%d series lookups, want 3 (h, nope, d)", lookups)
	}
	// Every row is accounted for once: sent, duplicate or rejected.
	if sum := src.Points + src.Duplicates + src.Rejected.N; sum != src.Rows {
		t.Errorf("points + duplicates + rejected = %d, rows %d", sum, src.Rows)
	}
}

func TestForecastsStopOnLookupFailure(t *testing.T) {
	t.Parallel()
	src := newForecasts(t, "series,origin_time,target_time,forecast\ndown,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1\n", 10)
	if _, err := src.Next(); err == nil || !strings.Contains(err.Error(), "connection refused") {
		t.Fatalf("Next: %v, want the lookup's error", err)
	}
}

func TestForecastsMissingColumn(t *testing.T) {
	t.Parallel()
	_, err := NewForecasts(strings.NewReader("series,origin_time,forecast\n"), "f.csv", "m", testCache(t, nil), 10)
	if err == nil || !strings.Contains(err.Error(), "f.csv:1: missing column target_time") {
		t.Fatalf("err %v, want a missing target_time at f.csv:1", err)
	}
}

func TestLinesRuns(t *testing.T) {
	t.Parallel()
	var l Lines
	// Vector 0: leads 1..3 on lines 2..4 (one run); vector 1: lead 1 on
	// line 5, vectors 2 and 3 lead 1 on lines 6, 7 (one run across
	// vectors 1..3); vector 4: leads 2 and 5 on lines 9 and 8.
	l.Add(0, 1, 2)
	l.Add(0, 2, 3)
	l.Add(0, 3, 4)
	l.Add(1, 1, 5)
	l.Add(2, 1, 6)
	l.Add(3, 1, 7)
	l.Add(4, 2, 9)
	l.Add(4, 5, 8)
	if len(l.runs) != 4 {
		t.Errorf("%d runs, want 4: %+v", len(l.runs), l.runs)
	}
	for _, c := range []struct {
		index int64
		lead  int32
		line  int
		ok    bool
	}{
		{0, 1, 2, true}, {0, 3, 4, true}, {0, 4, 0, false}, {1, 1, 5, true}, {2, 1, 6, true}, {3, 1, 7, true},
		{2, 2, 0, false}, {4, 2, 9, true}, {4, 5, 8, true}, {4, 3, 0, false}, {5, 1, 0, false}, {0, 0, 0, false},
	} {
		if line, ok := l.Line(c.index, c.lead); line != c.line || ok != c.ok {
			t.Errorf("Line(%d, %d) = %d %v, want %d %v", c.index, c.lead, line, ok, c.line, c.ok)
		}
	}
	for index, want := range [][]int{{2, 3, 4}, {5}, {6}, {7}, {8, 9}, nil} {
		if got := l.Item(int64(index)); !reflect.DeepEqual(got, want) {
			t.Errorf("Item(%d) = %v, want %v", index, got, want)
		}
	}
}

func TestLinesOfAWellOrderedFileStayFew(t *testing.T) {
	t.Parallel()
	// 1000 dense vectors of 24 leads on consecutive lines: one run each.
	var l Lines
	line := 2
	for i := range int64(1000) {
		for h := int32(1); h <= 24; h++ {
			l.Add(i, h, line)
			line++
		}
	}
	if len(l.runs) != 1000 {
		t.Errorf("%d runs, want 1000", len(l.runs))
	}
	// 100000 actuals on consecutive lines: one run.
	var a Lines
	for i := range int64(100_000) {
		a.Add(i, 0, int(i)+2)
	}
	if len(a.runs) != 1 {
		t.Errorf("%d runs for actuals, want 1", len(a.runs))
	}
	if got, ok := a.Line(76_543, 0); !ok || got != 76_545 {
		t.Errorf("Line(76543) = %d %v, want 76545", got, ok)
	}
}

func TestServerRejectionsByLine(t *testing.T) {
	t.Parallel()
	src := newForecasts(t, "series,origin_time,target_time,forecast\n"+
		"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1\n"+
		"h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,2\n"+
		"h,2026-01-01T01:00:00Z,2026-01-01T02:00:00Z,3\n", 10)
	readAll(t, src)
	for _, c := range []struct {
		r    *aftercastv1.ForecastRejection
		want string
	}{
		{&aftercastv1.ForecastRejection{Index: 0, Lead: 2, Field: "dense.values[1]", Reason: "value is too large"}, "line 3: value is too large"},
		{&aftercastv1.ForecastRejection{Index: 0, Lead: 0, Field: "model", Reason: "bad model"}, "lines 2-3: bad model"},
		{&aftercastv1.ForecastRejection{Index: 1, Lead: 0, Field: "series"}, "line 4: series"},
		{&aftercastv1.ForecastRejection{Index: 7, Lead: 1, Reason: "x"}, "vector 7 lead 1 (not sent by this push): x"},
	} {
		if got := src.Lines.Forecast(c.r).String(); got != c.want {
			t.Errorf("%v: %q, want %q", c.r, got, c.want)
		}
	}
}

func TestActuals(t *testing.T) {
	t.Parallel()
	src, err := NewActuals(strings.NewReader("value,series,time\n"+
		"1,a,2026-01-01T00:00:00Z\n"+
		"x,a,2026-01-01T01:00:00Z\n"+
		"\n"+
		"3,b,2026-01-01T02:00:00+01:00\n"), "a.csv")
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	for {
		a, err := src.Next()
		if errors.Is(err, io.EOF) {
			break
		}
		if err != nil {
			t.Fatal(err)
		}
		got = append(got, a.GetSeries()+" "+a.GetTime().AsTime().Format(time.RFC3339))
	}
	if want := []string{"a 2026-01-01T00:00:00Z", "b 2026-01-01T01:00:00Z"}; !reflect.DeepEqual(got, want) {
		t.Errorf("actuals %v, want %v", got, want)
	}
	if src.Rows != 3 || src.Sent != 2 || src.Rejected.N != 1 || src.Rejected.List[0].String() != `line 3: column value: "x" is not a number` {
		t.Errorf("rows %d sent %d rejected %+v", src.Rows, src.Sent, src.Rejected)
	}
	r := src.Lines.Actual(&aftercastv1.ActualRejection{Index: 1, Field: "series", Reason: `series "b" does not exist`})
	if got := r.String(); got != `line 5: series "b" does not exist` {
		t.Errorf("server rejection of actual 1: %q", got)
	}
}

func TestRejectionsKeepTheFirstThousand(t *testing.T) {
	t.Parallel()
	var rs Rejections
	for i := range MaxListed + 5 {
		rs.add(i+2, "bad")
	}
	if rs.N != MaxListed+5 || len(rs.List) != MaxListed || !rs.Truncated {
		t.Errorf("N %d listed %d truncated %v", rs.N, len(rs.List), rs.Truncated)
	}
	list := []Rejection{{Lines: []int{9}, Reason: "b"}, {Reason: "none"}, {Lines: []int{3, 4}, Reason: "a"}}
	SortByLine(list)
	var got []string
	for _, r := range list {
		got = append(got, r.String())
	}
	if want := []string{"lines 3-4: a", "line 9: b", "none"}; !reflect.DeepEqual(got, want) {
		t.Errorf("sorted %q, want %q", got, want)
	}
}

// strictRows are rows each refused on its own before sending, with the
// reason their rejection must give; the rows around them are sent.
var strictRows = []struct{ name, row, want string }{
	{"a field more", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,5", "row has 5 fields, the header has 4 (quote a field that contains a comma)"},
	{"a field less", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z", "row has 3 fields, the header has 4"},
	{"latin-1 key", "h\xe9,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1", `column series: "h\xe9" is not valid UTF-8 (byte 0xe9 at offset 1; the file must be UTF-8)`},
	{"hexadecimal", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,0x1p3", `column forecast: "0x1p3" is not a plain decimal number (hexadecimal is refused)`},
	{"digit separator", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1_000", `column forecast: "1_000" is not a plain decimal number ("_" between digits is refused)`},
	{"underflow", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1e-400", `column forecast: "1e-400" underflows float64: it is not zero but rounds to 0`},
	{"overflow", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,-1e400", `column forecast: "-1e400" overflows float64`},
	{"infinity", "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,+Inf", `column forecast: "+Inf" is not a finite number (NaN and Inf are refused)`},
}

func TestForecastsRefuseStrictly(t *testing.T) {
	t.Parallel()
	for _, c := range strictRows {
		t.Run(c.name, func(t *testing.T) {
			t.Parallel()
			src := newForecasts(t, "series,origin_time,target_time,forecast\n"+
				"h,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1\n"+ // 2
				c.row+"\n"+ // 3
				"h,2026-01-01T00:00:00Z,2026-01-01T03:00:00Z,1e-320\n", // 4: subnormal, kept
				DefaultMaxOpen)
			got := readAll(t, src)
			if want := []vec{{Series: "h", Origin: "2026-01-01T00:00:00Z", Sparse: map[int32]float64{1: 1, 3: 1e-320}}}; !reflect.DeepEqual(got, want) {
				t.Errorf("vectors %+v, want %+v", got, want)
			}
			if src.Rows != 3 || src.Rejected.N != 1 || len(src.Rejected.List) != 1 {
				t.Fatalf("rows %d, rejected %+v; want 3 rows, line 3 rejected", src.Rows, src.Rejected)
			}
			if r := src.Rejected.List[0].String(); !strings.HasPrefix(r, "line 3: "+c.want) {
				t.Errorf("rejection %q, want it to start with %q", r, "line 3: "+c.want)
			}
		})
	}
}

func TestActualsRefuseStrictly(t *testing.T) {
	t.Parallel()
	for _, c := range strictRows {
		t.Run(c.name, func(t *testing.T) {
			t.Parallel()
			// The same rows as actuals: series,time,<unused origin>,value.
			row := strings.Replace(c.row, "h,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z", "h,2026-01-01T02:00:00Z,x", 1)
			src, err := NewActuals(strings.NewReader("series,time,note,value\n"+
				"h,2026-01-01T01:00:00Z,x,1\n"+row+"\nh,2026-01-01T03:00:00Z,x,3\n"), "a.csv")
			if err != nil {
				t.Fatal(err)
			}
			var sent []float64
			for {
				a, err := src.Next()
				if errors.Is(err, io.EOF) {
					break
				}
				if err != nil {
					t.Fatal(err)
				}
				sent = append(sent, a.GetValue())
			}
			want := strings.ReplaceAll(c.want, "column forecast", "column value")
			if !reflect.DeepEqual(sent, []float64{1, 3}) || src.Rows != 3 || src.Rejected.N != 1 ||
				!strings.HasPrefix(src.Rejected.List[0].String(), "line 3: "+want) {
				t.Errorf("sent %v, rows %d, rejected %+v; want [1 3], 3 rows and line 3: %s", sent, src.Rows, src.Rejected, want)
			}
		})
	}
}

func TestReadingStopsOnBrokenQuoting(t *testing.T) {
	t.Parallel()
	src, err := NewActuals(strings.NewReader("series,time,value\nh,2026-01-01T01:00:00Z,1\nh,2026-01-01T02:00:00Z,\"2\n"), "a.csv")
	if err != nil {
		t.Fatal(err)
	}
	if _, err := src.Next(); err != nil {
		t.Fatal(err)
	}
	if _, err := src.Next(); err == nil || errors.Is(err, io.EOF) || !strings.Contains(err.Error(), "a.csv:3: quoted field is not closed") {
		t.Errorf("Next: %v, want the unclosed quote at a.csv:3", err)
	}
}
