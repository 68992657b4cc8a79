package driftreport

import (
	"fmt"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/report"
	"io"
	"math"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
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
		if err := writeVersion(w, v, "  "); err != nil {
			return err
		}
	}
	return nil
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

	fmt.Fprintf(w, "\nbands (95%%) and alarm limits (99%%) for a window of %d origins\n", r.GetWindowN())
	tw = newTable(w)
	fmt.Fprintln(tw, "LEAD\tK\tK_EFF\tMAE BAND\tMAE LIMIT\tRMSE BAND\tRMSE LIMIT\tME BAND\tME ALARM\tUSABLE")
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
		fmt.Fprintf(tw, "%s\t%d\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", lead, l.GetK(), human(b.KEff),
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

// WriteStates writes the series-level state of every (series, model)
// first, one line each, then per (series, model) only the leads that are
// not within, with a count of those that are.
func WriteStates(w io.Writer, ds []*aftercastv1.SeriesModelDrift) error {
	if len(ds) == 0 {
		fmt.Fprintln(w, "no drift states: no (series, model) selected has live pairs yet")
		return nil
	}
	tw := newTable(w)
	fmt.Fprintln(tw, "SERIES\tMODEL\tSTATE\tSINCE\tWINDOW\tMAE\tEXPECTED\tLIMIT\tME\tME ALARM\tBASELINE")
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
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\t%s\n", d.GetSeries(), d.GetModel(), stateWithCause(seriesState(d), st.Breached),
			when(s.GetStateSinceTime()), window, human(st.MAE), human(st.MAEExpected), human(st.MAEAlarmLimit),
			human(st.ME), interval(st.MEAlarmLower, st.MEAlarmUpper), baseline)
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	for _, d := range ds {
		ls := leadStatuses(d)
		var off []*aftercastv1.DriftStatus
		for _, l := range ls {
			if l.GetState() != aftercastv1.DriftState_DRIFT_STATE_WITHIN {
				off = append(off, l)
			}
		}
		fmt.Fprintf(w, "\n%s / %s: ", d.GetSeries(), d.GetModel())
		switch {
		case len(ls) == 0:
			fmt.Fprintln(w, "no lead evaluated yet")
			continue
		case len(off) == 0:
			fmt.Fprintf(w, "all %d leads within\n", len(ls))
			continue
		}
		fmt.Fprintf(w, "%d of %d leads within; the others:\n", len(ls)-len(off), len(ls))
		tw := newTable(w)
		fmt.Fprintln(tw, "  LEAD\tSTATE\tSINCE\tWINDOW\tMAE\tEXPECTED\tBAND\tLIMIT\tME\tME ALARM")
		for _, l := range off {
			st := ToStatus(l)
			fmt.Fprintf(tw, "  %d\t%s\t%s\t%d\t%s\t%s\t%s\t%s\t%s\t%s\n", l.GetLead(), stateWithCause(l.GetState(), st.Breached),
				when(l.GetStateSinceTime()), l.GetWindowN(), human(st.MAE), human(st.MAEExpected), interval(st.MAEBandLower, st.MAEBandUpper),
				human(st.MAEAlarmLimit), human(st.ME), interval(st.MEAlarmLower, st.MEAlarmUpper))
		}
		if err := tw.Flush(); err != nil {
			return err
		}
	}
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

// eventHeader names the columns of eventFields.
var eventHeader = []string{"TIME", "SERIES", "MODEL", "LEAD", "ORIGIN", "CHANGE", "METRIC", "VALUE", "LIMIT", "WINDOW"}

// eventFields is an event as table cells.
func eventFields(e *aftercastv1.DriftEvent) []string {
	lead := "series"
	if e.Lead != nil {
		lead = strconv.Itoa(int(e.GetLead()))
	}
	prev := "(first)"
	if e.GetPreviousState() != aftercastv1.DriftState_DRIFT_STATE_UNSPECIFIED {
		prev = StateName(e.GetPreviousState())
	}
	o := ToEvent(e)
	metric := "—"
	if o.Metric != nil {
		metric = *o.Metric
	}
	return []string{when(e.GetEventTime()), e.GetSeries(), e.GetModel(), lead, when(e.GetOriginTime()),
		prev + " -> " + StateName(e.GetNewState()), metric, human(o.Value), human(o.Limit), strconv.Itoa(int(e.GetWindowN()))}
}

// WriteEvents writes events as an aligned table, oldest first.
func WriteEvents(w io.Writer, es []*aftercastv1.DriftEvent) error {
	if len(es) == 0 {
		fmt.Fprintln(w, "no drift events")
		return nil
	}
	tw := newTable(w)
	fmt.Fprintln(tw, strings.Join(eventHeader, "\t"))
	for _, e := range es {
		fmt.Fprintln(tw, strings.Join(eventFields(e), "\t"))
	}
	return tw.Flush()
}

// eventWidths are the column widths of events written one at a time,
// which cannot be aligned on what comes later.
var eventWidths = []int{20, 16, 10, 6, 20, 30, 6, 10, 10, 6}

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

// WriteEventLine writes one event as a table line of fixed column widths.
func WriteEventLine(w io.Writer, e *aftercastv1.DriftEvent) error {
	_, err := fmt.Fprintln(w, fixed(eventFields(e)))
	return err
}
