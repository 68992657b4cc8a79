package export

import (
	"bytes"
	"encoding/json"
	"strings"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"google.golang.org/protobuf/types/known/timestamppb"
)

func pairs() []*aftercastv1.Pair {
	ts := func(s string) *timestamppb.Timestamp {
		t, err := time.Parse(time.RFC3339Nano, s)
		if err != nil {
			panic(err)
		}
		return timestamppb.New(t)
	}
	return []*aftercastv1.Pair{
		{OriginTime: ts("2026-01-01T00:00:00Z"), TargetTime: ts("2026-01-01T01:00:00+01:00"), Lead: 1, Forecast: 0.1, Actual: 0.30000000000000004,
			Error: 0.20000000000000004, ForecastReceiveTime: ts("2026-01-01T00:00:01.5Z"), ActualFirstReceiveTime: ts("2026-01-01T01:00:07Z")},
		{OriginTime: ts("2026-01-01T00:00:00Z"), TargetTime: ts("2026-01-01T02:00:00Z"), Lead: 2, Forecast: 1e21, Actual: -3, Error: -1e21,
			Late: true, LateReissue: true, ForecastReceiveTime: ts("2026-01-02T00:00:00Z"), ActualFirstReceiveTime: ts("2026-01-01T02:00:00Z")},
	}
}

func write(t *testing.T, format string, ps []*aftercastv1.Pair) string {
	t.Helper()
	var b bytes.Buffer
	w, err := NewPairs(&b, format, "plant-7/heat", "m1")
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range ps {
		if err := w.Write(p); err != nil {
			t.Fatal(err)
		}
	}
	if err := w.Close(); err != nil {
		t.Fatal(err)
	}
	return b.String()
}

func TestCSV(t *testing.T) {
	t.Parallel()
	want := "series,model,origin_time,target_time,lead,forecast,actual,error,late,forecast_received_at,actual_first_received_at,late_reissue\n" +
		"plant-7/heat,m1,2026-01-01T00:00:00Z,2026-01-01T00:00:00Z,1,0.1,0.30000000000000004,0.20000000000000004,false,2026-01-01T00:00:01.5Z,2026-01-01T01:00:07Z,false\n" +
		"plant-7/heat,m1,2026-01-01T00:00:00Z,2026-01-01T02:00:00Z,2,1e+21,-3,-1e+21,true,2026-01-02T00:00:00Z,2026-01-01T02:00:00Z,true\n"
	if got := write(t, "csv", pairs()); got != want {
		t.Errorf("CSV\n%s\nwant\n%s", got, want)
	}
}

func TestJSON(t *testing.T) {
	t.Parallel()
	got := write(t, "json", pairs())
	var doc struct {
		Pairs []map[string]any `json:"pairs"`
	}
	if err := json.Unmarshal([]byte(got), &doc); err != nil {
		t.Fatalf("not JSON: %v\n%s", err, got)
	}
	if len(doc.Pairs) != 2 {
		t.Fatalf("%d pairs, want 2", len(doc.Pairs))
	}
	p := doc.Pairs[0]
	for _, k := range PairColumns {
		if _, ok := p[k]; !ok {
			t.Errorf("pair lacks key %q", k)
		}
	}
	if p["actual"] != 0.30000000000000004 || p["target_time"] != "2026-01-01T00:00:00Z" || p["late"] != false || doc.Pairs[1]["late"] != true || doc.Pairs[1]["late_reissue"] != true {
		t.Errorf("first pair %v", p)
	}
	// Keys come in the CSV's column order.
	if i, j := strings.Index(got, `"origin_time"`), strings.Index(got, `"actual_first_received_at"`); i < 0 || j < i {
		t.Errorf("key order:\n%s", got)
	}
	if empty := write(t, "json", nil); empty != "{\"pairs\":[]}\n" {
		t.Errorf("no pairs: %q", empty)
	}
}

func TestUnknownFormat(t *testing.T) {
	t.Parallel()
	if _, err := NewPairs(&bytes.Buffer{}, "table", "s", "m"); err == nil {
		t.Error("format table accepted")
	}
}
