package driftreport

import (
	"fmt"
	"io"
	"math"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/report"
	"github.com/aftercast/aftercast/scoring"
	"google.golang.org/protobuf/types/known/timestamppb"
)

// human rounds a value for reading; "—" when absent.
func human(p *float64) string {
	if p == nil {
		return "—"
	}
	return report.Human(*p)
}

// interval is "[lo, hi]", "—" when either bound is absent.
func interval(lo, hi *float64) string {
	if lo == nil || hi == nil {
		return "—"
	}
	return "[" + human(lo) + ", " + human(hi) + "]"
}

// when is a time for tables: RFC 3339 in UTC, "—" when unset.
func when(t *timestamppb.Timestamp) string {
	if t == nil {
		return "—"
	}
	return t.AsTime().UTC().Format(time.RFC3339)
}

func newTable(w io.Writer) *tabwriter.Writer { return tabwriter.NewWriter(w, 0, 0, 2, ' ', 0) }

// WriteImport writes the outcome of an import, per series: the version,
// whether it was created, what the backtest covers and every warning.
func WriteImport(w io.Writer, r *aftercastv1.ImportBaselineResponse) error {
	created := 0
	for _, b := range r.GetBaselines() {
		if b.GetCreated() {
			created++
		}
	}
	fmt.Fprintf(w, "model %s: %d series, %d new baseline versions\n", r.GetModel(), len(r.GetBaselines()), created)
	for _, b := range r.GetBaselines() {
		v := b.GetVersion()
		if b.GetCreated() {
			fmt.Fprintf(w, "\n%s: version %d created\n", v.GetSeries(), v.GetVersion())
		} else {
			fmt.Fprintf(w, "\n%s: unchanged (same as active version %d)\n", v.GetSeries(), v.GetVersion())
		}
		fmt.Fprintf(w, "  %s\n", scaleSummary(b.GetErrorScale(), b.GetPooledErrorScaleExponent()))
		if err := writeVersion(w, v, "  "); err != nil {
			return err
		}
	}
	return nil
}

// scaleSummary says in one line how the series' errors will be scaled
// (method.md §4a), from the pooled quantity's b̂.
func scaleSummary(mode aftercastv1.ErrorScale, b float64) string {
	switch {
	case mode == aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE:
		return "error scale absolute: errors are judged as they are"
	case b > 0:
		return fmt.Sprintf("error scale grows with level: b̂ = %.2g on decision leads (errors are judged divided by level^b̂)", b)
	}
	return "error scale auto: b̂ = 0 on decision leads (the level hardly varies, or the errors do not grow with it): errors are judged as they are"
}

// writeVersion writes a version's summary as indented "name  value" lines.
func writeVersion(w io.Writer, v *aftercastv1.BaselineVersion, indent string) error {
	tw := newTable(w)
	scale := human(v.MaseScale)
	if v.MaseScale == nil {
		scale += " (MASE unknown: too few training actuals)"
	}
	fmt.Fprintf(tw, "%sorigins\t%s .. %s\n", indent, when(v.GetFirstOriginTime()), when(v.GetLastOriginTime()))
	fmt.Fprintf(tw, "%sorigin cadence\t%s\n", indent, plural(int64(v.GetOriginCadenceSteps()), "step"))
	fmt.Fprintf(tw, "%smax lead\t%d\n", indent, v.GetMaxLead())
	fmt.Fprintf(tw, "%srows\t%d\n", indent, v.GetRowCount())
	fmt.Fprintf(tw, "%straining actuals used\t%d\n", indent, v.GetTrainingActualCount())
	fmt.Fprintf(tw, "%sMASE scale\t%s\n", indent, scale)
	for _, wn := range v.GetWarnings() {
		kind := WarningKindName(wn.GetKind())
		if wn.Lead != nil {
			kind += fmt.Sprintf(" (lead %d)", wn.GetLead())
		}
		fmt.Fprintf(tw, "%swarning\t%s: %s\n", indent, kind, wn.GetMessage())
	}
	return tw.Flush()
}

func plural(n int64, unit string) string {
	if n == 1 {
		return "1 " + unit
	}
	return fmt.Sprintf("%d %ss", n, unit)
}

// WriteBaseline writes a baseline: its summary, what it expects of every
// metric per lead, then per lead and pooled the bands and alarm limits for
// a window of window_n origins with the usability verdict.
func WriteBaseline(w io.Writer, r *aftercastv1.GetBaselineResponse) error {
	v := r.GetVersion()
	active := ""
	if v.GetActive() {
		active = " (active)"
	}
	fmt.Fprintf(w, "baseline of series %s, model %s: version %d%s, imported %s\n",
		v.GetSeries(), v.GetModel(), v.GetVersion(), active, when(v.GetCreateTime()))
	if err := writeVersion(w, v, "  "); err != nil {
		return err
	}

	fmt.Fprintf(w, "\nexpected per lead (metrics over the K backtest pairs)\n")
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
	fmt.Fprintln(tw, "lead\tn\tME\tMAE\tRMSE\tMAPE%\tsMAPE%\tWAPE%\tMASE\t")
	for _, l := range r.GetLeads() {
		m := toMetrics(l.GetExpected())
		if m == nil {
			continue
		}
		fmt.Fprintf(tw, "%d\t%d\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t\n", l.GetLead(), m.N, human(m.ME), human(m.MAE), human(m.RMSE),
			excluded(m.MAPE, m.MAPEExcluded), excluded(m.SMAPE, m.SMAPEExcluded), human(m.WAPE), human(m.MASE))
	}
	if err := tw.Flush(); err != nil {
		return err
	}

	fmt.Fprintf(w, "\nbands (95%%) and alarm limits (MAE, RMSE: p = 0.995; ME: p = 0.001, 0.999) for a window of %d origins\n", r.GetWindowN())
	fmt.Fprintf(w, "error scale %s: where B̂ > 0 the bands are of errors divided by max(|forecast|, φ)^B̂; a live window's are these times its mean scale\n",
		ErrorScaleName(r.GetErrorScale()))
	tw = newTable(w)
	fmt.Fprintln(tw, "LEAD\tK\tK_EFF\tB̂\tΦ\tMAE BAND\tMAE LIMIT\tRMSE BAND\tRMSE LIMIT\tME BAND\tME ALARM\tUSABLE")
	row := func(lead string, l *aftercastv1.BaselineLead) {
		usable := "yes"
		if !l.GetUsable() {
			usable = "no: " + l.GetUnusableReason()
		}
		b := toBaselineLead(l)
		mae, rmse, me := b.MAE, b.RMSE, b.ME
		if mae == nil {
			mae = &UpperBand{}
		}
		if rmse == nil {
			rmse = &UpperBand{}
		}
		if me == nil {
			me = &TwoSidedBand{}
		}
		fmt.Fprintf(tw, "%s\t%d\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", lead, l.GetK(), human(b.KEff),
			human(num(l.GetErrorScaleExponent())), human(num(l.GetErrorScaleFloor())),
			interval(mae.BandLower, mae.BandUpper), human(mae.AlarmUpper), interval(rmse.BandLower, rmse.BandUpper), human(rmse.AlarmUpper),
			interval(me.BandLower, me.BandUpper), interval(me.AlarmLower, me.AlarmUpper), usable)
	}
	for _, l := range r.GetLeads() {
		row(strconv.Itoa(int(l.GetLead())), l)
	}
	if p := r.GetPooled(); p != nil {
		row("pooled", p)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if r.GetPooled() != nil {
		fmt.Fprintln(w, "(pooled: per origin, the mean over the decision leads, which the series-level drift state judges)")
	}
	return nil
}

func excluded(x *float64, n int64) string {
	if x == nil {
		return report.WithExcluded(math.NaN(), n)
	}
	return report.WithExcluded(*x, n)
}

// Zones says in which time zone to show the origins of a series; nil
// (the function or its result) means UTC.
type Zones func(series string) *time.Location

// in is the zone of series, UTC when unknown.
func (z Zones) in(series string) *time.Location {
	if z == nil {
		return time.UTC
	}
	if loc := z(series); loc != nil {
		return loc
	}
	return time.UTC
}

// origin is an origin (data time) for tables: in loc, to the minute when it
// falls on one, such as 2026-10-14T05:00+02:00; "—" when unset.
func origin(t *timestamppb.Timestamp, loc *time.Location) string {
	if t == nil {
		return "—"
	}
	lt := t.AsTime().In(loc)
	if lt.Second() == 0 && lt.Nanosecond() == 0 {
		return lt.Format("2006-01-02T15:04Z07:00")
	}
	return lt.Format(time.RFC3339Nano)
}

// relation is ">" when a value lies above the limit it crossed, else "<".
func relation(value, limit *float64) string {
	if value != nil && limit != nil && *value < *limit {
		return "<"
	}
	return ">"
}

// onsetCause says what entered a state: the metric, its window value and
// the limit it crossed, such as "on ME 0.610 > alarm bound 0.500"; "" when
// no metric did.
func onsetCause(s *aftercastv1.DriftStatus) string {
	m := MetricName(s.GetOnsetMetric())
	if m == "" {
		return ""
	}
	limit := "limit"
	switch s.GetState() {
	case aftercastv1.DriftState_DRIFT_STATE_DEGRADED:
		limit = "alarm limit"
		if s.GetOnsetMetric() == aftercastv1.DriftMetric_DRIFT_METRIC_ME {
			limit = "alarm bound"
		}
	case aftercastv1.DriftState_DRIFT_STATE_IMPROVED:
		limit = "95% band's lower bound"
	case aftercastv1.DriftState_DRIFT_STATE_WITHIN:
		limit = "95% band bound" // re-entered: from degraded the upper side, from improved the lower
	}
	if s.OnsetValue == nil || s.OnsetLimit == nil {
		return "on " + strings.ToUpper(m)
	}
	return fmt.Sprintf("on %s %s %s %s %s", strings.ToUpper(m), human(s.OnsetValue), relation(s.OnsetValue, s.OnsetLimit), limit, human(s.OnsetLimit))
}

// Onset says since when (data time) a status has been in its state, and
// what entered it: "degraded since origin 2026-10-14T05:00+02:00, for 12
// origins, on ME 0.610 > alarm bound 0.500". "For n origins" counts the
// evaluations the state has lasted, the one at the onset included. The
// state production started in has no onset.
func Onset(s *aftercastv1.DriftStatus, loc *time.Location) string {
	st := s.GetState()
	if st == aftercastv1.DriftState_DRIFT_STATE_UNSPECIFIED {
		st = aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA
	}
	out := StateName(st)
	if s.GetOnsetOriginTime() == nil {
		out += " since production began"
	} else {
		out += fmt.Sprintf(" since origin %s, %s", origin(s.GetOnsetOriginTime(), loc), ago(s.GetOriginsSinceOnset()))
	}
	if c := onsetCause(s); c != "" {
		out += ", " + c
	}
	if r := s.GetReason(); r != "" {
		out += ": " + r
	}
	return out
}

// lasted is how long ago a status entered its state, such as "12 origins
// ago"; "—" without an onset.
func lasted(s *aftercastv1.DriftStatus) string {
	if s.GetOnsetOriginTime() == nil {
		return "—"
	}
	return ago(s.GetOriginsSinceOnset())
}

// ago says how many origins were judged after the onset one.
func ago(n int32) string {
	if n == 0 {
		return "at the newest origin judged"
	}
	return plural(int64(n), "origin") + " ago"
}

// Caution is what every drift report says once about alerts.
const Caution = "An alert is a statistical signal, not a verdict: thresholds are for the team that owns the decision."

// WritePending says, when evaluations are pending, that some states may
// not include the newest data yet.
func WritePending(w io.Writer, pending int64) {
	if pending > 0 {
		fmt.Fprintf(w, "note: %s pending at the service: some states may not include the newest data yet\n\n",
			plural(pending, "evaluation"))
	}
}

// WriteChance writes what a page means by chance: the pages the selection
// is expected to raise per week if every (series, model) in it is healthy,
// and the caution about alerts.
func WriteChance(w io.Writer, pagesPerWeek float64) {
	fmt.Fprintf(w, "\nexpected chance pages per week, if everything selected is healthy: %s\n", report.Human(pagesPerWeek))
	fmt.Fprintf(w, "(a healthy series pages by chance about once per %d origins on average, docs/calibration.md)\n", scoring.ChanceRunLength)
	fmt.Fprintln(w, Caution)
}

// WriteStates writes a listing: a note when evaluations are pending, the
// series-level state of every (series, model) first, one line each, then
// per (series, model) since when (data time) it has been in its state and
// only the leads that are not within, with a count of those that are; at
// the end the expected chance pages per week and the caution. Origins are
// shown in the zone zones gives a series.
func WriteStates(w io.Writer, l Listing, zones Zones) error {
	WritePending(w, l.PendingEvaluations)
	ds := l.States
	if len(ds) == 0 {
		fmt.Fprintln(w, "no drift states: no (series, model) selected has live pairs yet")
		return nil
	}
	tw := newTable(w)
	fmt.Fprintln(tw, "SERIES\tMODEL\tSTATE\tSINCE ORIGIN\tFOR\tWINDOW\tMAE\tEXPECTED\tALARM LIMIT\tME\tME ALARM BAND\tBASELINE")
	for _, d := range ds {
		s := d.GetSeriesStatus()
		st := Status{}
		if s != nil {
			st = ToStatus(s)
		}
		baseline := "none"
		if v := d.GetBaselineVersion(); v > 0 {
			baseline = fmt.Sprintf("v%d", v)
		}
		window := "—"
		if s != nil {
			window = strconv.Itoa(int(s.GetWindowN()))
		}
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", d.GetSeries(), d.GetModel(), stateWithCause(seriesState(d), st.Breached),
			origin(s.GetOnsetOriginTime(), zones.in(d.GetSeries())), lasted(s), window, human(st.MAE), human(st.MAEExpected), human(st.MAEAlarmLimit),
			human(st.ME), interval(st.MEAlarmLower, st.MEAlarmUpper), baseline)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	for _, d := range ds {
		loc := zones.in(d.GetSeries())
		fmt.Fprintf(w, "\n%s / %s: ", d.GetSeries(), d.GetModel())
		if s := d.GetSeriesStatus(); s != nil {
			fmt.Fprint(w, Onset(s, loc))
			if n := s.GetNoticedTime(); n != nil {
				fmt.Fprintf(w, " (noticed %s)", when(n))
			}
		} else {
			fmt.Fprint(w, "series level not judged yet")
		}
		fmt.Fprintln(w)
		if s := d.GetSeriesStatus(); s != nil && s.LevelScale != nil {
			fmt.Fprintf(w, "  errors scale with the level: expected MAE %s is the backtest's at this window's forecast levels (level scale %s; plain backtest MAE %s)\n",
				human(s.MaeExpected), human(s.LevelScale), human(s.BacktestMae))
		}
		ls := leadStatuses(d)
		var off []*aftercastv1.DriftStatus
		for _, l := range ls {
			if l.GetState() != aftercastv1.DriftState_DRIFT_STATE_WITHIN {
				off = append(off, l)
			}
		}
		switch {
		case len(ls) == 0:
			fmt.Fprintln(w, "  no lead evaluated yet")
			continue
		case len(off) == 0:
			fmt.Fprintf(w, "  all %d leads within\n", len(ls))
			continue
		}
		fmt.Fprintf(w, "  %d of %d leads within; the others:\n", len(ls)-len(off), len(ls))
		tw := newTable(w)
		fmt.Fprintln(tw, "  LEAD\tSTATE\tSINCE ORIGIN\tFOR\tWINDOW\tMAE\tEXPECTED\tBAND\tALARM LIMIT\tME\tME ALARM BAND\tREASON")
		for _, l := range off {
			st := ToStatus(l)
			fmt.Fprintf(tw, "  %d\t%s\t%s\t%s\t%d\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", l.GetLead(), stateWithCause(l.GetState(), st.Breached),
				origin(l.GetOnsetOriginTime(), loc), lasted(l), l.GetWindowN(), human(st.MAE), human(st.MAEExpected),
				interval(st.MAEBandLower, st.MAEBandUpper), human(st.MAEAlarmLimit), human(st.ME), interval(st.MEAlarmLower, st.MEAlarmUpper),
				l.GetReason())
		}
		if err := tw.Flush(); err != nil {
			return err
		}
	}
	WriteChance(w, l.ExpectedChancePagesPerWeek)
	return nil
}

// stateWithCause is a state's name with the breached metrics, such as
// "degraded (mae,me)".
func stateWithCause(s aftercastv1.DriftState, breached []string) string {
	if len(breached) == 0 {
		return StateName(s)
	}
	return StateName(s) + " (" + strings.Join(breached, ",") + ")"
}

// change is a transition's states, such as "within -> degraded";
// "(first)" stands for the state before the first evaluation.
func change(from, to aftercastv1.DriftState) string {
	prev := "(first)"
	if from != aftercastv1.DriftState_DRIFT_STATE_UNSPECIFIED {
		prev = StateName(from)
	}
	return prev + " -> " + StateName(to)
}

// leadName is a lead for tables: its number, or "series" for the series
// level.
func leadName(lead *int32) string {
	if lead == nil {
		return "series"
	}
	return strconv.Itoa(int(*lead))
}

func orDash(p *string) string {
	if p == nil {
		return "—"
	}
	return *p
}

// eventHeader names the columns of eventFields: RECORDED is when the
// service recorded the event (wall clock), ONSET ORIGIN the origin at
// which the new state was entered (data time).
var eventHeader = []string{"RECORDED", "SERIES", "MODEL", "LEAD", "ONSET ORIGIN", "CHANGE", "CAUSE", "METRIC", "VALUE", "LIMIT", "WINDOW"}

// eventFields is an event as table cells, its onset origin in loc.
func eventFields(e *aftercastv1.DriftEvent, loc *time.Location) []string {
	o := ToEvent(e)
	return []string{when(e.GetEventTime()), e.GetSeries(), e.GetModel(), leadName(e.Lead), origin(e.GetOriginTime(), loc),
		change(e.GetPreviousState(), e.GetNewState()), orDash(o.Cause), orDash(o.Metric), human(o.Value), human(o.Limit),
		strconv.Itoa(int(e.GetWindowN()))}
}

// WriteEvents writes events as an aligned table, oldest first, onset
// origins in the zone zones gives their series.
func WriteEvents(w io.Writer, es []*aftercastv1.DriftEvent, zones Zones) error {
	if len(es) == 0 {
		fmt.Fprintln(w, "no drift events")
		return nil
	}
	tw := newTable(w)
	fmt.Fprintln(tw, strings.Join(eventHeader, "\t"))
	for _, e := range es {
		fmt.Fprintln(tw, strings.Join(eventFields(e, zones.in(e.GetSeries())), "\t"))
	}
	return tw.Flush()
}

// eventWidths are the column widths of events written one at a time,
// which cannot be aligned on what comes later.
var eventWidths = []int{20, 16, 10, 6, 22, 30, 8, 6, 10, 10, 6}

func fixed(fields []string) string {
	var b strings.Builder
	for i, f := range fields {
		if i == len(fields)-1 {
			b.WriteString(f)
			break
		}
		fmt.Fprintf(&b, "%-*s  ", eventWidths[i], f)
	}
	return b.String()
}

// WriteEventHeader writes the header line of events written one at a time
// with WriteEventLine.
func WriteEventHeader(w io.Writer) error {
	_, err := fmt.Fprintln(w, fixed(eventHeader))
	return err
}

// WriteEventLine writes one event as a table line of fixed column widths,
// its onset origin in loc (nil: UTC).
func WriteEventLine(w io.Writer, e *aftercastv1.DriftEvent, loc *time.Location) error {
	if loc == nil {
		loc = time.UTC
	}
	_, err := fmt.Fprintln(w, fixed(eventFields(e, loc)))
	return err
}

// WriteHistory writes a replayed drift history as a table, origins in loc
// (nil: UTC).
func WriteHistory(w io.Writer, series, model string, r *aftercastv1.GetDriftHistoryResponse, loc *time.Location) error {
	if loc == nil {
		loc = time.UTC
	}
	fmt.Fprintf(w, "drift history of %s / %s: replayed over the stored data against baseline v%d; origins (data time) in %s\n",
		series, model, r.GetBaselineVersion(), loc)
	if len(r.GetTransitions()) == 0 {
		fmt.Fprintln(w, "no transitions")
		return nil
	}
	tw := newTable(w)
	fmt.Fprintln(tw, "ORIGIN\tLEAD\tCHANGE\tMETRIC\tVALUE\tLIMIT\tWINDOW\tK_EFF\tREASON")
	for _, t := range r.GetTransitions() {
		o := ToTransition(t)
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%d\t%s\t%s\n", origin(t.GetOriginTime(), loc), leadName(t.Lead),
			change(t.GetPreviousState(), t.GetNewState()), orDash(o.Metric), human(o.Value), human(o.Limit), t.GetWindowN(),
			human(o.KEff), t.GetReason())
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintf(w, "%s\n", plural(int64(len(r.GetTransitions())), "transition"))
	return nil
}
