package demo

import (
	"cmp"
	"fmt"
	"io"
	"maps"
	"math"
	"slices"
	"strconv"
	"strings"
	"text/tabwriter"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/cmd/aftercast/internal/driftreport"
	"github.com/aftercast/aftercast/scoring"
)

// The report speaks in production days and local origin times (data
// time): a state's onset is the origin at which it was entered. The demo
// runs in accelerated time, so the wall-clock times the service stamps on
// states and events (noticed_time, event_time) all fall within the same
// minute and say nothing about the story.

// DayOf is the production day whose origin is t: 1..ProductionDays, 0
// and below for backtest origins, and false when t is no origin.
func (sc *Scenario) DayOf(t time.Time) (int, bool) {
	lt := t.In(sc.Location)
	d := FirstProductionDate
	first := time.Date(d.year, d.month, d.day, 12, 0, 0, 0, time.UTC)
	day := time.Date(lt.Year(), lt.Month(), lt.Day(), 12, 0, 0, 0, time.UTC)
	n := int(day.Sub(first)/(24*time.Hour)) + 1
	return n, ProductionOrigin(sc.Location, n).Equal(t)
}

// dayLabel names the production day of an origin, such as "day 52".
func (sc *Scenario) dayLabel(t time.Time) string {
	if n, ok := sc.DayOf(t); ok {
		return "day " + strconv.Itoa(n)
	}
	return t.In(sc.Location).Format("2006-01-02 15:04")
}

func (sc *Scenario) date(n int) string {
	return ProductionOrigin(sc.Location, n).Format("Mon 2 Jan 2006")
}

// WriteHeader writes what the scenario is: invented data, its calendar and
// its two faults.
func (sc *Scenario) WriteHeader(w io.Writer) {
	bt := ProductionOrigin(sc.Location, 1-BacktestOrigins)
	fmt.Fprintf(w, "aftercast demo — INVENTED DATA (seed %d): a district-heating utility forecasts the hourly heat demand (MW)\n", sc.Seed)
	fmt.Fprintf(w, "of %d substations every day at %02d:00 %s, leads 1–%d h; decision leads %d–%d (the next gas day).\n",
		len(sc.Substations), OriginHour, Zone, Horizon, FirstDecisionLead, LastDecisionLead)
	fmt.Fprintf(w, "Baseline: %d daily backtest origins from %s; production: days 1–%d, %s to %s.\n",
		BacktestOrigins, bt.Format("2 Jan 2006"), ProductionDays, sc.date(1), sc.date(ProductionDays))
	for _, s := range sc.Substations {
		switch s.Fault {
		case MeterHigh:
			fmt.Fprintf(w, "Fault: %s — meter replaced, reads %.0f%% high from day %d (%s).\n", s.Key, (MeterFactor-1)*100, MeterFaultDay, sc.date(MeterFaultDay))
		case StaleFeed:
			fmt.Fprintf(w, "Fault: %s — temperature forecast arrives a day stale from day %d (%s).\n", s.Key, StaleFeedDay, sc.date(StaleFeedDay))
		}
	}
	fmt.Fprintln(w, "The other substations are healthy.")
}

func num(p *float64) string {
	if p == nil || math.IsNaN(*p) {
		return "—"
	}
	return strconv.FormatFloat(*p, 'f', 3, 64)
}

func band(lo, hi *float64) string {
	if lo == nil || hi == nil {
		return "—"
	}
	return "[" + num(lo) + ", " + num(hi) + "]"
}

func stateOf(s *aftercastv1.DriftStatus) string {
	st := s.GetState()
	if st == aftercastv1.DriftState_DRIFT_STATE_UNSPECIFIED {
		st = aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA
	}
	name := driftreport.StateName(st)
	var m []string
	for _, b := range s.GetBreachedMetrics() {
		m = append(m, driftreport.MetricName(b))
	}
	if len(m) > 0 {
		name += " (" + strings.Join(m, ",") + ")"
	}
	return name
}

// onsetCols are a status's onset as the report shows it: the production
// day of the onset origin and how many origins were judged after it;
// "—" for the state production started in.
func (sc *Scenario) onsetCols(s *aftercastv1.DriftStatus) (day, lasted string) {
	if s.GetOnsetOriginTime() == nil {
		return "—", "—"
	}
	return sc.dayLabel(s.GetOnsetOriginTime().AsTime()), strconv.Itoa(int(s.GetOriginsSinceOnset()))
}

// ErrorScale is how the service scaled the errors of the demo's series
// (method.md §4a), as it reported it when the baselines were imported.
type ErrorScale struct {
	Mode aftercastv1.ErrorScale
	// Exponents are the b̂ fitted to each series' pooled decision-lead
	// quantity (0 under absolute).
	Exponents map[string]float64
}

// WriteReport writes the demo's report: the series-level state of every
// substation with its onset, the per-lead table of those not within, the
// drift events, series level in full and per lead grouped, what a page
// means by chance, and at the end one line on what the error scale did to
// the healthy substations.
func (sc *Scenario) WriteReport(w io.Writer, l driftreport.Listing, events []*aftercastv1.DriftEvent, es ErrorScale) error {
	driftreport.WritePending(w, l.PendingEvaluations)
	states := l.States
	fault := map[string]string{}
	for _, s := range sc.Substations {
		switch s.Fault {
		case MeterHigh:
			fault[s.Key] = fmt.Sprintf("meter +%.0f%% from day %d", (MeterFactor-1)*100, MeterFaultDay)
		case StaleFeed:
			fault[s.Key] = fmt.Sprintf("stale temperature from day %d", StaleFeedDay)
		default:
			fault[s.Key] = "none (healthy)"
		}
	}

	fmt.Fprintf(w, "\nSeries level: the state that pages — per origin the mean over decision leads %d–%d, window of the last %d origins (MW)\n",
		FirstDecisionLead, LastDecisionLead, 30)
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	fmt.Fprintln(tw, "SUBSTATION\tSTATE\tSINCE\tORIGINS AGO\tWINDOW\tMAE\tEXPECTED\tALARM LIMIT\tME\tME ALARM BAND\tINJECTED FAULT")
	var off []*aftercastv1.SeriesModelDrift
	for _, d := range states {
		s := d.GetSeriesStatus()
		sinceCol, lasted := sc.onsetCols(s)
		fmt.Fprintf(tw, "%s\t%s\t%s\t%s\t%d\t%s\t%s\t%s\t%s\t%s\t%s\n", d.GetSeries(), stateOf(s), sinceCol, lasted, s.GetWindowN(),
			num(s.Mae), num(s.MaeExpected), num(s.MaeAlarmLimit), num(s.Me), band(s.MeAlarmLower, s.MeAlarmUpper), fault[d.GetSeries()])
		if s.GetState() != aftercastv1.DriftState_DRIFT_STATE_WITHIN {
			off = append(off, d)
		}
	}
	if err := tw.Flush(); err != nil {
		return err
	}

	for _, d := range off {
		ls := slices.Clone(d.GetLeadStatuses())
		slices.SortFunc(ls, func(a, b *aftercastv1.DriftStatus) int { return cmp.Compare(a.GetLead(), b.GetLead()) })
		count := map[string]int{}
		for _, l := range ls {
			count[driftreport.StateName(l.GetState())]++
		}
		var parts []string
		for _, k := range slices.Sorted(maps.Keys(count)) {
			parts = append(parts, fmt.Sprintf("%d %s", count[k], k))
		}
		fmt.Fprintf(w, "\n%s, per lead (%s):\n", d.GetSeries(), strings.Join(parts, ", "))
		tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', tabwriter.AlignRight)
		fmt.Fprintln(tw, "LEAD\tWINDOW\tMAE\tEXPECTED\t95% BAND\tME\tME ALARM BAND\t STATE\t SINCE\tORIGINS AGO\t")
		for _, l := range ls {
			sinceCol, lasted := sc.onsetCols(l)
			fmt.Fprintf(tw, "%d\t%d\t%s\t%s\t%s\t%s\t%s\t %s\t %s\t%s\t\n", l.GetLead(), l.GetWindowN(), num(l.Mae), num(l.MaeExpected),
				band(l.MaeBandLower, l.MaeBandUpper), num(l.Me), band(l.MeAlarmLower, l.MeAlarmUpper), stateOf(l), sinceCol, lasted)
		}
		if err := tw.Flush(); err != nil {
			return err
		}
	}
	if err := sc.writeEvents(w, events); err != nil {
		return err
	}
	driftreport.WriteChance(w, l.ExpectedChancePagesPerWeek)
	sc.writeErrorScale(w, l, events, es)
	return nil
}

// writeErrorScale writes one line on what the error scale did to the
// healthy substations, from what the service judged: how many paged (a
// series-level alarm), how many it could not judge at the series level,
// and how many of their leads entered degraded. Nothing when the mode is
// unknown.
func (sc *Scenario) writeErrorScale(w io.Writer, l driftreport.Listing, events []*aftercastv1.DriftEvent, es ErrorScale) {
	var what string
	switch es.Mode {
	case aftercastv1.ErrorScale_ERROR_SCALE_AUTO:
		what = "error scale auto"
		if len(es.Exponents) > 0 {
			bs := slices.Sorted(maps.Values(es.Exponents))
			what += fmt.Sprintf(" (b̂ %s–%s, fitted to each backtest)", strconv.FormatFloat(bs[0], 'f', 2, 64), strconv.FormatFloat(bs[len(bs)-1], 'f', 2, 64))
		}
		what += ": winter errors are judged against what the backtest promised at winter levels"
	case aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE:
		what = "error scale absolute: errors are judged as they are, against a band that averages the backtest's summer and winter"
	default:
		return
	}
	healthy := map[string]bool{}
	for _, s := range sc.Substations {
		if s.Fault == NoFault {
			healthy[s.Key] = true
		}
	}
	paged := map[string]bool{}
	type seriesLead struct {
		series string
		lead   int32
	}
	leads := map[seriesLead]bool{}
	for _, e := range events {
		if !healthy[e.GetSeries()] || e.GetNewState() != aftercastv1.DriftState_DRIFT_STATE_DEGRADED {
			continue
		}
		if e.Lead == nil {
			paged[e.GetSeries()] = true
		} else {
			leads[seriesLead{e.GetSeries(), e.GetLead()}] = true
		}
	}
	unjudged := 0
	var keff []float64
	for _, d := range l.States {
		if s := d.GetSeriesStatus(); healthy[d.GetSeries()] && s.GetState() == aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE {
			unjudged++
			if s.KEff != nil {
				keff = append(keff, s.GetKEff())
			}
		}
	}
	chance := " by chance"
	if es.Mode == aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE {
		chance = " in the winter"
	}
	line := fmt.Sprintf("%s; %d of %d healthy substations paged%s", what, len(paged), len(healthy), chance)
	if unjudged > 0 {
		line += fmt.Sprintf(", %d could not be judged at the series level (insufficient_baseline", unjudged)
		if len(keff) > 0 {
			slices.Sort(keff)
			line += fmt.Sprintf(": K_eff %.0f–%.0f", keff[0], keff[len(keff)-1])
			switch {
			case keff[len(keff)-1] >= 30:
			case es.Mode == aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE:
				// Under auto the same backtests give K_eff in the
				// hundreds: what the plain quantity adds is the season.
				line += " < 30: the plain errors follow the season"
			default:
				line += " < 30"
			}
		}
		line += ")"
	}
	fmt.Fprintf(w, "\n%s; %d of their leads entered degraded (leads do not page).\n", line, len(leads))
}

// startUp reports whether an event only starts a state machine up: its
// first evaluation, or leaving insufficient_data for within.
func startUp(e *aftercastv1.DriftEvent) bool {
	from, to := e.GetPreviousState(), e.GetNewState()
	return to == aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA ||
		from == aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_DATA && to == aftercastv1.DriftState_DRIFT_STATE_WITHIN
}

// informational reports whether an event only enters or leaves improved,
// which pages nobody (method.md §5).
func informational(e *aftercastv1.DriftEvent) bool {
	improved := aftercastv1.DriftState_DRIFT_STATE_IMPROVED
	return e.GetNewState() == improved || e.GetPreviousState() == improved
}

// maeAgainst is how an MAE event's window value must compare with its
// limit for its change: ">" entering degraded or leaving improved, "<"
// entering improved or leaving degraded; "" for other events. On
// level-scaled errors the judged comparison is of the scaled window, and
// the values in the series' unit may disagree with it.
func maeAgainst(e *aftercastv1.DriftEvent) string {
	if e.GetMetric() != aftercastv1.DriftMetric_DRIFT_METRIC_MAE {
		return ""
	}
	switch from, to := e.GetPreviousState(), e.GetNewState(); {
	case to == aftercastv1.DriftState_DRIFT_STATE_DEGRADED,
		from == aftercastv1.DriftState_DRIFT_STATE_IMPROVED && to == aftercastv1.DriftState_DRIFT_STATE_WITHIN:
		return ">"
	case to == aftercastv1.DriftState_DRIFT_STATE_IMPROVED,
		from == aftercastv1.DriftState_DRIFT_STATE_DEGRADED && to == aftercastv1.DriftState_DRIFT_STATE_WITHIN:
		return "<"
	}
	return ""
}

// change is an event's change of state and the metric behind it, with
// its cause unless new data caused it, such as "within → degraded (me)"
// or "degraded → within (mae, on revision)".
func change(e *aftercastv1.DriftEvent) string {
	s := driftreport.StateName(e.GetPreviousState()) + " → " + driftreport.StateName(e.GetNewState())
	var why []string
	if m := driftreport.MetricName(e.GetMetric()); m != "" {
		why = append(why, m)
	}
	if c := driftreport.CauseName(e.GetCause()); c != "" && e.GetCause() != aftercastv1.DriftCause_DRIFT_CAUSE_DATA {
		why = append(why, "on "+c)
	}
	if len(why) > 0 {
		s += " (" + strings.Join(why, ", ") + ")"
	}
	return s
}

// eventGroup is the events of one series and one kind of change, with the
// leads and production days they happened on.
type eventGroup struct {
	series, change string
	n              int   // events
	leads          []int // their leads
	days           []int // their onsets' production days, of those with an onset
}

func (g *eventGroup) daySpan() string {
	if len(g.days) == 0 {
		return "no onset"
	}
	slices.Sort(g.days)
	first, last := g.days[0], g.days[len(g.days)-1]
	if first == last {
		return "day " + strconv.Itoa(first)
	}
	return fmt.Sprintf("days %d–%d (median %d)", first, last, g.days[len(g.days)/2])
}

// grouper collects events into groups, keeping the order groups appear in.
type grouper struct {
	groups []*eventGroup
	index  map[[2]string]*eventGroup
}

func (gr *grouper) add(sc *Scenario, series, change string, e *aftercastv1.DriftEvent) {
	if gr.index == nil {
		gr.index = map[[2]string]*eventGroup{}
	}
	k := [2]string{series, change}
	g := gr.index[k]
	if g == nil {
		g = &eventGroup{series: series, change: change}
		gr.index[k] = g
		gr.groups = append(gr.groups, g)
	}
	g.n++
	if e.Lead != nil && !slices.Contains(g.leads, int(e.GetLead())) {
		g.leads = append(g.leads, int(e.GetLead()))
	}
	if e.GetOriginTime() != nil {
		day, _ := sc.DayOf(e.GetOriginTime().AsTime())
		g.days = append(g.days, day)
	}
}

// writeEvents writes the series-level events one by one and the per-lead
// events grouped by series and change, with the leads and days they
// happened on. Start-up events are counted, not listed; so are the
// per-lead ones into and out of improved, and the series-level ones are
// grouped.
func (sc *Scenario) writeEvents(w io.Writer, events []*aftercastv1.DriftEvent) error {
	var series []*aftercastv1.DriftEvent
	var improved, leads grouper
	startups, improvedLeads := 0, 0
	for _, e := range events {
		switch {
		case startUp(e):
			startups++
		case e.Lead == nil && informational(e):
			improved.add(sc, e.GetSeries(), "within ⇄ improved (informational)", e)
		case e.Lead == nil:
			series = append(series, e)
		case informational(e):
			improvedLeads++
		default:
			leads.add(sc, e.GetSeries(), change(e), e)
		}
	}

	fmt.Fprintf(w, "\nDrift events, series level (day and time of each onset, the origin whose window entered the new state, %s):\n", Zone)
	if len(series) == 0 {
		fmt.Fprintln(w, "  none beyond start-up")
	}
	// By onset, as the story runs; those without one (start-up into an
	// insufficient state) first.
	slices.SortStableFunc(series, func(a, b *aftercastv1.DriftEvent) int {
		return a.GetOriginTime().AsTime().Compare(b.GetOriginTime().AsTime())
	})
	tw := tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	scaledNote := false
	for _, e := range series {
		detail := ""
		if e.Value != nil && e.Limit != nil {
			rel := ">"
			if *e.Value < *e.Limit {
				rel = "<"
			}
			detail = fmt.Sprintf("%s %s %s, window %d", num(e.Value), rel, num(e.Limit), e.GetWindowN())
			if maeAgainst(e) != "" && maeAgainst(e) != rel {
				detail += " *"
				scaledNote = true
			}
		}
		day, at := "—", "(no onset)"
		if e.GetOriginTime() != nil {
			o := e.GetOriginTime().AsTime()
			day, at = sc.dayLabel(o), o.In(sc.Location).Format("2006-01-02 15:04")
		}
		fmt.Fprintf(tw, "  %s\t%s\t%s\t%s\t%s\n", day, at, e.GetSeries(), change(e), detail)
	}
	for _, g := range improved.groups {
		fmt.Fprintf(tw, "  %s\t\t%s\t%s\t%s\n", g.daySpan(), g.series, g.change, strings.TrimSuffix(plural(g.n, "change"), ":"))
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	if scaledNote {
		fmt.Fprintln(w, "  * judged on level-scaled errors (method.md §4a): the window's MAE in MW and the limit adjusted to its mean level can fall either side of each other")
	}

	fmt.Fprintln(w, "\nDrift events per lead, grouped (for diagnosis: the leads of one forecast are correlated, so these do not page):")
	if len(leads.groups) == 0 {
		fmt.Fprintln(w, "  none beyond start-up")
	}
	slices.SortStableFunc(leads.groups, func(a, b *eventGroup) int { return cmp.Compare(a.series, b.series) })
	tw = tabwriter.NewWriter(w, 0, 0, 2, ' ', 0)
	for _, g := range leads.groups {
		slices.Sort(g.leads)
		fmt.Fprintf(tw, "  %s\t%s\t%s\t%s\n", g.series, g.change, plural(len(g.leads), "lead")+" "+scoring.FormatLeads(g.leads), g.daySpan())
	}
	if err := tw.Flush(); err != nil {
		return err
	}
	fmt.Fprintf(w, "(not listed: %d start-up events — first evaluation, insufficient_data → within — and %d per-lead events into or out of improved)\n",
		startups, improvedLeads)
	return nil
}

func plural(n int, unit string) string {
	if n == 1 {
		return "1 " + unit + ":"
	}
	return fmt.Sprintf("%d %ss:", n, unit)
}
