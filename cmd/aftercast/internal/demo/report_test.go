package demo

import (
	"strings"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"google.golang.org/protobuf/types/known/timestamppb"
)

func TestDayOf(t *testing.T) {
	t.Parallel()
	loc, err := time.LoadLocation(Zone)
	if err != nil {
		t.Fatal(err)
	}
	sc := &Scenario{Location: loc}
	for _, n := range []int{-364, 0, 1, 56, ProductionDays} {
		o := ProductionOrigin(loc, n)
		if got, ok := sc.DayOf(o); !ok || got != n {
			t.Errorf("DayOf(origin of day %d = %v) = %d, %v", n, o, got, ok)
		}
		if _, ok := sc.DayOf(o.Add(time.Hour)); ok {
			t.Errorf("DayOf(%v) takes an hour after an origin for one", o.Add(time.Hour))
		}
	}
}

func TestReportGroupsEvents(t *testing.T) {
	t.Parallel()
	loc, err := time.LoadLocation(Zone)
	if err != nil {
		t.Fatal(err)
	}
	sc := &Scenario{Location: loc, Substations: Substations()}
	const (
		within   = aftercastv1.DriftState_DRIFT_STATE_WITHIN
		degraded = aftercastv1.DriftState_DRIFT_STATE_DEGRADED
		improved = aftercastv1.DriftState_DRIFT_STATE_IMPROVED
		none     = aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA
		me       = aftercastv1.DriftMetric_DRIFT_METRIC_ME
	)
	ev := func(series string, lead int32, day int, from, to aftercastv1.DriftState, metric aftercastv1.DriftMetric) *aftercastv1.DriftEvent {
		e := &aftercastv1.DriftEvent{Series: series, OriginTime: timestamppb.New(ProductionOrigin(loc, day)),
			PreviousState: from, NewState: to, Metric: metric, WindowN: 30}
		if lead > 0 {
			e.Lead = &lead
		}
		if metric != aftercastv1.DriftMetric_DRIFT_METRIC_UNSPECIFIED {
			v, l := 0.61, 0.55
			e.Value, e.Limit = &v, &l
		}
		return e
	}
	events := []*aftercastv1.DriftEvent{
		ev(MeterFaultSeries, 0, 9, none, within, 0),
		ev(MeterFaultSeries, 3, 40, within, degraded, me),
		ev(MeterFaultSeries, 1, 44, within, degraded, me),
		ev(MeterFaultSeries, 2, 41, within, degraded, me),
		ev(MeterFaultSeries, 0, 46, within, degraded, me),
		ev(StaleFeedSeries, 0, 30, within, improved, aftercastv1.DriftMetric_DRIFT_METRIC_MAE),
		ev(StaleFeedSeries, 7, 30, within, improved, aftercastv1.DriftMetric_DRIFT_METRIC_MAE),
	}
	var b strings.Builder
	if err := sc.writeEvents(&b, events); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	for _, want := range []string{
		"day 46  2026-10-15 05:00  dh/kalkbro   within → degraded (me)             0.610 > 0.550, window 30",
		"day 30                    dh/lyngmark  within ⇄ improved (informational)  1 change\n",
		"dh/kalkbro  within → degraded (me)  3 leads: 1-3  days 40–44 (median 41)",
		"not listed: 1 start-up events",
		"and 1 per-lead events into or out of improved",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
}
