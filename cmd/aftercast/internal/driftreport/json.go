package driftreport

import (
	"cmp"
	"encoding/json"
	"fmt"
	"io"
	"math"
	"slices"
	"strings"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/report"
	"google.golang.org/protobuf/reflect/protoreflect"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// enumName is the lower-case name of e without prefix, such as "within"
// for DRIFT_STATE_WITHIN; "unknown_7" for a number the client does not
// know.
func enumName(e protoreflect.Enum, prefix string) string {
	v := e.Descriptor().Values().ByNumber(e.Number())
	if v == nil {
		return fmt.Sprintf("unknown_%d", e.Number())
	}
	return strings.ToLower(strings.TrimPrefix(string(v.Name()), prefix))
}

// StateName is the name of a drift state: "within", "degraded",
// "improved", "insufficient_data", "insufficient_baseline"
// ("unspecified" for the zero value).
func StateName(s aftercastv1.DriftState) string { return enumName(s, "DRIFT_STATE_") }

// MetricName is the name of a drift metric, "mae" or "me"; "" for
// DRIFT_METRIC_UNSPECIFIED.
func MetricName(m aftercastv1.DriftMetric) string {
	if m == aftercastv1.DriftMetric_DRIFT_METRIC_UNSPECIFIED {
		return ""
	}
	return enumName(m, "DRIFT_METRIC_")
}

// WarningKindName is the name of a baseline warning kind, such as
// "origin_cadence_differs".
func WarningKindName(k aftercastv1.BaselineWarningKind) string {
	return enumName(k, "BASELINE_WARNING_KIND_")
}

// num is x as a JSON number, nil (null) when x is not finite, which JSON
// cannot carry.
func num(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

// opt is an optional proto field as a JSON number or null.
func opt(p *float64) *float64 {
	if p == nil {
		return nil
	}
	return num(*p)
}

// ts is a time as RFC 3339 in UTC, nil (null) when unset.
func ts(t *timestamppb.Timestamp) *string {
	if t == nil {
		return nil
	}
	s := t.AsTime().UTC().Format(time.RFC3339Nano)
	return &s
}

func str(s string) *string {
	if s == "" {
		return nil
	}
	return &s
}

// WriteJSON writes v indented, as every client command's JSON.
func WriteJSON(w io.Writer, v any) error {
	enc := json.NewEncoder(w)
	enc.SetIndent("", "  ")
	return enc.Encode(v)
}

// WriteJSONLine writes v on one line (NDJSON), for output that streams.
func WriteJSONLine(w io.Writer, v any) error {
	return json.NewEncoder(w).Encode(v)
}

// Status is the JSON shape of a drift status: of one lead, or (lead null)
// of the series level, the pooled decision leads. Onsets are data time:
// onset_origin_time is the origin whose evaluation entered the current
// state (null for the state production started in), origins_since_onset
// how many evaluations were made after that one, and onset_metric,
// onset_value and onset_limit what entered it. noticed_time is the only
// wall-clock time: when the service announced the state.
type Status struct {
	Lead              *int32   `json:"lead"`
	State             string   `json:"state"`
	Breached          []string `json:"breached"` // metrics outside their alarm limit: the cause of "degraded"
	OnsetOriginTime   *string  `json:"onset_origin_time"`
	OriginsSinceOnset int32    `json:"origins_since_onset"`
	OnsetMetric       *string  `json:"onset_metric"`
	OnsetValue        *float64 `json:"onset_value"`
	OnsetLimit        *float64 `json:"onset_limit"`
	NoticedTime       *string  `json:"noticed_time"`
	Reason            *string  `json:"reason"` // why the baseline cannot judge, for "insufficient_baseline"
	LastOriginTime    *string  `json:"last_origin_time"`
	WindowN           int32    `json:"window_n"`
	MAE               *float64 `json:"mae"`
	MAEExpected       *float64 `json:"mae_expected"`
	MAEBandLower      *float64 `json:"mae_band_lower"`
	MAEBandUpper      *float64 `json:"mae_band_upper"`
	MAEAlarmLimit     *float64 `json:"mae_alarm_limit"`
	ME                *float64 `json:"me"`
	MEExpected        *float64 `json:"me_expected"`
	MEBandLower       *float64 `json:"me_band_lower"`
	MEBandUpper       *float64 `json:"me_band_upper"`
	MEAlarmLower      *float64 `json:"me_alarm_lower"`
	MEAlarmUpper      *float64 `json:"me_alarm_upper"`
	KEff              *float64 `json:"k_eff"`
	// LevelScale is the window's mean level scale (method.md §4a) the
	// expectations and bands were multiplied by: 1 when not scaled.
	// BacktestMAE is the plain backtest MAE beside the level-adjusted
	// mae_expected.
	LevelScale  float64  `json:"level_scale"`
	BacktestMAE *float64 `json:"backtest_mae"`
}

// SeriesDrift is the JSON shape of the drift picture of one (series,
// model). State is the series-level state, the one meant for paging;
// "insufficient_data" when the server has not judged the series level.
// onset_origin_time, origins_since_onset and noticed_time repeat the
// series level's.
type SeriesDrift struct {
	Series            string   `json:"series"`
	Model             string   `json:"model"`
	State             string   `json:"state"`
	OnsetOriginTime   *string  `json:"onset_origin_time"`
	OriginsSinceOnset int32    `json:"origins_since_onset"`
	NoticedTime       *string  `json:"noticed_time"`
	BaselineVersion   *int32   `json:"baseline_version"` // null without a baseline
	DecisionLeads     []int32  `json:"decision_leads"`
	SeriesLevel       *Status  `json:"series_level"`
	Leads             []Status `json:"leads"` // every lead status, ascending by lead
}

// Listing is every page of a ListDriftStates listing: the (series, model)
// entries in order, the evaluations still pending (the most any page
// reported: while above 0 some states may not include the newest data) and
// the chance pages per week expected of everything selected.
type Listing struct {
	States                     []*aftercastv1.SeriesModelDrift
	PendingEvaluations         int64
	ExpectedChancePagesPerWeek float64
}

// Add takes in one page of a listing.
func (l *Listing) Add(r *aftercastv1.ListDriftStatesResponse) {
	l.States = append(l.States, r.GetStates()...)
	l.PendingEvaluations = max(l.PendingEvaluations, r.GetPendingEvaluations())
	l.ExpectedChancePagesPerWeek = r.GetExpectedChancePagesPerWeek()
}

// States is the JSON document of `aftercast drift` (and of `aftercast
// demo --format json`).
type States struct {
	PendingEvaluations         int64         `json:"pending_evaluations"`
	ExpectedChancePagesPerWeek *float64      `json:"expected_chance_pages_per_week"`
	Series                     []SeriesDrift `json:"series"`
}

// ToStatus converts one drift status.
func ToStatus(s *aftercastv1.DriftStatus) Status {
	o := Status{Lead: s.Lead, State: StateName(s.GetState()), Breached: make([]string, 0, len(s.GetBreachedMetrics())),
		OnsetOriginTime: ts(s.GetOnsetOriginTime()), OriginsSinceOnset: s.GetOriginsSinceOnset(),
		OnsetMetric: str(MetricName(s.GetOnsetMetric())), OnsetValue: opt(s.OnsetValue), OnsetLimit: opt(s.OnsetLimit),
		NoticedTime: ts(s.GetNoticedTime()), Reason: str(s.GetReason()), LastOriginTime: ts(s.GetLastOriginTime()), WindowN: s.GetWindowN(),
		MAE: opt(s.Mae), MAEExpected: opt(s.MaeExpected), MAEBandLower: opt(s.MaeBandLower), MAEBandUpper: opt(s.MaeBandUpper),
		MAEAlarmLimit: opt(s.MaeAlarmLimit), ME: opt(s.Me), MEExpected: opt(s.MeExpected), MEBandLower: opt(s.MeBandLower),
		MEBandUpper: opt(s.MeBandUpper), MEAlarmLower: opt(s.MeAlarmLower), MEAlarmUpper: opt(s.MeAlarmUpper), KEff: opt(s.KEff),
		LevelScale: 1, BacktestMAE: opt(s.BacktestMae)}
	if s.LevelScale != nil {
		o.LevelScale = s.GetLevelScale()
	}
	for _, m := range s.GetBreachedMetrics() {
		o.Breached = append(o.Breached, cmp.Or(MetricName(m), "unspecified"))
	}
	return o
}

// seriesState is the series-level state of d.
func seriesState(d *aftercastv1.SeriesModelDrift) aftercastv1.DriftState {
	if st := d.GetSeriesStatus().GetState(); st != aftercastv1.DriftState_DRIFT_STATE_UNSPECIFIED {
		return st
	}
	return aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA
}

// leadStatuses are d's lead statuses ascending by lead.
func leadStatuses(d *aftercastv1.SeriesModelDrift) []*aftercastv1.DriftStatus {
	ls := slices.Clone(d.GetLeadStatuses())
	slices.SortStableFunc(ls, func(a, b *aftercastv1.DriftStatus) int { return cmp.Compare(a.GetLead(), b.GetLead()) })
	return ls
}

// ToSeriesDrift converts the drift picture of one (series, model).
func ToSeriesDrift(d *aftercastv1.SeriesModelDrift) SeriesDrift {
	o := SeriesDrift{Series: d.GetSeries(), Model: d.GetModel(), State: StateName(seriesState(d)),
		DecisionLeads: append([]int32{}, d.GetDecisionLeads()...), Leads: make([]Status, 0, len(d.GetLeadStatuses()))}
	if v := d.GetBaselineVersion(); v > 0 {
		o.BaselineVersion = &v
	}
	if s := d.GetSeriesStatus(); s != nil {
		st := ToStatus(s)
		o.SeriesLevel = &st
		o.OnsetOriginTime, o.OriginsSinceOnset, o.NoticedTime = st.OnsetOriginTime, st.OriginsSinceOnset, st.NoticedTime
	}
	for _, l := range leadStatuses(d) {
		o.Leads = append(o.Leads, ToStatus(l))
	}
	return o
}

// ToStates converts a whole listing.
func ToStates(l Listing) States {
	o := States{PendingEvaluations: l.PendingEvaluations, ExpectedChancePagesPerWeek: num(l.ExpectedChancePagesPerWeek),
		Series: make([]SeriesDrift, 0, len(l.States))}
	for _, d := range l.States {
		o.Series = append(o.Series, ToSeriesDrift(d))
	}
	return o
}

// CauseName is the name of a drift event's cause: "data", "revision" or
// "baseline"; "" for DRIFT_CAUSE_UNSPECIFIED.
func CauseName(c aftercastv1.DriftCause) string {
	if c == aftercastv1.DriftCause_DRIFT_CAUSE_UNSPECIFIED {
		return ""
	}
	return enumName(c, "DRIFT_CAUSE_")
}

// Event is the JSON shape of a drift event. Time is when the service
// recorded it (wall clock); OriginTime is the onset, the origin at which
// the new state was entered (data time), null for the state production
// starts in. Cause says why it was announced: "data" (new origins judged),
// "revision" (origins judged before, re-judged) or "baseline" (a new
// baseline). Lead is null for a change of the series-level state; Metric
// is null when no metric value caused the change, and Previous is null for
// the first evaluation.
type Event struct {
	Token      string   `json:"token"` // resume token: continue after this event
	Time       *string  `json:"time"`
	Series     string   `json:"series"`
	Model      string   `json:"model"`
	Lead       *int32   `json:"lead"`
	OriginTime *string  `json:"origin_time"`
	Cause      *string  `json:"cause"`
	Metric     *string  `json:"metric"`
	Previous   *string  `json:"previous"`
	State      string   `json:"state"`
	Value      *float64 `json:"value"`
	Limit      *float64 `json:"limit"`
	BandLower  *float64 `json:"band_lower"`
	BandUpper  *float64 `json:"band_upper"`
	WindowN    int32    `json:"window_n"`
	KEff       *float64 `json:"k_eff"`
}

// Events is the JSON document of `aftercast events`.
type Events struct {
	Events []Event `json:"events"`
}

// ToEvent converts one drift event.
func ToEvent(e *aftercastv1.DriftEvent) Event {
	o := Event{Token: e.GetToken(), Time: ts(e.GetEventTime()), Series: e.GetSeries(), Model: e.GetModel(), Lead: e.Lead,
		OriginTime: ts(e.GetOriginTime()), Cause: str(CauseName(e.GetCause())), Metric: str(MetricName(e.GetMetric())),
		State: StateName(e.GetNewState()), Value: opt(e.Value), Limit: opt(e.Limit), BandLower: opt(e.BandLower), BandUpper: opt(e.BandUpper),
		WindowN: e.GetWindowN(), KEff: opt(e.KEff)}
	if p := e.GetPreviousState(); p != aftercastv1.DriftState_DRIFT_STATE_UNSPECIFIED {
		o.Previous = str(StateName(p))
	}
	return o
}

// ToEvents converts events, keeping their order.
func ToEvents(es []*aftercastv1.DriftEvent) Events {
	o := Events{Events: make([]Event, 0, len(es))}
	for _, e := range es {
		o.Events = append(o.Events, ToEvent(e))
	}
	return o
}

// Transition is the JSON shape of one transition of a replayed drift
// history: at the evaluation of origin origin_time (data time), lead's
// state (lead null: the series level) went from previous to state, on
// metric's window value against limit (metric null: no metric caused it).
type Transition struct {
	Lead       *int32   `json:"lead"`
	OriginTime *string  `json:"origin_time"`
	Previous   *string  `json:"previous"`
	State      string   `json:"state"`
	Metric     *string  `json:"metric"`
	Value      *float64 `json:"value"`
	Limit      *float64 `json:"limit"`
	WindowN    int32    `json:"window_n"`
	KEff       *float64 `json:"k_eff"`
	Reason     *string  `json:"reason"`
}

// History is the JSON document of `aftercast drift history`: every
// transition of the replay, in origin order (the series level before the
// leads within one origin).
type History struct {
	Series          string       `json:"series"`
	Model           string       `json:"model"`
	BaselineVersion int32        `json:"baseline_version"`
	Transitions     []Transition `json:"transitions"`
}

// ToTransition converts one replayed transition.
func ToTransition(t *aftercastv1.DriftTransition) Transition {
	o := Transition{Lead: t.Lead, OriginTime: ts(t.GetOriginTime()), State: StateName(t.GetNewState()),
		Metric: str(MetricName(t.GetMetric())), Value: opt(t.Value), Limit: opt(t.Limit), WindowN: t.GetWindowN(),
		KEff: opt(t.KEff), Reason: str(t.GetReason())}
	if p := t.GetPreviousState(); p != aftercastv1.DriftState_DRIFT_STATE_UNSPECIFIED {
		o.Previous = str(StateName(p))
	}
	return o
}

// ToHistory converts the history of (series, model).
func ToHistory(series, model string, r *aftercastv1.GetDriftHistoryResponse) History {
	o := History{Series: series, Model: model, BaselineVersion: r.GetBaselineVersion(),
		Transitions: make([]Transition, 0, len(r.GetTransitions()))}
	for _, t := range r.GetTransitions() {
		o.Transitions = append(o.Transitions, ToTransition(t))
	}
	return o
}

// Warning is the JSON shape of a baseline warning; lead is null for one
// about the whole baseline.
type Warning struct {
	Kind    string `json:"kind"`
	Lead    *int32 `json:"lead"`
	Message string `json:"message"`
}

// Version is the JSON shape of a baseline version's summary.
type Version struct {
	Series             string    `json:"series"`
	Model              string    `json:"model"`
	Version            int32     `json:"version"`
	Active             bool      `json:"active"`
	CreateTime         *string   `json:"create_time"`
	FirstOriginTime    *string   `json:"first_origin_time"`
	LastOriginTime     *string   `json:"last_origin_time"`
	OriginCadenceSteps int32     `json:"origin_cadence_steps"`
	MaxLead            int32     `json:"max_lead"`
	Rows               int64     `json:"rows"`
	TrainingActuals    int64     `json:"training_actuals"` // used for the MASE scale
	MASEScale          *float64  `json:"mase_scale"`
	Warnings           []Warning `json:"warnings"`
}

// ToVersion converts a baseline version's summary.
func ToVersion(v *aftercastv1.BaselineVersion) Version {
	o := Version{Series: v.GetSeries(), Model: v.GetModel(), Version: v.GetVersion(), Active: v.GetActive(),
		CreateTime: ts(v.GetCreateTime()), FirstOriginTime: ts(v.GetFirstOriginTime()), LastOriginTime: ts(v.GetLastOriginTime()),
		OriginCadenceSteps: v.GetOriginCadenceSteps(), MaxLead: v.GetMaxLead(), Rows: v.GetRowCount(),
		TrainingActuals: v.GetTrainingActualCount(), MASEScale: opt(v.MaseScale), Warnings: make([]Warning, 0, len(v.GetWarnings()))}
	for _, w := range v.GetWarnings() {
		o.Warnings = append(o.Warnings, Warning{Kind: WarningKindName(w.GetKind()), Lead: w.Lead, Message: w.GetMessage()})
	}
	return o
}

// Imported is the JSON shape of one series' outcome of an import.
type Imported struct {
	Created bool `json:"created"` // false: the upload equalled the active version
	Version
	ErrorScale               string  `json:"error_scale"`                 // the series' mode: auto or absolute
	PooledErrorScaleExponent float64 `json:"pooled_error_scale_exponent"` // b̂ of the decision-lead quantity
}

// Import is the JSON document of `aftercast baseline import`.
type Import struct {
	Model     string     `json:"model"`
	Baselines []Imported `json:"baselines"`
}

// ToImport converts an import's response.
func ToImport(r *aftercastv1.ImportBaselineResponse) Import {
	o := Import{Model: r.GetModel(), Baselines: make([]Imported, 0, len(r.GetBaselines()))}
	for _, b := range r.GetBaselines() {
		o.Baselines = append(o.Baselines, Imported{Created: b.GetCreated(), Version: ToVersion(b.GetVersion()),
			ErrorScale: ErrorScaleName(b.GetErrorScale()), PooledErrorScaleExponent: b.GetPooledErrorScaleExponent()})
	}
	return o
}

func toMetrics(m *aftercastv1.AccuracyMetrics) *report.Metrics {
	if m == nil {
		return nil
	}
	v := report.MetricsJSON(report.FromProto(m))
	return &v
}

// UpperBand is the JSON shape of the band of MAE or RMSE: expectation,
// 95% band and the one-sided upper alarm limit (p = 0.995) for a window
// of window_n origins.
type UpperBand struct {
	Expected   *float64 `json:"expected"`
	BandLower  *float64 `json:"band_lower"`
	BandUpper  *float64 `json:"band_upper"`
	AlarmUpper *float64 `json:"alarm_upper"`
	KEff       *float64 `json:"k_eff"`
}

// TwoSidedBand is the JSON shape of the band of ME: expectation, 95% band
// and the two-sided alarm band (p = 0.001 and 0.999).
type TwoSidedBand struct {
	Expected   *float64 `json:"expected"`
	BandLower  *float64 `json:"band_lower"`
	BandUpper  *float64 `json:"band_upper"`
	AlarmLower *float64 `json:"alarm_lower"`
	AlarmUpper *float64 `json:"alarm_upper"`
	KEff       *float64 `json:"k_eff"`
}

func toUpper(b *aftercastv1.MetricBand) *UpperBand {
	if b == nil {
		return nil
	}
	return &UpperBand{Expected: num(b.GetExpected()), BandLower: num(b.GetBandLower()), BandUpper: num(b.GetBandUpper()),
		AlarmUpper: num(b.GetAlarmUpper()), KEff: num(b.GetKEff())}
}

func toTwoSided(b *aftercastv1.MetricBand) *TwoSidedBand {
	if b == nil {
		return nil
	}
	return &TwoSidedBand{Expected: num(b.GetExpected()), BandLower: num(b.GetBandLower()), BandUpper: num(b.GetBandUpper()),
		AlarmLower: opt(b.AlarmLower), AlarmUpper: num(b.GetAlarmUpper()), KEff: num(b.GetKEff())}
}

// BaselineLead is the JSON shape of what a baseline expects of one lead,
// or (lead 0) of the pooled decision leads. Reason is null when usable;
// expected and the bands are null when the server gives none.
type BaselineLead struct {
	Lead     int32           `json:"lead"`
	K        int32           `json:"k"`
	KEff     *float64        `json:"k_eff"`
	Usable   bool            `json:"usable"`
	Reason   *string         `json:"reason"`
	Expected *report.Metrics `json:"expected"`
	MAE      *UpperBand      `json:"mae"`
	RMSE     *UpperBand      `json:"rmse"`
	ME       *TwoSidedBand   `json:"me"`
	// The level scale of method.md §4a, s(ŷ) = max(|ŷ|, φ)^b̂: with b̂ > 0
	// the bands are of errors divided by it.
	ErrorScaleExponent float64 `json:"error_scale_exponent"`
	ErrorScaleFloor    float64 `json:"error_scale_floor"`
}

func toBaselineLead(l *aftercastv1.BaselineLead) BaselineLead {
	return BaselineLead{Lead: l.GetLead(), K: l.GetK(), KEff: num(l.GetKEff()), Usable: l.GetUsable(), Reason: str(l.GetUnusableReason()),
		Expected: toMetrics(l.GetExpected()), MAE: toUpper(l.GetMae()), RMSE: toUpper(l.GetRmse()), ME: toTwoSided(l.GetMe()),
		ErrorScaleExponent: l.GetErrorScaleExponent(), ErrorScaleFloor: l.GetErrorScaleFloor()}
}

// ErrorScaleName is the CLI's name of a series' error scale.
func ErrorScaleName(e aftercastv1.ErrorScale) string {
	if e == aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE {
		return "absolute"
	}
	return "auto"
}

// Baseline is the JSON document of `aftercast baseline show`: the
// version's summary, then per lead and pooled what it expects for a
// window of window_n origins.
type Baseline struct {
	Version
	ErrorScale string         `json:"error_scale"` // the series' mode: auto or absolute
	WindowN    int32          `json:"window_n"`
	Leads      []BaselineLead `json:"leads"`
	Pooled     *BaselineLead  `json:"pooled"`
}

// ToBaseline converts a GetBaseline response.
func ToBaseline(r *aftercastv1.GetBaselineResponse) Baseline {
	o := Baseline{Version: ToVersion(r.GetVersion()), ErrorScale: ErrorScaleName(r.GetErrorScale()), WindowN: r.GetWindowN(),
		Leads: make([]BaselineLead, 0, len(r.GetLeads()))}
	for _, l := range r.GetLeads() {
		o.Leads = append(o.Leads, toBaselineLead(l))
	}
	if p := r.GetPooled(); p != nil {
		pl := toBaselineLead(p)
		o.Pooled = &pl
	}
	return o
}
