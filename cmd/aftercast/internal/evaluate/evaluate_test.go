package evaluate

import (
	"bytes"
	"errors"
	"math"
	"os"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/aftercast/aftercast/cmd/aftercast/internal/records"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/report"
	"github.com/aftercast/aftercast/scoring"
)

func writeFile(t *testing.T, body string) string {
	t.Helper()
	p := filepath.Join(t.TempDir(), "in.csv")
	if err := os.WriteFile(p, []byte(body), 0o644); err != nil {
		t.Fatal(err)
	}
	return p
}

const header = "series,origin_time,target_time,forecast,actual\n"

func TestWorkedExampleThroughFile(t *testing.T) {
	t.Parallel()
	// Columns in another order, an extra column, the method.md worked example.
	in := writeFile(t, "actual,note,target_time,series,forecast,origin_time\n"+
		"10,a,2026-01-01T01:00:00Z,p,8,2026-01-01T00:00:00Z\n"+
		"0,b,2026-01-01T02:00:00Z,p,1,2026-01-01T01:00:00Z\n"+
		"5,c,2026-01-01T03:00:00Z,p,5,2026-01-01T02:00:00Z\n")
	hist := writeFile(t, "series,time,value\np,2025-12-31T21:00:00Z,4\np,2025-12-31T22:00:00Z,6\np,2025-12-31T23:00:00Z,5\np,2026-01-01T00:00:00Z,7\np,2026-01-01T01:00:00Z,1000\n")
	rs, err := File(in, hist, Options{Step: "1h"})
	if err != nil {
		t.Fatal(err)
	}
	if len(rs) != 1 || len(rs[0].Table.Leads) != 1 {
		t.Fatalf("results: %+v", rs)
	}
	m := rs[0].Table.Leads[0]
	// The 1000 after the first origin is not training data and must not count.
	if m.N != 3 || math.Abs(m.MASE-0.6) > 1e-12 || m.MAPE != 10 || m.MAPEExcluded != 1 {
		t.Errorf("lead 1: %+v", m)
	}
}

func TestGroupsBySeriesAndModel(t *testing.T) {
	t.Parallel()
	in := writeFile(t, "series,model,origin_time,target_time,forecast,actual\n"+
		"b,m2,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,2\n"+
		"a,m1,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,3\n"+
		"b,m1,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1,4\n")
	rs, err := File(in, "", Options{Step: "1h"})
	if err != nil {
		t.Fatal(err)
	}
	var got []string
	for _, r := range rs {
		got = append(got, r.Series+"/"+r.Model)
	}
	if strings.Join(got, " ") != "a/m1 b/m1 b/m2" {
		t.Errorf("groups = %v, want sorted a/m1 b/m1 b/m2", got)
	}
	if rs[1].Table.Leads[0].Lead != 2 || rs[1].Table.Overall.ME != 3 {
		t.Errorf("b/m1: %+v", rs[1].Table)
	}
}

// Daily forecasts issued at 05:00 Brussels time across both 2026 DST
// changes: every lead is one calendar day however many hours it spans.
func TestCalendarDaysInZone(t *testing.T) {
	t.Parallel()
	bru, _ := time.LoadLocation("Europe/Brussels")
	var b strings.Builder
	b.WriteString(header)
	step := scoring.MustParseStep("1d", bru)
	for _, start := range []time.Time{time.Date(2026, 3, 25, 5, 0, 0, 0, bru), time.Date(2026, 10, 21, 5, 0, 0, 0, bru)} {
		for k := range 7 {
			o := step.Add(start, k)
			for h := 1; h <= 3; h++ {
				b.WriteString("s," + o.Format(time.RFC3339) + "," + step.Add(o, h).UTC().Format(time.RFC3339) + ",10,11\n")
			}
		}
	}
	in := writeFile(t, b.String())
	rs, err := File(in, "", Options{Step: "1d", Location: bru})
	if err != nil {
		t.Fatal(err)
	}
	if n := len(rs[0].Table.Leads); n != 3 || rs[0].Table.Overall.N != 42 {
		t.Errorf("leads %d, pairs %d; want 3 leads, 42 pairs", n, rs[0].Table.Overall.N)
	}
	// In UTC the same rows are off the daily grid.
	if _, err := File(in, "", Options{Step: "1d"}); !errors.Is(err, scoring.ErrOffGrid) {
		t.Errorf("UTC calendar: err = %v, want ErrOffGrid", err)
	}
	// Inference in the zone finds the calendar day.
	var notes bytes.Buffer
	if rs, err := File(in, "", Options{Location: bru, Notes: &notes}); err != nil || rs[0].Step != "1d" {
		t.Errorf("inferred: %v, %v", rs, err)
	}
	if !strings.Contains(notes.String(), "inferred step 1d for series s") {
		t.Errorf("notes = %q, want the inferred step named", notes.String())
	}
}

func TestSelection(t *testing.T) {
	t.Parallel()
	var b strings.Builder
	b.WriteString(header)
	step := scoring.MustParseStep("1h", nil)
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	for k := range 10 {
		o := step.Add(t0, k)
		for h := 1; h <= 4; h++ {
			b.WriteString("s," + o.Format(time.RFC3339) + "," + step.Add(o, h).Format(time.RFC3339) + ",0,1\n")
		}
	}
	in := writeFile(t, b.String())
	cases := []struct {
		name  string
		opt   Options
		pairs int64
		leads int
	}{
		{"all", Options{}, 40, 4},
		{"leads", Options{Leads: []int{2, 4}}, 20, 2},
		{"origin range is inclusive-exclusive", Options{OriginFrom: step.Add(t0, 2), OriginTo: step.Add(t0, 5)}, 12, 4},
		{"target range", Options{TargetFrom: step.Add(t0, 4), TargetTo: step.Add(t0, 5)}, 4, 4},
	}
	for _, c := range cases {
		c.opt.Step = "1h"
		rs, err := File(in, "", c.opt)
		if err != nil {
			t.Fatal(err)
		}
		if got := rs[0].Table.Overall.N; got != c.pairs || len(rs[0].Table.Leads) != c.leads {
			t.Errorf("%s: %d pairs in %d leads, want %d in %d", c.name, got, len(rs[0].Table.Leads), c.pairs, c.leads)
		}
	}
}

// Unsorted input gives the same numbers as sorted input, and duplicates are
// caught in both modes.
func TestUnsortedInputAndDuplicates(t *testing.T) {
	t.Parallel()
	rows := []string{
		"s,2026-01-01T02:00:00Z,2026-01-01T03:00:00Z,5,5",
		"s,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,8,10",
		"s,2026-01-01T01:00:00Z,2026-01-01T02:00:00Z,1,0",
		"s,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,8,10", // exact repeat: counted once
	}
	var notes bytes.Buffer
	rs, err := File(writeFile(t, header+strings.Join(rows, "\n")+"\n"), "", Options{Step: "1h", Notes: &notes})
	if err != nil {
		t.Fatal(err)
	}
	if m := rs[0].Table.Overall; m.N != 3 || m.MAE != 1 {
		t.Errorf("unsorted: %+v, want the worked example", m)
	}
	if !strings.Contains(notes.String(), "not sorted") {
		t.Errorf("notes = %q, want the re-read announced", notes.String())
	}
	for _, body := range []string{
		header + rows[1] + "\ns,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,8,11\n",                     // sorted
		header + strings.Join(rows[:3], "\n") + "\ns,2026-01-01T01:00:00Z,2026-01-01T02:00:00Z,2,0\n", // unsorted
	} {
		_, err := File(writeFile(t, body), "", Options{Step: "1h"})
		var le *records.LineError
		if !errors.As(err, &le) || !strings.Contains(err.Error(), "duplicate") {
			t.Errorf("conflicting duplicate: err = %v, want a line error naming the duplicate", err)
		}
	}
}

func TestBadInputNamesLines(t *testing.T) {
	t.Parallel()
	cases := []struct {
		name, body string
		line       int
		want       string
	}{
		{"missing column", "series,origin_time,target_time,forecast\n", 1, "missing column actual"},
		{"empty file", "", 1, "empty file"},
		{"NaN", header + "s,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,NaN,1\n", 2, "not a finite number"},
		{"Inf", header + "s,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,+Inf\n", 2, "not a finite number"},
		{"number", header + "s,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,1\ns,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,1;5,1\n", 3, "not a number"},
		{"time", header + "s,2026-01-01 00:00,2026-01-01T01:00:00Z,1,1\n", 2, "not an RFC 3339 time"},
		{"off grid", header + "s,2026-01-01T00:00:00Z,2026-01-01T01:20:00Z,1,1\n", 2, "not on the origin's step grid"},
		{"target before origin", header + "s,2026-01-01T01:00:00Z,2026-01-01T00:00:00Z,1,1\n", 2, "below 1"},
		{"empty series", header + ",2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,1\n", 2, "column series is empty"},
		{"broken quotes", header + "s,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,\"1,1\n", 2, "quote"},
	}
	for _, c := range cases {
		_, err := File(writeFile(t, c.body), "", Options{Step: "1h"})
		var le *records.LineError
		if !errors.As(err, &le) {
			t.Errorf("%s: err = %v, want a line error", c.name, err)
			continue
		}
		if le.Line != c.line || !strings.Contains(err.Error(), c.want) {
			t.Errorf("%s: line %d %q; want line %d containing %q", c.name, le.Line, err, c.line, c.want)
		}
	}
}

func TestStepInferenceNeedsData(t *testing.T) {
	t.Parallel()
	_, err := File(writeFile(t, header+"s,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,1\n"), "", Options{})
	if err == nil || !strings.Contains(err.Error(), "pass --step") {
		t.Errorf("one row, no --step: err = %v, want a request for --step", err)
	}
}

// The JSON report carries every key of the pinned shape and null for an
// undefined metric.
func TestJSONShape(t *testing.T) {
	t.Parallel()
	rs, err := File(writeFile(t, header+"s,2026-01-01T00:00:00Z,2026-01-01T01:00:00Z,1,0\n"), "", Options{Step: "1h"})
	if err != nil {
		t.Fatal(err)
	}
	var b bytes.Buffer
	if err := report.WriteJSON(&b, rs); err != nil {
		t.Fatal(err)
	}
	for _, want := range []string{`"results"`, `"series": "s"`, `"model": ""`, `"step": "1h"`, `"lead": 1`, `"mape": null`, `"mape_excluded": 1`, `"wape": null`, `"mase": null`, `"overall"`} {
		if !strings.Contains(b.String(), want) {
			t.Errorf("JSON lacks %s:\n%s", want, b.String())
		}
	}
	if strings.Contains(b.String(), `"overall": {`+"\n"+`      "lead"`) {
		t.Error("overall must not carry a lead")
	}
}
