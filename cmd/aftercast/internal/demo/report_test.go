package demo

import (
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/driftreport"
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
		"day 46  " + at(loc, 46) + "  dh/kalkbro   within → degraded (me)             0.610 > 0.550, window 30",
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

// The report takes each state's onset from the status itself (data time,
// as a production day), not from the events, and ends with what a page
// means by chance.
func TestReportShowsOnsetsFromStates(t *testing.T) {
	t.Parallel()
	loc, err := time.LoadLocation(Zone)
	if err != nil {
		t.Fatal(err)
	}
	sc := &Scenario{Location: loc, Substations: Substations()}
	me := aftercastv1.DriftMetric_DRIFT_METRIC_ME
	v, l := 0.61, 0.55
	degraded := &aftercastv1.DriftStatus{State: aftercastv1.DriftState_DRIFT_STATE_DEGRADED, WindowN: 30,
		OnsetOriginTime: timestamppb.New(ProductionOrigin(loc, 46)), OriginsSinceOnset: 45, OnsetMetric: me, OnsetValue: &v, OnsetLimit: &l,
		BreachedMetrics: []aftercastv1.DriftMetric{me}}
	lead := func(h int32, st aftercastv1.DriftState, day int) *aftercastv1.DriftStatus {
		return &aftercastv1.DriftStatus{Lead: &h, State: st, WindowN: 30, OnsetOriginTime: timestamppb.New(ProductionOrigin(loc, day)),
			OriginsSinceOnset: int32(ProductionDays - day + 1)}
	}
	states := []*aftercastv1.SeriesModelDrift{
		{Series: "dh/aaskrog", SeriesStatus: &aftercastv1.DriftStatus{State: aftercastv1.DriftState_DRIFT_STATE_WITHIN, WindowN: 30,
			OnsetOriginTime: timestamppb.New(ProductionOrigin(loc, 9)), OriginsSinceOnset: 82}},
		{Series: MeterFaultSeries, SeriesStatus: degraded, LeadStatuses: []*aftercastv1.DriftStatus{
			lead(2, aftercastv1.DriftState_DRIFT_STATE_DEGRADED, 41), lead(1, aftercastv1.DriftState_DRIFT_STATE_WITHIN, 9)}},
	}
	// A revision moved the meter substation's series level: the event says
	// so; the onset stays the status's.
	events := []*aftercastv1.DriftEvent{{Series: MeterFaultSeries, OriginTime: timestamppb.New(ProductionOrigin(loc, 46)),
		PreviousState: aftercastv1.DriftState_DRIFT_STATE_WITHIN, NewState: aftercastv1.DriftState_DRIFT_STATE_DEGRADED, Metric: me,
		Value: &v, Limit: &l, WindowN: 30, Cause: aftercastv1.DriftCause_DRIFT_CAUSE_REVISION}}
	var b strings.Builder
	es := ErrorScale{Mode: aftercastv1.ErrorScale_ERROR_SCALE_AUTO, Exponents: map[string]float64{"dh/aaskrog": 0.81, MeterFaultSeries: 0.6}}
	if err := sc.WriteReport(&b, driftreport.Listing{States: states, ExpectedChancePagesPerWeek: 0.04}, events, es); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	t.Logf("\n%s", out)
	for _, want := range []string{
		"SUBSTATION  STATE          SINCE   ORIGINS AGO  WINDOW  MAE  EXPECTED  ALARM LIMIT  ME  ME ALARM BAND  INJECTED FAULT\n",
		"dh/aaskrog  within         day 9   82           30",
		"dh/kalkbro  degraded (me)  day 46  45           30",
		"day 46  " + at(loc, 46) + "  dh/kalkbro  within → degraded (me, on revision)  0.610 > 0.550, window 30",
		"expected chance pages per week, if everything selected is healthy: 0.0400",
		driftreport.Caution,
		"\nerror scale auto (b̂ 0.60–0.81, fitted to each backtest): winter errors are judged against what the backtest promised at winter levels; " +
			"0 of 6 healthy substations paged by chance; 0 of their leads entered degraded (leads do not page).\n",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
	if !strings.HasSuffix(out, "(leads do not page).\n") {
		t.Errorf("report does not end with the error scale line:\n%s", out)
	}
	var lead2 []string
	for _, line := range strings.Split(out, "\n") {
		if f := strings.Fields(line); len(f) > 0 && f[0] == "2" {
			lead2 = f
		}
	}
	if want := []string{"2", "30", "—", "—", "—", "—", "—", "degraded", "day", "41", strconv.Itoa(ProductionDays - 41 + 1)}; !slices.Equal(lead2, want) {
		t.Errorf("lead 2 row %q, want %q", lead2, want)
	}
	if strings.Contains(out, "99%") || strings.Contains(out, "verdicts") {
		t.Errorf("report speaks of 99%% or verdicts:\n%s", out)
	}
}

// On level-scaled errors an event's window MAE and limit in MW may fall
// on the side of each other its change does not say; the report marks it.
func TestReportMarksScaledComparisons(t *testing.T) {
	t.Parallel()
	loc, err := time.LoadLocation(Zone)
	if err != nil {
		t.Fatal(err)
	}
	sc := &Scenario{Location: loc, Substations: Substations()}
	v, l := 0.932, 0.940
	var b strings.Builder
	err = sc.writeEvents(&b, []*aftercastv1.DriftEvent{{Series: StaleFeedSeries, OriginTime: timestamppb.New(ProductionOrigin(loc, 65)),
		PreviousState: aftercastv1.DriftState_DRIFT_STATE_WITHIN, NewState: aftercastv1.DriftState_DRIFT_STATE_DEGRADED,
		Metric: aftercastv1.DriftMetric_DRIFT_METRIC_MAE, Value: &v, Limit: &l, WindowN: 30}})
	if err != nil {
		t.Fatal(err)
	}
	out := b.String()
	for _, want := range []string{"0.932 < 0.940, window 30 *\n", "  * judged on level-scaled errors"} {
		if !strings.Contains(out, want) {
			t.Errorf("report lacks %q:\n%s", want, out)
		}
	}
	b.Reset()
	v = 0.95
	if err := sc.writeEvents(&b, []*aftercastv1.DriftEvent{{Series: StaleFeedSeries, PreviousState: aftercastv1.DriftState_DRIFT_STATE_WITHIN,
		NewState: aftercastv1.DriftState_DRIFT_STATE_DEGRADED, Metric: aftercastv1.DriftMetric_DRIFT_METRIC_MAE, Value: &v, Limit: &l, WindowN: 30}}); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(b.String(), "*") {
		t.Errorf("report marks a comparison that agrees with its change:\n%s", b.String())
	}
}

// The report's last line counts, among the healthy substations only, those
// that paged, those the service could not judge at the series level, and
// the leads that entered degraded, from the states and events.
func TestReportSaysWhatTheErrorScaleDid(t *testing.T) {
	t.Parallel()
	loc, err := time.LoadLocation(Zone)
	if err != nil {
		t.Fatal(err)
	}
	sc := &Scenario{Location: loc, Substations: Substations()}
	const (
		within   = aftercastv1.DriftState_DRIFT_STATE_WITHIN
		degraded = aftercastv1.DriftState_DRIFT_STATE_DEGRADED
		unusable = aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE
	)
	keff := func(k float64) *float64 { return &k }
	states := []*aftercastv1.SeriesModelDrift{
		{Series: "dh/aaskrog", SeriesStatus: &aftercastv1.DriftStatus{State: within}},
		{Series: "dh/birkedal", SeriesStatus: &aftercastv1.DriftStatus{State: unusable, KEff: keff(14.6)}},
		{Series: "dh/engtoft", SeriesStatus: &aftercastv1.DriftStatus{State: degraded, KEff: keff(250)}},
		{Series: "dh/stenvig", SeriesStatus: &aftercastv1.DriftStatus{State: unusable, KEff: keff(27.2)}},
		{Series: StaleFeedSeries, SeriesStatus: &aftercastv1.DriftStatus{State: unusable, KEff: keff(9)}},
	}
	ev := func(series string, lead int32, to aftercastv1.DriftState) *aftercastv1.DriftEvent {
		e := &aftercastv1.DriftEvent{Series: series, PreviousState: within, NewState: to}
		if lead > 0 {
			e.Lead = &lead
		}
		return e
	}
	events := []*aftercastv1.DriftEvent{
		ev("dh/engtoft", 0, degraded), ev("dh/engtoft", 0, within), ev("dh/engtoft", 0, degraded),
		ev("dh/aaskrog", 3, degraded), ev("dh/aaskrog", 3, degraded), ev("dh/aaskrog", 5, degraded), ev("dh/birkedal", 3, degraded),
		ev("dh/aaskrog", 7, within),
		ev(MeterFaultSeries, 0, degraded), ev(MeterFaultSeries, 9, degraded),
	}
	for _, c := range []struct {
		es   ErrorScale
		want string
	}{
		{ErrorScale{Mode: aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE, Exponents: map[string]float64{"dh/aaskrog": 0}},
			"\nerror scale absolute: errors are judged as they are, against a band that averages the backtest's summer and winter; " +
				"1 of 6 healthy substations paged in the winter, 2 could not be judged at the series level " +
				"(insufficient_baseline: K_eff 15–27 < 30: the plain errors follow the season); 3 of their leads entered degraded (leads do not page).\n"},
		{ErrorScale{Mode: aftercastv1.ErrorScale_ERROR_SCALE_AUTO},
			"\nerror scale auto: winter errors are judged against what the backtest promised at winter levels; " +
				"1 of 6 healthy substations paged by chance, 2 could not be judged at the series level " +
				"(insufficient_baseline: K_eff 15–27 < 30); 3 of their leads entered degraded (leads do not page).\n"},
		{ErrorScale{}, ""},
	} {
		var b strings.Builder
		sc.writeErrorScale(&b, driftreport.Listing{States: states}, events, c.es)
		if b.String() != c.want {
			t.Errorf("%v: error scale line\n%q, want\n%q", c.es.Mode, b.String(), c.want)
		}
	}
}

// at is the local date and time of the origin of production day n, as the
// report prints it.
func at(loc *time.Location, n int) string { return ProductionOrigin(loc, n).Format("2006-01-02 15:04") }
