package store_test

import (
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// Every time is stored only inside [1900-01-01, 2200-01-01), to the
// microsecond, and (origins, actual times) on the series' grid; anything
// else is refused naming the field and the range or the grid, and never
// stored at another time (method.md §3). Checked at both ends of the range
// and just outside.
func TestTimesRangeAndGrid(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "r", "1h", 2)
	at := func(v string) time.Time {
		x, err := time.Parse(time.RFC3339Nano, v)
		if err != nil {
			t.Fatal(err)
		}
		return x
	}
	for _, c := range []struct {
		time   string
		ok     bool
		reason string
	}{
		{"1900-01-01T00:00:00Z", true, ""},
		{"1899-12-31T23:00:00Z", false, "outside the accepted range [1900-01-01T00:00:00Z, 2200-01-01T00:00:00Z)"},
		{"2199-12-31T23:00:00Z", true, ""},
		{"2200-01-01T00:00:00Z", false, "outside the accepted range"},
		{"9999-01-01T00:00:00Z", false, "9999-01-01T00:00:00Z is outside the accepted range"}, // once stored as 1815
		{"2026-01-01T00:30:00Z", false, "not on the series' grid (1h steps from 2000-01-01T00:00:00Z): the nearest are 2026-01-01T00:00:00Z and 2026-01-01T01:00:00Z"},
		{"2026-01-01T01:00:00.0000001Z", false, "microsecond"},
	} {
		ack, err := s.WriteActuals(ctx, []store.Actual{{Series: "r", Time: at(c.time), Value: 1}}, 0)
		if err != nil {
			t.Fatal(err)
		}
		if c.ok != (ack.Accepted == 1) || !c.ok && (ack.Rejected != 1 || len(ack.Rejections) != 1 ||
			ack.Rejections[0].Field != "time" || !strings.Contains(ack.Rejections[0].Reason, c.reason)) {
			t.Errorf("actual at %s: %+v", c.time, ack)
		}
		// The same time as an origin: accepted only where its targets are
		// in range too (the last hour before 2200 has no target left).
		fa, err := s.WriteForecasts(ctx, []store.ForecastVector{{Series: "r", Model: "m", Origin: at(c.time), Values: []float64{1, 2}}}, 0)
		if err != nil {
			t.Fatal(err)
		}
		switch {
		case c.time == "2199-12-31T23:00:00Z":
			if fa.Accepted != 0 || fa.Rejected != 2 || !strings.Contains(fa.Rejections[0].Reason, "at or after 2200-01-01T00:00:00Z") {
				t.Errorf("origin %s, targets after the range: %+v", c.time, fa)
			}
		case c.ok:
			if fa.Accepted+fa.Duplicate != 2 {
				t.Errorf("origin %s: %+v", c.time, fa)
			}
		default:
			if fa.Rejected != 2 || len(fa.Rejections) != 1 || fa.Rejections[0].Field != "origin_time" || !strings.Contains(fa.Rejections[0].Reason, c.reason) {
				t.Errorf("origin %s: %+v", c.time, fa)
			}
		}
	}
	// Nothing was stored at another time: the only actuals are the two in range.
	pairs, _, err := s.Pairs(ctx, "r", "m", store.Selection{}, "", 100)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range pairs {
		if p.Target.Before(store.MinTime) || !p.Target.Before(store.MaxTime) || p.Target.Minute() != 0 {
			t.Errorf("a pair at %v", p.Target)
		}
	}
	// An issue time out of range refuses the vector.
	fa, err := s.WriteForecasts(ctx, []store.ForecastVector{{Series: "r", Model: "m", Origin: at("2026-01-01T00:00:00Z"),
		IssuedAt: at("0001-01-01T00:00:01Z"), Values: []float64{1}}}, 0)
	if err != nil || fa.Rejected != 1 || fa.Rejections[0].Field != "issue_time" {
		t.Errorf("issue time in year 1: %+v %v", fa, err)
	}
	// Backtest rows and training actuals follow the same rules.
	rows := backtest("r", 200, 2, time.Hour)
	rows[3].Origin = at("2199-12-31T22:00:00Z")
	rows[3].Target = at("2200-01-01T00:00:00Z")
	rows[5].Origin = rows[5].Origin.Add(30 * time.Minute)
	_, err = s.ImportBaseline(ctx, "m", rows, []store.TrainingActual{{Series: "r", Time: at("1800-01-01T00:00:00Z"), Value: 1}})
	var inv *store.InvalidError
	if !errors.As(err, &inv) {
		t.Fatalf("baseline with bad times: %v", err)
	}
	want := map[string]string{"rows[3].target_time": "outside the accepted range", "rows[5].origin_time": "not on the series' grid",
		"training_actuals[0].time": "outside the accepted range"}
	for _, v := range inv.Violations {
		if w, ok := want[v.Field]; ok && strings.Contains(v.Reason, w) {
			delete(want, v.Field)
		}
	}
	if len(want) > 0 {
		t.Errorf("violations %+v lack %v", inv.Violations, want)
	}
}
