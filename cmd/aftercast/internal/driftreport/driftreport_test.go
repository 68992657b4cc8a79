package driftreport

import (
	"bytes"
	"encoding/json"
	"math"
	"reflect"
	"slices"
	"strings"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/report"
	"github.com/aftercast/aftercast/scoring"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// The key sets below are the JSON contract of the commands: the keys the
// contract check (../shared/checks/contract drift) requires, and the ones
// this client adds. A change to them is a change of the interface.
var (
	statusKeys = []string{"lead", "state", "breached", "onset_origin_time", "origins_since_onset", "onset_metric", "onset_value",
		"onset_limit", "noticed_time", "reason", "last_origin_time", "window_n", "mae", "mae_expected", "mae_band_lower", "mae_band_upper",
		"mae_alarm_limit", "me", "me_expected", "me_band_lower", "me_band_upper", "me_alarm_lower", "me_alarm_upper", "k_eff", "level_scale", "backtest_mae"}
	seriesKeys = []string{"series", "model", "state", "onset_origin_time", "origins_since_onset", "noticed_time", "baseline_version",
		"decision_leads", "series_level", "leads"}
	statesKeys = []string{"pending_evaluations", "expected_chance_pages_per_week", "series"}
	eventKeys  = []string{"token", "time", "series", "model", "lead", "origin_time", "cause", "metric", "previous", "state", "value", "limit",
		"band_lower", "band_upper", "window_n", "k_eff"}
	transitionKeys = []string{"lead", "origin_time", "previous", "state", "metric", "value", "limit", "window_n", "k_eff", "reason"}
	versionKeys    = []string{"series", "model", "version", "active", "create_time", "first_origin_time", "last_origin_time",
		"origin_cadence_steps", "max_lead", "rows", "training_actuals", "mase_scale", "warnings"}
	baselineLeadKeys = []string{"lead", "k", "k_eff", "usable", "reason", "expected", "mae", "rmse", "me", "error_scale_exponent", "error_scale_floor"}
	upperBandKeys    = []string{"expected", "band_lower", "band_upper", "alarm_upper", "k_eff"}
	twoSidedKeys     = []string{"expected", "band_lower", "band_upper", "alarm_lower", "alarm_upper", "k_eff"}

	// Required by the contract check.
	contractSeriesKeys = []string{"series", "model", "state", "leads"}
	contractLeadKeys   = []string{"lead", "state", "window_n", "mae", "mae_expected", "mae_band_lower", "mae_band_upper",
		"mae_alarm_limit", "me", "me_alarm_lower", "me_alarm_upper"}
	contractEventKeys = []string{"time", "series", "model", "lead", "origin_time", "metric", "previous", "state", "value", "limit", "window_n"}
)

// wallClock tells the keys the contract's replay check leaves out when it
// compares the states of the same data pushed in different orders: those
// that hold wall-clock times. Every other key must be a function of the
// stored data.
func wallClock(k string) bool {
	for _, w := range []string{"noticed", "recorded", "detected", "updated", "wall"} {
		if strings.Contains(k, w) {
			return true
		}
	}
	return strings.Contains(k, "since") && !strings.Contains(k, "onset") && !strings.Contains(k, "origin")
}

func f(x float64) *float64 { return &x }
func i32(x int32) *int32   { return &x }

var t0 = time.Date(2026, 3, 1, 12, 0, 0, 0, time.UTC)

// decode round-trips v through JSON into generic maps, as a program
// reading the output sees it.
func decode(t *testing.T, v any) map[string]any {
	t.Helper()
	var b bytes.Buffer
	if err := WriteJSON(&b, v); err != nil {
		t.Fatal(err)
	}
	var m map[string]any
	if err := json.Unmarshal(b.Bytes(), &m); err != nil {
		t.Fatalf("%v in\n%s", err, b.String())
	}
	return m
}

func keys(t *testing.T, v any) []string {
	t.Helper()
	m, ok := v.(map[string]any)
	if !ok {
		t.Fatalf("%v is not an object", v)
	}
	var ks []string
	for k := range m {
		ks = append(ks, k)
	}
	slices.Sort(ks)
	return ks
}

func checkKeys(t *testing.T, what string, v any, want, required []string) {
	t.Helper()
	got := keys(t, v)
	w := slices.Sorted(slices.Values(want))
	if !reflect.DeepEqual(got, w) {
		t.Errorf("%s keys\n got %v\nwant %v", what, got, w)
	}
	for _, k := range required {
		if !slices.Contains(got, k) {
			t.Errorf("%s lacks %q, which the contract requires", what, k)
		}
	}
}

// onset is the onset origin of testDrift's series level, 12 origins (here
// hours) before its last origin; noticed is when the service noticed it.
var (
	onset   = t0.Add(-12 * time.Hour)
	noticed = t0.Add(3 * time.Minute)
)

// testDrift is one (series, model): the series level degraded on MAE since
// onset, three leads sent out of order, one of them with nothing but a
// state and a reason.
func testDrift() *aftercastv1.SeriesModelDrift {
	full := func(lead int32, st aftercastv1.DriftState) *aftercastv1.DriftStatus {
		return &aftercastv1.DriftStatus{Lead: i32(lead), State: st, NoticedTime: timestamppb.New(noticed),
			OnsetOriginTime: timestamppb.New(onset.Add(-time.Duration(lead) * time.Hour)), OriginsSinceOnset: 12 + lead,
			LastOriginTime: timestamppb.New(t0.Add(-time.Hour)),
			WindowN:        30, Mae: f(2.5), MaeExpected: f(2), MaeBandLower: f(1.5), MaeBandUpper: f(2.4), MaeAlarmLimit: f(2.45),
			Me: f(0.1), MeExpected: f(0), MeBandLower: f(-0.3), MeBandUpper: f(0.3), MeAlarmLower: f(-0.5), MeAlarmUpper: f(0.5), KEff: f(180)}
	}
	series := full(0, aftercastv1.DriftState_DRIFT_STATE_DEGRADED)
	series.Lead = nil
	series.BreachedMetrics = []aftercastv1.DriftMetric{aftercastv1.DriftMetric_DRIFT_METRIC_MAE}
	series.OnsetMetric, series.OnsetValue, series.OnsetLimit = aftercastv1.DriftMetric_DRIFT_METRIC_MAE, f(2.47), f(2.45)
	improved := full(2, aftercastv1.DriftState_DRIFT_STATE_IMPROVED)
	improved.OnsetMetric, improved.OnsetValue, improved.OnsetLimit = aftercastv1.DriftMetric_DRIFT_METRIC_MAE, f(1.4), f(1.5)
	return &aftercastv1.SeriesModelDrift{Series: "plant-7/heat", Model: "m1", BaselineVersion: 2, DecisionLeads: []int32{1, 2, 3},
		SeriesStatus: series,
		LeadStatuses: []*aftercastv1.DriftStatus{
			full(3, aftercastv1.DriftState_DRIFT_STATE_WITHIN),
			{Lead: i32(1), State: aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE, WindowN: 4, Mae: f(1), Me: f(math.NaN()),
				Reason: "K = 150 < 180"},
			improved,
		}}
}

func TestStatesJSON(t *testing.T) {
	t.Parallel()
	d := testDrift()
	// A series without a series-level status yet, and no baseline.
	bare := &aftercastv1.SeriesModelDrift{Series: "b", Model: "m2",
		LeadStatuses: []*aftercastv1.DriftStatus{{Lead: i32(1), State: aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA}}}
	doc := decode(t, ToStates(Listing{States: []*aftercastv1.SeriesModelDrift{d, bare}, PendingEvaluations: 3, ExpectedChancePagesPerWeek: 0.25}))
	checkKeys(t, "document", doc, statesKeys, nil)
	if doc["pending_evaluations"] != 3.0 || doc["expected_chance_pages_per_week"] != 0.25 {
		t.Errorf("document %v", doc)
	}
	list := doc["series"].([]any)
	if len(list) != 2 {
		t.Fatalf("%d series, want 2", len(list))
	}
	s := list[0].(map[string]any)
	checkKeys(t, "series", s, seriesKeys, contractSeriesKeys)
	checkKeys(t, "series_level", s["series_level"], statusKeys, nil)
	if s["state"] != "degraded" || s["onset_origin_time"] != "2026-03-01T00:00:00Z" || s["origins_since_onset"] != 12.0 ||
		s["noticed_time"] != "2026-03-01T12:03:00Z" || s["baseline_version"] != 2.0 {
		t.Errorf("series %v", s)
	}
	sl := s["series_level"].(map[string]any)
	if sl["lead"] != nil || sl["mae_alarm_limit"] != 2.45 || !reflect.DeepEqual(sl["breached"], []any{"mae"}) ||
		sl["onset_origin_time"] != "2026-03-01T00:00:00Z" || sl["onset_metric"] != "mae" || sl["onset_value"] != 2.47 ||
		sl["onset_limit"] != 2.45 || sl["me_band_lower"] != -0.3 || sl["me_band_upper"] != 0.3 || sl["reason"] != nil {
		t.Errorf("series_level %v", sl)
	}
	leads := s["leads"].([]any)
	var order []float64
	for _, l := range leads {
		checkKeys(t, "lead", l, statusKeys, contractLeadKeys)
		order = append(order, l.(map[string]any)["lead"].(float64))
	}
	if !reflect.DeepEqual(order, []float64{1, 2, 3}) {
		t.Errorf("leads in order %v, want every lead ascending", order)
	}
	l1 := leads[0].(map[string]any)
	if l1["state"] != "insufficient_baseline" || l1["mae"] != 1.0 || l1["mae_expected"] != nil || l1["me"] != nil ||
		l1["onset_origin_time"] != nil || l1["origins_since_onset"] != 0.0 || l1["onset_metric"] != nil || l1["noticed_time"] != nil ||
		l1["reason"] != "K = 150 < 180" || !reflect.DeepEqual(l1["breached"], []any{}) {
		t.Errorf("lead 1: absent values must be null, NaN too: %v", l1)
	}
	if l2 := leads[1].(map[string]any); l2["state"] != "improved" || l2["onset_origin_time"] != "2026-02-28T22:00:00Z" || l2["origins_since_onset"] != 14.0 {
		t.Errorf("lead 2 %v", l2)
	}

	b := list[1].(map[string]any)
	checkKeys(t, "series", b, seriesKeys, contractSeriesKeys)
	if b["state"] != "insufficient_data" || b["series_level"] != nil || b["baseline_version"] != nil || b["onset_origin_time"] != nil ||
		b["noticed_time"] != nil || !reflect.DeepEqual(b["decision_leads"], []any{}) {
		t.Errorf("series without a series-level status: %v", b)
	}

	empty := decode(t, ToStates(Listing{}))
	if !reflect.DeepEqual(empty["series"], []any{}) || empty["pending_evaluations"] != 0.0 {
		t.Errorf("no states: %v, want an empty list", empty)
	}
}

// The contract's replay check compares every key but the wall-clock ones
// between two pushes of the same data, and wants an onset at series
// level: the only wall-clock times written are the noticed ones, and no
// key holding data is taken for one.
func TestStatesJSONWallClockKeys(t *testing.T) {
	t.Parallel()
	doc := decode(t, ToStates(Listing{States: []*aftercastv1.SeriesModelDrift{testDrift()}}))
	s := doc["series"].([]any)[0].(map[string]any)
	var wall []string
	var walk func(prefix string, v any)
	walk = func(prefix string, v any) {
		switch v := v.(type) {
		case map[string]any:
			for k, x := range v {
				if wallClock(k) {
					wall = append(wall, prefix+k)
				}
				walk(prefix+k+".", x)
			}
		case []any:
			for _, x := range v {
				walk(prefix, x)
			}
		}
	}
	walk("", s)
	slices.Sort(wall)
	if want := []string{"leads.noticed_time", "leads.noticed_time", "leads.noticed_time", "noticed_time", "series_level.noticed_time"}; !reflect.DeepEqual(wall, want) {
		t.Errorf("wall-clock keys %v, want only the noticed times %v", wall, want)
	}
	onsetAtSeries := false
	for k := range s {
		if strings.Contains(k, "onset") {
			onsetAtSeries = true
		}
	}
	if !onsetAtSeries {
		t.Errorf("no onset key at series level: %v", keys(t, s))
	}
}

func TestEventsJSON(t *testing.T) {
	t.Parallel()
	es := []*aftercastv1.DriftEvent{
		{Token: "41", EventTime: timestamppb.New(t0), Series: "s", Model: "m", OriginTime: timestamppb.New(t0.Add(-time.Hour)),
			Metric: aftercastv1.DriftMetric_DRIFT_METRIC_MAE, PreviousState: aftercastv1.DriftState_DRIFT_STATE_WITHIN,
			NewState: aftercastv1.DriftState_DRIFT_STATE_DEGRADED, Value: f(2.5), Limit: f(2.45), BandLower: f(1.5), BandUpper: f(2.4), WindowN: 30, KEff: f(180),
			Cause: aftercastv1.DriftCause_DRIFT_CAUSE_DATA},
		{Token: "42", EventTime: timestamppb.New(t0.Add(time.Nanosecond)), Series: "s", Model: "m", Lead: i32(7),
			NewState: aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA, WindowN: 0},
		{Token: "43", Series: "s", Model: "m", Lead: i32(7), Metric: aftercastv1.DriftMetric_DRIFT_METRIC_ME,
			PreviousState: aftercastv1.DriftState_DRIFT_STATE_DEGRADED, NewState: aftercastv1.DriftState_DRIFT_STATE_WITHIN, Value: f(0.1),
			Cause: aftercastv1.DriftCause_DRIFT_CAUSE_REVISION},
		{Token: "44", Series: "s", Model: "m", Cause: aftercastv1.DriftCause_DRIFT_CAUSE_BASELINE, NewState: aftercastv1.DriftState_DRIFT_STATE_WITHIN},
	}
	doc := decode(t, ToEvents(es))
	checkKeys(t, "document", doc, []string{"events"}, nil)
	list := doc["events"].([]any)
	for _, e := range list {
		checkKeys(t, "event", e, eventKeys, contractEventKeys)
	}
	want := []map[string]any{
		{"token": "41", "time": "2026-03-01T12:00:00Z", "series": "s", "model": "m", "lead": nil, "origin_time": "2026-03-01T11:00:00Z",
			"cause": "data", "metric": "mae", "previous": "within", "state": "degraded", "value": 2.5, "limit": 2.45, "band_lower": 1.5, "band_upper": 2.4,
			"window_n": 30.0, "k_eff": 180.0},
		{"token": "42", "time": "2026-03-01T12:00:00.000000001Z", "series": "s", "model": "m", "lead": 7.0, "origin_time": nil,
			"cause": nil, "metric": nil, "previous": nil, "state": "insufficient_data", "value": nil, "limit": nil, "band_lower": nil, "band_upper": nil,
			"window_n": 0.0, "k_eff": nil},
	}
	for i, w := range want {
		if !reflect.DeepEqual(list[i], any(w)) {
			t.Errorf("event %d\n got %v\nwant %v", i, list[i], w)
		}
	}
	if e := list[2].(map[string]any); e["metric"] != "me" || e["previous"] != "degraded" || e["state"] != "within" || e["time"] != nil ||
		e["cause"] != "revision" {
		t.Errorf("event 2 %v", e)
	}
	if e := list[3].(map[string]any); e["cause"] != "baseline" {
		t.Errorf("event 3 %v", e)
	}

	// Followed events are the same objects, one per line.
	var b bytes.Buffer
	for _, e := range es {
		if err := WriteJSONLine(&b, ToEvent(e)); err != nil {
			t.Fatal(err)
		}
	}
	lines := strings.Split(strings.TrimSuffix(b.String(), "\n"), "\n")
	if len(lines) != len(es) {
		t.Fatalf("NDJSON has %d lines, want %d:\n%s", len(lines), len(es), b.String())
	}
	for i, l := range lines {
		var m map[string]any
		if err := json.Unmarshal([]byte(l), &m); err != nil || !reflect.DeepEqual(m, list[i]) {
			t.Errorf("line %d %q (%v) differs from the listed event %v", i, l, err, list[i])
		}
	}
}

func TestBaselineJSON(t *testing.T) {
	t.Parallel()
	table := scoring.Tabulate([]scoring.Pair{{Lead: 1, Actual: 10, Forecast: 8}, {Lead: 1, Actual: 0, Forecast: 1}, {Lead: 1, Actual: 5, Forecast: 5}}, scoring.NoScale)
	m := table.Leads[0].Metrics
	opt := func(x float64) *float64 {
		if !scoring.Defined(x) {
			return nil
		}
		return &x
	}
	expected := &aftercastv1.AccuracyMetrics{N: m.N, Me: opt(m.ME), Mae: opt(m.MAE), Rmse: opt(m.RMSE), Mape: opt(m.MAPE),
		MapeExcluded: m.MAPEExcluded, Smape: opt(m.SMAPE), SmapeExcluded: m.SMAPEExcluded, Wape: opt(m.WAPE), Mase: opt(m.MASE)}
	resp := &aftercastv1.GetBaselineResponse{
		Version: &aftercastv1.BaselineVersion{Series: "s", Model: "m", Version: 3, Active: true, CreateTime: timestamppb.New(t0),
			FirstOriginTime: timestamppb.New(t0.AddDate(0, -6, 0)), LastOriginTime: timestamppb.New(t0.AddDate(0, -1, 0)),
			OriginCadenceSteps: 24, MaxLead: 2, RowCount: 3, Warnings: []*aftercastv1.BaselineWarning{
				{Kind: aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_NO_TRAINING_ACTUALS, Message: "no training actuals"},
				{Kind: aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_LEAD_NOT_USABLE, Lead: i32(1), Message: "K = 3 < 180"},
			}},
		WindowN: 30, ErrorScale: aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE,
		Leads: []*aftercastv1.BaselineLead{
			{Lead: 1, K: 3, KEff: 2.5, Expected: expected, UnusableReason: "K = 3 < 180", ErrorScaleExponent: 0.5, ErrorScaleFloor: 4,
				Mae:  &aftercastv1.MetricBand{Expected: 1, BandLower: 0.5, BandUpper: 1.5, AlarmUpper: 1.7, KEff: 2.5},
				Rmse: &aftercastv1.MetricBand{Expected: 1.3, BandLower: 0.6, BandUpper: 1.9, AlarmUpper: 2.1, KEff: 2.4},
				Me:   &aftercastv1.MetricBand{Expected: 0.3, BandLower: -0.5, BandUpper: 1.1, AlarmLower: f(-0.8), AlarmUpper: 1.4, KEff: 2.6}},
			{Lead: 2, K: 1, KEff: math.NaN(), Expected: &aftercastv1.AccuracyMetrics{N: 1, Me: f(1), Mae: f(1), Rmse: f(1)}},
		},
		Pooled: &aftercastv1.BaselineLead{Lead: 0, K: 1, KEff: 1, Usable: true},
	}
	doc := decode(t, ToBaseline(resp))
	checkKeys(t, "baseline", doc, append([]string{"error_scale", "window_n", "leads", "pooled"}, versionKeys...), nil)
	if doc["error_scale"] != "absolute" || doc["mase_scale"] != nil || doc["version"] != 3.0 || doc["window_n"] != 30.0 || doc["first_origin_time"] != "2025-09-01T12:00:00Z" {
		t.Errorf("baseline %v", doc)
	}
	ws := doc["warnings"].([]any)
	if !reflect.DeepEqual(ws, []any{
		map[string]any{"kind": "no_training_actuals", "lead": nil, "message": "no training actuals"},
		map[string]any{"kind": "lead_not_usable", "lead": 1.0, "message": "K = 3 < 180"},
	}) {
		t.Errorf("warnings %v", ws)
	}
	leads := doc["leads"].([]any)
	l1, l2 := leads[0].(map[string]any), leads[1].(map[string]any)
	checkKeys(t, "baseline lead", l1, baselineLeadKeys, nil)
	checkKeys(t, "mae", l1["mae"], upperBandKeys, nil)
	checkKeys(t, "rmse", l1["rmse"], upperBandKeys, nil)
	checkKeys(t, "me", l1["me"], twoSidedKeys, nil)
	if l1["usable"] != false || l1["reason"] != "K = 3 < 180" || l1["error_scale_exponent"] != 0.5 || l1["error_scale_floor"] != 4.0 || l1["me"].(map[string]any)["alarm_lower"] != -0.8 {
		t.Errorf("lead 1 %v", l1)
	}

	// The expected metrics have the keys and values of `evaluate` JSON.
	var ev bytes.Buffer
	if err := report.WriteJSON(&ev, []report.Result{{Series: "s", Model: "m", Step: "1h", Table: table}}); err != nil {
		t.Fatal(err)
	}
	var evDoc struct {
		Results []struct {
			Overall map[string]any `json:"overall"`
		} `json:"results"`
	}
	if err := json.Unmarshal(ev.Bytes(), &evDoc); err != nil {
		t.Fatal(err)
	}
	if got, want := l1["expected"], any(evDoc.Results[0].Overall); !reflect.DeepEqual(got, want) {
		t.Errorf("expected metrics\n got %v\nwant (evaluate's) %v", got, want)
	}

	if l2["k_eff"] != nil || l2["mae"] != nil || l2["rmse"] != nil || l2["me"] != nil || l2["usable"] != false || l2["reason"] != nil {
		t.Errorf("lead 2: absent bands and a NaN K_eff must be null: %v", l2)
	}
	p := doc["pooled"].(map[string]any)
	checkKeys(t, "pooled", p, baselineLeadKeys, nil)
	if p["lead"] != 0.0 || p["expected"] != nil || p["usable"] != true {
		t.Errorf("pooled %v", p)
	}
}

func TestImportJSON(t *testing.T) {
	t.Parallel()
	doc := decode(t, ToImport(&aftercastv1.ImportBaselineResponse{Model: "m", Baselines: []*aftercastv1.ImportedBaseline{
		{Version: &aftercastv1.BaselineVersion{Series: "a", Version: 2, MaseScale: f(1.5)}, Created: false, PooledErrorScaleExponent: 0.9},
	}}))
	b := doc["baselines"].([]any)[0]
	checkKeys(t, "imported", b, append([]string{"created", "error_scale", "pooled_error_scale_exponent"}, versionKeys...), nil)
	if m := b.(map[string]any); m["created"] != false || m["mase_scale"] != 1.5 || !reflect.DeepEqual(m["warnings"], []any{}) ||
		m["error_scale"] != "auto" || m["pooled_error_scale_exponent"] != 0.9 {
		t.Errorf("imported %v", m)
	}
}

func TestEnumNames(t *testing.T) {
	t.Parallel()
	for _, c := range []struct{ got, want string }{
		{StateName(aftercastv1.DriftState_DRIFT_STATE_WITHIN), "within"},
		{StateName(aftercastv1.DriftState_DRIFT_STATE_DEGRADED), "degraded"},
		{StateName(aftercastv1.DriftState_DRIFT_STATE_IMPROVED), "improved"},
		{StateName(aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA), "insufficient_data"},
		{StateName(aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE), "insufficient_baseline"},
		{StateName(aftercastv1.DriftState_DRIFT_STATE_UNSPECIFIED), "unspecified"},
		{StateName(aftercastv1.DriftState(42)), "unknown_42"},
		{MetricName(aftercastv1.DriftMetric_DRIFT_METRIC_MAE), "mae"},
		{MetricName(aftercastv1.DriftMetric_DRIFT_METRIC_ME), "me"},
		{MetricName(aftercastv1.DriftMetric_DRIFT_METRIC_UNSPECIFIED), ""},
		{CauseName(aftercastv1.DriftCause_DRIFT_CAUSE_DATA), "data"},
		{CauseName(aftercastv1.DriftCause_DRIFT_CAUSE_REVISION), "revision"},
		{CauseName(aftercastv1.DriftCause_DRIFT_CAUSE_BASELINE), "baseline"},
		{CauseName(aftercastv1.DriftCause_DRIFT_CAUSE_UNSPECIFIED), ""},
		{WarningKindName(aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_ORIGIN_CADENCE_DIFFERS), "origin_cadence_differs"},
		{WarningKindName(aftercastv1.BaselineWarningKind_BASELINE_WARNING_KIND_TRAINING_ACTUALS_IGNORED), "training_actuals_ignored"},
	} {
		if c.got != c.want {
			t.Errorf("got %q, want %q", c.got, c.want)
		}
	}
}

func TestStatesTableShowsOnlyLeadsNotWithin(t *testing.T) {
	t.Parallel()
	allWithin := proto.CloneOf(testDrift())
	allWithin.Series = "quiet"
	for _, l := range allWithin.LeadStatuses {
		l.State = aftercastv1.DriftState_DRIFT_STATE_WITHIN
	}
	var b bytes.Buffer
	if err := WriteStates(&b, Listing{States: []*aftercastv1.SeriesModelDrift{testDrift(), allWithin}}, nil); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	t.Logf("\n%s", out)
	lines := strings.Split(out, "\n")
	if !strings.HasPrefix(lines[0], "SERIES") || !strings.Contains(lines[1], "degraded (mae)") || !strings.HasPrefix(lines[2], "quiet") {
		t.Errorf("series-level states do not come first, one line each:\n%s", out)
	}
	for _, want := range []string{
		"plant-7/heat / m1: degraded since origin 2026-03-01T00:00Z, 12 origins ago, on MAE 2.470 > alarm limit 2.450 (noticed 2026-03-01T12:03:00Z)\n" +
			"  1 of 3 leads within; the others:\n",
		"  1     insufficient_baseline", "K = 150 < 180\n", "  2     improved", "2026-02-28T22:00Z", "14 origins ago",
		"quiet / m1: degraded since origin", "  all 3 leads within", "[1.500, 2.400]", "2.450",
		"expected chance pages per week, if everything selected is healthy: 0.0000\n",
		"about once per 1391 origins",
		"\n" + Caution + "\n",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("table lacks %q:\n%s", want, out)
		}
	}
	if strings.Contains(out, "\n  3 ") {
		t.Errorf("lead 3, within, is listed:\n%s", out)
	}
	if strings.Contains(out, "pending") {
		t.Errorf("nothing is pending, yet the table says so:\n%s", out)
	}
}

// Onsets are data time, shown in the series' zone when known; the wall
// clock appears only as "noticed", in UTC.
func TestStatesTableOnsetInSeriesZone(t *testing.T) {
	t.Parallel()
	cph, err := time.LoadLocation("Europe/Copenhagen")
	if err != nil {
		t.Fatal(err)
	}
	d := testDrift()
	d.SeriesStatus.OnsetOriginTime = timestamppb.New(time.Date(2026, 10, 14, 3, 0, 0, 0, time.UTC))
	d.SeriesStatus.OnsetMetric, d.SeriesStatus.OnsetValue, d.SeriesStatus.OnsetLimit = aftercastv1.DriftMetric_DRIFT_METRIC_ME, f(-0.61), f(-0.5)
	other := proto.CloneOf(d)
	other.Series = "elsewhere"
	var b bytes.Buffer
	zones := func(s string) *time.Location {
		if s == "plant-7/heat" {
			return cph
		}
		return nil
	}
	if err := WriteStates(&b, Listing{States: []*aftercastv1.SeriesModelDrift{d, other}, PendingEvaluations: 4, ExpectedChancePagesPerWeek: 0.0242}, zones); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	for _, want := range []string{
		"note: 4 evaluations pending at the service: some states may not include the newest data yet\n",
		"plant-7/heat / m1: degraded since origin 2026-10-14T05:00+02:00, 12 origins ago, on ME -0.6100 < alarm bound -0.5000 (noticed 2026-03-01T12:03:00Z)",
		"elsewhere / m1: degraded since origin 2026-10-14T03:00Z,",
		"if everything selected is healthy: 0.0242\n",
	} {
		if !strings.Contains(out, want) {
			t.Errorf("table lacks %q:\n%s", want, out)
		}
	}
	if !strings.HasPrefix(out, "note: 4 evaluations pending") {
		t.Errorf("the pending note does not come first:\n%s", out)
	}
	// The series line shows the onset in the zone, never the wall clock.
	if line := strings.Split(out, "\n")[3]; !strings.HasPrefix(line, "plant-7/heat") || !strings.Contains(line, "2026-10-14T05:00+02:00") ||
		strings.Contains(line, "12:03") {
		t.Errorf("series line %q", line)
	}
}

func TestOnset(t *testing.T) {
	t.Parallel()
	st := func(s aftercastv1.DriftState, m aftercastv1.DriftMetric, v, l *float64) *aftercastv1.DriftStatus {
		return &aftercastv1.DriftStatus{State: s, OnsetOriginTime: timestamppb.New(t0), OriginsSinceOnset: 1, OnsetMetric: m, OnsetValue: v, OnsetLimit: l}
	}
	const (
		mae = aftercastv1.DriftMetric_DRIFT_METRIC_MAE
		me  = aftercastv1.DriftMetric_DRIFT_METRIC_ME
	)
	for _, c := range []struct {
		s    *aftercastv1.DriftStatus
		want string
	}{
		{st(aftercastv1.DriftState_DRIFT_STATE_DEGRADED, me, f(0.61), f(0.5)), "degraded since origin 2026-03-01T12:00Z, 1 origin ago, on ME 0.6100 > alarm bound 0.5000"},
		{st(aftercastv1.DriftState_DRIFT_STATE_IMPROVED, mae, f(1.4), f(1.5)), "improved since origin 2026-03-01T12:00Z, 1 origin ago, on MAE 1.400 < 95% band's lower bound 1.500"},
		{st(aftercastv1.DriftState_DRIFT_STATE_WITHIN, mae, f(2.3), f(2.4)), "within since origin 2026-03-01T12:00Z, 1 origin ago, on MAE 2.300 < 95% band bound 2.400"},
		{st(aftercastv1.DriftState_DRIFT_STATE_WITHIN, aftercastv1.DriftMetric_DRIFT_METRIC_UNSPECIFIED, nil, nil), "within since origin 2026-03-01T12:00Z, 1 origin ago"},
		{&aftercastv1.DriftStatus{}, "insufficient_data since production began"},
		{&aftercastv1.DriftStatus{State: aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE, Reason: "K = 3 < 180"},
			"insufficient_baseline since production began: K = 3 < 180"},
	} {
		if got := Onset(c.s, time.UTC); got != c.want {
			t.Errorf("got  %q\nwant %q", got, c.want)
		}
	}
}

func TestEventLinesAreTableRows(t *testing.T) {
	t.Parallel()
	cph, err := time.LoadLocation("Europe/Copenhagen")
	if err != nil {
		t.Fatal(err)
	}
	e := &aftercastv1.DriftEvent{Token: "1", EventTime: timestamppb.New(t0), Series: "s", Model: "m", OriginTime: timestamppb.New(t0.Add(-2 * time.Hour)),
		Metric: aftercastv1.DriftMetric_DRIFT_METRIC_MAE, PreviousState: aftercastv1.DriftState_DRIFT_STATE_WITHIN,
		NewState: aftercastv1.DriftState_DRIFT_STATE_DEGRADED, Value: f(2.5), Limit: f(2.45), WindowN: 30, Cause: aftercastv1.DriftCause_DRIFT_CAUSE_REVISION}
	var b bytes.Buffer
	if err := WriteEventHeader(&b); err != nil {
		t.Fatal(err)
	}
	if err := WriteEventLine(&b, e, cph); err != nil {
		t.Fatal(err)
	}
	lines := strings.Split(strings.TrimSuffix(b.String(), "\n"), "\n")
	if len(lines) != 2 || strings.Index(lines[0], "CHANGE") != strings.Index(lines[1], "within -> degraded") ||
		strings.Index(lines[0], "CAUSE") != strings.Index(lines[1], "revision") ||
		strings.Index(lines[0], "ONSET ORIGIN") != strings.Index(lines[1], "2026-03-01T11:00+01:00") ||
		!strings.HasPrefix(lines[1], "2026-03-01T12:00:00Z") || !strings.Contains(lines[1], "series") || !strings.HasSuffix(lines[1], "30") {
		t.Errorf("event lines:\n%s", b.String())
	}

	// The aligned table has the same columns.
	b.Reset()
	if err := WriteEvents(&b, []*aftercastv1.DriftEvent{e}, func(string) *time.Location { return cph }); err != nil {
		t.Fatal(err)
	}
	lines = strings.Split(strings.TrimSuffix(b.String(), "\n"), "\n")
	if len(lines) != 2 || !strings.HasPrefix(lines[0], "RECORDED") || strings.Index(lines[0], "CAUSE") != strings.Index(lines[1], "revision") ||
		strings.Index(lines[0], "ONSET ORIGIN") != strings.Index(lines[1], "2026-03-01T11:00+01:00") {
		t.Errorf("events table:\n%s", b.String())
	}
}

func TestHistory(t *testing.T) {
	t.Parallel()
	r := &aftercastv1.GetDriftHistoryResponse{BaselineVersion: 3, Transitions: []*aftercastv1.DriftTransition{
		{OriginTime: timestamppb.New(t0), PreviousState: aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA,
			NewState: aftercastv1.DriftState_DRIFT_STATE_WITHIN, WindowN: 7},
		{Lead: i32(4), OriginTime: timestamppb.New(t0.Add(24 * time.Hour)), PreviousState: aftercastv1.DriftState_DRIFT_STATE_WITHIN,
			NewState: aftercastv1.DriftState_DRIFT_STATE_DEGRADED, Metric: aftercastv1.DriftMetric_DRIFT_METRIC_ME, Value: f(0.7), Limit: f(0.5),
			WindowN: 30, KEff: f(120)},
		{Lead: i32(5), OriginTime: timestamppb.New(t0), NewState: aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE, Reason: "K = 3 < 180"},
	}}
	doc := decode(t, ToHistory("s", "m", r))
	checkKeys(t, "history", doc, []string{"series", "model", "baseline_version", "transitions"}, nil)
	ts := doc["transitions"].([]any)
	for _, x := range ts {
		checkKeys(t, "transition", x, transitionKeys, nil)
	}
	want := []map[string]any{
		{"lead": nil, "origin_time": "2026-03-01T12:00:00Z", "previous": "insufficient_data", "state": "within", "metric": nil,
			"value": nil, "limit": nil, "window_n": 7.0, "k_eff": nil, "reason": nil},
		{"lead": 4.0, "origin_time": "2026-03-02T12:00:00Z", "previous": "within", "state": "degraded", "metric": "me",
			"value": 0.7, "limit": 0.5, "window_n": 30.0, "k_eff": 120.0, "reason": nil},
		{"lead": 5.0, "origin_time": "2026-03-01T12:00:00Z", "previous": nil, "state": "insufficient_baseline", "metric": nil,
			"value": nil, "limit": nil, "window_n": 0.0, "k_eff": nil, "reason": "K = 3 < 180"},
	}
	if len(ts) != len(want) {
		t.Fatalf("%d transitions, want %d", len(ts), len(want))
	}
	for i, w := range want {
		if !reflect.DeepEqual(ts[i], any(w)) {
			t.Errorf("transition %d\n got %v\nwant %v", i, ts[i], w)
		}
	}
	if doc["baseline_version"] != 3.0 || doc["series"] != "s" {
		t.Errorf("history %v", doc)
	}

	var b bytes.Buffer
	if err := WriteHistory(&b, "s", "m", r, nil); err != nil {
		t.Fatal(err)
	}
	out := b.String()
	t.Logf("\n%s", out)
	lines := strings.Split(strings.TrimSuffix(out, "\n"), "\n")
	if len(lines) != 6 || !strings.Contains(lines[0], "baseline v3") || !strings.HasPrefix(lines[1], "ORIGIN") ||
		!strings.HasPrefix(lines[2], "2026-03-01T12:00Z  series  insufficient_data -> within") ||
		!strings.Contains(lines[3], "4       within -> degraded") || !strings.Contains(lines[3], "0.7000") ||
		!strings.HasSuffix(lines[4], "K = 3 < 180") || lines[5] != "3 transitions" {
		t.Errorf("history table:\n%s", out)
	}
	b.Reset()
	if err := WriteHistory(&b, "s", "m", &aftercastv1.GetDriftHistoryResponse{BaselineVersion: 1}, nil); err != nil || !strings.HasSuffix(b.String(), "no transitions\n") {
		t.Errorf("empty history (%v):\n%s", err, b.String())
	}
}

// A level-scaled series says that its expectation is the backtest's at the
// window's forecast levels, with the plain backtest MAE beside it; an
// unscaled one says nothing of it.
func TestWriteStatesLevelScale(t *testing.T) {
	t.Parallel()
	status := func(scale *float64) *aftercastv1.SeriesModelDrift {
		return &aftercastv1.SeriesModelDrift{Series: "s", Model: "m", BaselineVersion: 1,
			SeriesStatus: &aftercastv1.DriftStatus{State: aftercastv1.DriftState_DRIFT_STATE_WITHIN, WindowN: 30, Mae: f(5.2),
				MaeExpected: f(4.9), BacktestMae: f(4.1), LevelScale: scale}}
	}
	var b bytes.Buffer
	if err := WriteStates(&b, Listing{States: []*aftercastv1.SeriesModelDrift{status(f(1.25))}}, nil); err != nil {
		t.Fatal(err)
	}
	if want := "errors scale with the level: expected MAE 4.900 is the backtest's at this window's forecast levels (level scale 1.250; plain backtest MAE 4.100)"; !strings.Contains(b.String(), want) {
		t.Errorf("scaled:\n%s\nwant %q", b.String(), want)
	}
	b.Reset()
	if err := WriteStates(&b, Listing{States: []*aftercastv1.SeriesModelDrift{status(nil)}}, nil); err != nil {
		t.Fatal(err)
	}
	if strings.Contains(b.String(), "level scale") {
		t.Errorf("unscaled:\n%s", b.String())
	}
}
