package web

import (
	"context"
	"errors"
	"fmt"
	"math"
	"net/http"
	"net/url"
	"slices"
	"strconv"
	"strings"
	"time"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
)

const (
	windowN       = scoring.DriftWindow
	originPoints  = 120 // origins on the origin chart
	pairsPageSize = 50
	seriesEvents  = 100 // drift events listed on a series page
)

// seriesPage is the view model of "/series".
type seriesPage struct {
	layout
	Series, Model string
	Settings      []setting
	Self          string // this page without lead or filters

	State       stateView // series level (pooled decision leads)
	Onset       onsetView
	LastOrigin  stamp
	Pooled      []setting // the series-level window against its band
	Drifted     []leadGroup
	Baseline    *baselineInfo
	Notices     []notice
	HasStates   bool
	LeadChart   *chart
	LeadRows    []leadRow
	LeadOptions []leadOption

	Lead        int    // the lead of the origin and pairs charts
	LeadNote    string // why that lead
	LeadError   string
	OriginChart *chart
	OriginNote  string
	PairsChart  *chart

	Events eventList
	Pairs  pairsView
}

type setting struct{ Label, Value string }

// notice is a remark on the page's data, with an optional command to run.
type notice struct{ Text, Command string }

type baselineInfo struct {
	Version      int
	Created      stamp
	FirstOrigin  stamp
	LastOrigin   stamp
	Rows         int64
	CadenceSteps int
	Warnings     []string
	Older        int // earlier versions kept
}

// leadRow is one lead's figures, the chart's text twin.
type leadRow struct {
	Lead     int
	Link     string
	Decision bool
	Selected bool
	State    stateView
	Onset    onsetView
	N        string
	MAE      string
	Expected string
	Band     string
	Alarm    string
	ME       string
	MEBand   string
	MEAlarm  string
	Note     string
}

type leadOption struct {
	Lead     int
	Label    string
	Selected bool
}

// pairsView is the filterable, paged pairs table.
type pairsView struct {
	Filter      pairsFilter
	Hidden      []setting // form fields carried along: series, model, lead
	LeadHidden  []setting // the same for the lead form: series, model, filters
	Error       string
	Rows        []pairRow
	Next, First string
	PageSize    int
	NoForecasts bool
}

type pairsFilter struct {
	OriginFrom, OriginTo, TargetFrom, TargetTo, Leads string
}

type pairRow struct {
	Origin, Target     stamp
	Lead               int
	Forecast, Actual   string
	Error              string
	Late               bool
	ForecastReceivedAt stamp
}

func (h *handler) series(ctx context.Context, q url.Values) (*seriesPage, int, error) {
	now := h.now()
	key, model := q.Get("series"), q.Get("model")
	if key == "" || model == "" {
		return nil, 0, &userError{http.StatusBadRequest, "Choose a series and a model",
			"This page shows one series and model: series?series=KEY&model=MODEL. Pick one on the overview."}
	}
	se, err := h.st.GetSeries(ctx, key)
	if errors.Is(err, store.ErrNotFound) {
		return nil, 0, &userError{http.StatusNotFound, "Unknown series", fmt.Sprintf("There is no series %q.", key)}
	}
	if err != nil {
		return nil, 0, err
	}
	loc := se.StepValue().Location()
	status := http.StatusOK
	p := &seriesPage{layout: h.layout(key + " · " + model), Series: key, Model: model, Self: seriesLink(key, model, nil)}
	dec := se.Decision()
	allDecision := len(se.DecisionLeads) == 0 || len(dec) == se.Horizon
	p.Settings = []setting{{"step", se.Step}, {"horizon", fmt.Sprintf("%d steps", se.Horizon)}, {"unit", or(se.Unit, "—")},
		{"time zone", se.TimeZone}, {"season", seasonText(se.Season)}, {"decision leads", decisionText(dec, allDecision)}}

	// Pairs table first: it also tells whether the model has forecasts.
	p.Pairs, err = h.pairsTable(ctx, se, model, q, loc, now)
	if err != nil {
		return nil, 0, err
	}
	if p.Pairs.Error != "" {
		status = http.StatusBadRequest
	}
	states, err := h.st.DriftStates(ctx, key, model)
	if err != nil {
		return nil, 0, err
	}
	versions, err := h.st.ListBaselineVersions(ctx, key, model)
	if err != nil {
		return nil, 0, err
	}
	if p.Pairs.NoForecasts && len(versions) == 0 && len(states) == 0 {
		return nil, 0, &userError{http.StatusNotFound, "Unknown model",
			fmt.Sprintf("Series %q has no forecasts and no baseline of model %q.", key, model)}
	}
	active := p.addBaseline(versions, model, loc, now)
	if p.Pairs.NoForecasts {
		p.Notices = append(p.Notices, notice{Text: "No forecasts of this model have arrived yet."})
	}

	byLead := map[int]store.DriftStatus{}
	for _, st := range states {
		byLead[st.Lead] = st
	}
	p.HasStates = len(states) > 0
	p.addSeriesState(byLead, dec, active, loc, now)

	// The lead-step chart.
	var pts []leadPoint
	if p.HasStates {
		pts = p.statePoints(se.Horizon, byLead, dec, loc, now)
	} else if pts, err = h.expectedPoints(ctx, key, model, se.Horizon, active, !p.Pairs.NoForecasts); err != nil {
		return nil, 0, err
	}
	windowNote := fmt.Sprintf("last %d origins", windowN)
	p.LeadChart = leadChart("lead-chart", pts, se.Horizon, dec, allDecision, se.Unit, se.Step, windowNote)

	// Which lead the origin and pairs charts show.
	if !p.chooseLead(q, se.Horizon, byLead, dec, allDecision, loc, now) {
		status = http.StatusBadRequest
	}

	events, list, err := h.latestEvents(ctx, key, model, seriesEvents, map[string]*time.Location{key: loc})
	if err != nil {
		return nil, 0, err
	}
	p.Events = list
	if !p.Pairs.NoForecasts {
		if err := h.leadHistory(ctx, p, se, model, active, events, loc); err != nil {
			return nil, 0, err
		}
	}
	return p, status, nil
}

// addBaseline describes the active baseline, the newest of versions, and
// returns its version, or says there is none and returns 0.
func (p *seriesPage) addBaseline(versions []store.BaselineVersion, model string, loc *time.Location, now time.Time) int {
	if len(versions) == 0 {
		p.Notices = append(p.Notices, notice{fmt.Sprintf("No baseline: model %s has no backtest for this series, so there is no band to judge against "+
			"and no drift state. Import one with", model), "aftercast baseline import --model " + model + " FILE.csv"})
		return 0
	}
	v := versions[0]
	b := &baselineInfo{Version: v.Version, Created: stampOf(v.CreatedAt, loc, now, true), FirstOrigin: stampOf(v.FirstOrigin, loc, now, false),
		LastOrigin: stampOf(v.LastOrigin, loc, now, false), Rows: v.Rows, CadenceSteps: v.CadenceSteps, Older: len(versions) - 1}
	for _, w := range v.Warnings {
		b.Warnings = append(b.Warnings, w.Message)
	}
	p.Baseline = b
	return v.Version
}

// addSeriesState shows the series-level state (lead 0 of byLead), or why
// there is none; active is the active baseline version, 0 without one.
func (p *seriesPage) addSeriesState(byLead map[int]store.DriftStatus, dec []int, active int, loc *time.Location, now time.Time) {
	s0, ok := byLead[0]
	switch {
	case ok:
		p.State, p.Onset, p.LastOrigin = viewState(s0.State), onsetOf(s0, loc, now), stampOf(s0.LastOrigin, loc, now, true)
		p.Pooled = pooledSettings(s0.Snapshot, dec)
		if s0.BaselineVersion != active && active > 0 {
			p.Notices = append(p.Notices, notice{Text: fmt.Sprintf("The drift states were judged against baseline v%d; v%d is active and is used from the next evaluation on.",
				s0.BaselineVersion, active)})
		}
	case active > 0:
		p.State = noState("not evaluated yet")
		p.Notices = append(p.Notices, notice{Text: "No drift states yet: the baseline has not been judged against production pairs. " +
			"The lead chart shows the backtest expectation for a full window of " + strconv.Itoa(windowN) + " origins."})
	default:
		p.State = noState("no baseline")
	}
}

// emptyPoints returns the lead chart's points with nothing to draw yet.
func emptyPoints(horizon int) []leadPoint {
	pts := make([]leadPoint, horizon)
	for i := range pts {
		nan := math.NaN()
		pts[i] = leadPoint{Lead: i + 1, MAE: nan, Expected: nan, Lower: nan, Upper: nan, Alarm: nan}
	}
	return pts
}

// statePoints returns the lead chart's points from the leads' drift states,
// and lists the leads not within on the page, by state.
func (p *seriesPage) statePoints(horizon int, byLead map[int]store.DriftStatus, dec []int, loc *time.Location, now time.Time) []leadPoint {
	pts := emptyPoints(horizon)
	groups := map[scoring.State][]int{}
	for h := 1; h <= horizon; h++ {
		st, ok := byLead[h]
		if !ok {
			continue
		}
		sn := st.Snapshot
		pt := &pts[h-1]
		pt.HasState, pt.State = true, st.State
		pt.MAE, pt.Expected, pt.Lower, pt.Upper, pt.Alarm = val(sn.MAE), val(sn.MAEExpected), val(sn.MAEBandLower), val(sn.MAEBandUpper), val(sn.MAEAlarmLimit)
		pt.Title = leadTitle(h, slices.Contains(dec, h), st, loc, now)
		if st.State != scoring.StateWithin {
			groups[st.State] = append(groups[st.State], h)
		}
	}
	for _, s := range []scoring.State{scoring.StateDegraded, scoring.StateImproved, scoring.StateInsufficientData, scoring.StateInsufficientBaseline} {
		if len(groups[s]) > 0 {
			p.Drifted = append(p.Drifted, leadGroup{State: viewState(s), Leads: compactLeads(groups[s])})
		}
	}
	return pts
}

// expectedPoints returns the lead chart's points without drift states: the
// active baseline's expectation for a full window (when active > 0) and,
// when the model has forecasts, the live window MAE.
func (h *handler) expectedPoints(ctx context.Context, key, model string, horizon, active int, forecasts bool) ([]leadPoint, error) {
	pts := emptyPoints(horizon)
	if active > 0 {
		_, views, _, err := h.ev.BaselineView(ctx, key, model, 0, windowN)
		if err != nil {
			return nil, err
		}
		for _, v := range views {
			if v.Lead >= 1 && v.Lead <= horizon && v.Usable {
				pt := &pts[v.Lead-1]
				pt.Expected, pt.Lower, pt.Upper, pt.Alarm = v.MAE.Expected, v.MAE.Lower, v.MAE.Upper, v.MAE.AlarmUpper
			}
		}
	}
	if forecasts {
		acc, err := h.st.Accuracy(ctx, key, model, store.Selection{Window: windowN}, math.NaN())
		if err != nil && !errors.Is(err, store.ErrNotFound) {
			return nil, err
		}
		for _, l := range acc.Table.Leads {
			if l.Lead >= 1 && l.Lead <= horizon {
				pts[l.Lead-1].MAE = l.MAE
			}
		}
	}
	return pts, nil
}

// chooseLead picks the lead the origin and pairs charts show — the one
// asked for in q, else defaultLead's — and fills the lead menu and table.
// It returns false when q asks for a lead that does not exist.
func (p *seriesPage) chooseLead(q url.Values, horizon int, byLead map[int]store.DriftStatus, dec []int, allDecision bool, loc *time.Location, now time.Time) bool {
	valid := true
	p.Lead, p.LeadNote = defaultLead(byLead, dec)
	if s := q.Get("lead"); s != "" {
		l, err := strconv.Atoi(s)
		if err != nil || l < 1 || l > horizon {
			p.LeadError = fmt.Sprintf("Lead %q is not one of 1-%d; showing lead %d instead.", s, horizon, p.Lead)
			valid = false
		} else {
			p.Lead, p.LeadNote = l, ""
		}
	}
	for h := 1; h <= horizon; h++ {
		o := leadOption{Lead: h, Label: strconv.Itoa(h), Selected: h == p.Lead}
		if st, ok := byLead[h]; ok && st.State != scoring.StateWithin {
			o.Label += " (" + viewState(st.State).Label + ")"
		}
		if slices.Contains(dec, h) && !allDecision {
			o.Label += " · decision"
		}
		p.LeadOptions = append(p.LeadOptions, o)
	}
	for h := 1; h <= horizon; h++ {
		p.LeadRows = append(p.LeadRows, leadRowOf(h, byLead, slices.Contains(dec, h) && !allDecision, h == p.Lead, p.Series, p.Model, q, loc, now))
	}
	return valid
}

// defaultLead picks the lead the origin chart shows when none is asked
// for: the degraded lead furthest above its alarm limit, else the first
// decision lead.
func defaultLead(byLead map[int]store.DriftStatus, dec []int) (int, string) {
	best, ratio := 0, 0.0
	for h, st := range byLead {
		if h == 0 || st.State != scoring.StateDegraded || st.Snapshot.MAE == nil || st.Snapshot.MAEAlarmLimit == nil || *st.Snapshot.MAEAlarmLimit <= 0 {
			continue
		}
		if r := *st.Snapshot.MAE / *st.Snapshot.MAEAlarmLimit; r > ratio || r == ratio && h < best {
			best, ratio = h, r
		}
	}
	if best > 0 {
		return best, fmt.Sprintf("Lead %d is shown: of the degraded leads, its window MAE stands highest against its alarm limit (%.2f×).", best, ratio)
	}
	return dec[0], fmt.Sprintf("Lead %d is shown: the first decision lead.", dec[0])
}

func leadTitle(h int, decision bool, st store.DriftStatus, loc *time.Location, now time.Time) string {
	sn := st.Snapshot
	s := fmt.Sprintf("lead %d", h)
	if decision {
		s += " (decision lead)"
	}
	s += ": " + viewState(st.State).Label + " " + onsetOf(st, loc, now).Text()
	if sn.MAE != nil {
		s += fmt.Sprintf("; window MAE %s over %d origins; expected %s, 95%% band %s to %s, alarm limit %s",
			numPtr(sn.MAE), sn.WindowN, numPtr(sn.MAEExpected), numPtr(sn.MAEBandLower), numPtr(sn.MAEBandUpper), numPtr(sn.MAEAlarmLimit))
	}
	if sn.Reason != "" {
		s += "; " + sn.Reason
	}
	return s
}

func leadRowOf(h int, byLead map[int]store.DriftStatus, decision, selected bool, key, model string, q url.Values, loc *time.Location, now time.Time) leadRow {
	extra := filterValues(q)
	extra.Set("lead", strconv.Itoa(h))
	r := leadRow{Lead: h, Link: seriesLink(key, model, extra) + "#lead-history", Decision: decision, Selected: selected,
		N: "—", MAE: "—", Expected: "—", Band: "—", Alarm: "—", ME: "—", MEBand: "—", MEAlarm: "—"}
	st, ok := byLead[h]
	if !ok {
		r.State = noState("no state")
		return r
	}
	sn := st.Snapshot
	r.State, r.Onset = viewState(st.State), onsetOf(st, loc, now)
	if sn.WindowN > 0 {
		r.N = strconv.Itoa(sn.WindowN)
	}
	r.MAE, r.Expected, r.Alarm = numPtr(sn.MAE), numPtr(sn.MAEExpected), numPtr(sn.MAEAlarmLimit)
	r.Band = rangeOf(sn.MAEBandLower, sn.MAEBandUpper)
	r.ME, r.MEBand, r.MEAlarm = numPtr(sn.ME), rangeOf(sn.MEBandLower, sn.MEBandUpper), rangeOf(sn.MEAlarmLower, sn.MEAlarmUpper)
	var notes []string
	if sn.Reason != "" {
		notes = append(notes, sn.Reason)
	}
	for _, m := range sn.Breached {
		switch m {
		case scoring.MetricME:
			notes = append(notes, "latest window: ME outside its alarm band")
		default:
			notes = append(notes, "latest window: "+metricLabel(m)+" above its alarm limit")
		}
	}
	r.Note = strings.Join(notes, "; ")
	return r
}

func pooledSettings(sn store.Snapshot, dec []int) []setting {
	if sn.Reason != "" && sn.MAE == nil {
		return []setting{{"baseline", sn.Reason}}
	}
	if sn.WindowN == 0 {
		return nil
	}
	return []setting{
		{"pooled over", "decision leads " + compactLeads(dec)},
		{"window", fmt.Sprintf("last %d origins", sn.WindowN)},
		{"MAE", fmt.Sprintf("%s (expected %s, 95%% band %s, alarm limit %s)", numPtr(sn.MAE), numPtr(sn.MAEExpected), rangeOf(sn.MAEBandLower, sn.MAEBandUpper), numPtr(sn.MAEAlarmLimit))},
		{"ME (bias)", fmt.Sprintf("%s (expected %s, 95%% band %s, alarm band %s)", numPtr(sn.ME), numPtr(sn.MEExpected), rangeOf(sn.MEBandLower, sn.MEBandUpper), rangeOf(sn.MEAlarmLower, sn.MEAlarmUpper))},
	}
}

// leadHistory fills the origin and pairs charts of the chosen lead: the
// lead's scored pairs (late ones excluded) over the last originPoints
// origins plus a window's worth before them, the windowed MAE at each
// origin, and the band for each window's own n.
func (h *handler) leadHistory(ctx context.Context, p *seriesPage, se store.Series, model string, active int, events []store.DriftEvent, loc *time.Location) error {
	sel := store.Selection{Leads: []int{p.Lead}, Window: originPoints + windowN - 1}
	var pairs []store.Pair
	for tok := ""; ; {
		page, next, err := h.st.Pairs(ctx, se.Key, model, sel, tok, 1000)
		if errors.Is(err, store.ErrNotFound) {
			return nil
		}
		if err != nil {
			return err
		}
		for _, pr := range page {
			if !pr.Late {
				pairs = append(pairs, pr)
			}
		}
		if next == "" {
			break
		}
		tok = next
	}
	if len(pairs) == 0 {
		p.OriginNote = fmt.Sprintf("Lead %d has no scored pairs yet.", p.Lead)
		return nil
	}
	// The windows as the detector judges them, with the active baseline's
	// band for each window's own n.
	var lr *scoring.LeadReference
	if active > 0 {
		ref, _, err := h.ev.Reference(ctx, se.Key, model)
		if err != nil {
			return err
		}
		if ref != nil {
			lr = ref.Lead(p.Lead)
		}
		switch {
		case lr == nil:
			p.OriginNote = "No band for this lead: the backtest has no pairs for it."
		case !lr.Verdict.Usable:
			p.OriginNote = "No band for this lead: " + lr.Verdict.Reason
		}
	}
	sp := make([]scoring.Pair, len(pairs))
	for i, pr := range pairs {
		sp[i] = scoring.Pair{Origin: pr.Origin, Lead: pr.Lead, Forecast: pr.Forecast, Actual: pr.Actual}
	}
	js := scoring.Windows(lr, windowN, sp)
	var pts []windowPoint
	for _, j := range js[max(0, len(js)-originPoints):] {
		nan := math.NaN()
		wp := windowPoint{Origin: j.Origin, N: j.N, MAE: j.MAE, Expected: nan, Lower: nan, Upper: nan, Alarm: nan}
		if b := j.Bands.MAE; lr != nil && lr.Verdict.Usable && b.Metric != "" && b.Usable() {
			wp.Expected, wp.Lower, wp.Upper, wp.Alarm = b.Expected, b.Lower, b.Upper, b.AlarmUpper
		}
		pts = append(pts, wp)
	}
	if active == 0 {
		p.OriginNote = "No baseline: the windowed MAE is shown without a band."
	}
	var marks []eventMark
	for _, ev := range events {
		if ev.Lead == p.Lead {
			marks = append(marks, eventMark{Origin: ev.Origin, State: ev.State,
				Title: fmt.Sprintf("onset origin %s: %s → %s (%s)", stampOf(ev.Origin, loc, time.Time{}, false).Text, viewState(ev.Previous).Label, viewState(ev.State).Label, metricLabel(ev.Metric))})
		}
	}
	p.OriginChart = originChart("origin-chart", p.Lead, pts, marks, se.Unit, loc)
	recent := pairs[max(0, len(pairs)-originPoints):]
	ts, ya, yf := make([]time.Time, len(recent)), make([]float64, len(recent)), make([]float64, len(recent))
	for i, pr := range recent {
		ts[i], ya[i], yf[i] = pr.Target, pr.Actual, pr.Forecast
	}
	p.PairsChart = pairsChart("pairs-chart", p.Lead, ts, ya, yf, se.Unit, loc)
	return nil
}

// filterValues is the pairs filter of a query, to carry along in links.
func filterValues(q url.Values) url.Values {
	out := url.Values{}
	for _, k := range []string{"origin_from", "origin_to", "target_from", "target_to", "leads"} {
		if v := q.Get(k); v != "" {
			out.Set(k, v)
		}
	}
	return out
}

// pairsTable reads one page of pairs for the filter in q.
func (h *handler) pairsTable(ctx context.Context, se store.Series, model string, q url.Values, loc *time.Location, now time.Time) (pairsView, error) {
	v := pairsView{PageSize: pairsPageSize, Filter: pairsFilter{OriginFrom: q.Get("origin_from"), OriginTo: q.Get("origin_to"),
		TargetFrom: q.Get("target_from"), TargetTo: q.Get("target_to"), Leads: q.Get("leads")}}
	v.Hidden = []setting{{"series", se.Key}, {"model", model}}
	if l := q.Get("lead"); l != "" {
		v.Hidden = append(v.Hidden, setting{"lead", l})
	}
	v.LeadHidden = []setting{{"series", se.Key}, {"model", model}}
	for k, vs := range filterValues(q) {
		v.LeadHidden = append(v.LeadHidden, setting{k, vs[0]})
	}
	slices.SortFunc(v.LeadHidden[2:], func(a, b setting) int { return strings.Compare(a.Label, b.Label) })

	var sel store.Selection
	var errs []string
	for _, f := range []struct {
		name, text string
		dst        *time.Time
	}{{"origin from", v.Filter.OriginFrom, &sel.OriginFrom}, {"origin to", v.Filter.OriginTo, &sel.OriginTo},
		{"target from", v.Filter.TargetFrom, &sel.TargetFrom}, {"target to", v.Filter.TargetTo, &sel.TargetTo}} {
		t, err := parseTime(f.text)
		if err != nil {
			errs = append(errs, f.name+": "+err.Error())
		}
		*f.dst = t
	}
	leads, err := parseLeads(v.Filter.Leads, se.Horizon)
	if err != nil {
		errs = append(errs, "leads: "+err.Error())
	}
	sel.Leads = leads
	token := q.Get("page")
	if len(errs) > 0 {
		v.Error = strings.Join(errs, "; ")
		// Still find out whether the model has forecasts at all.
		_, _, err := h.st.Pairs(ctx, se.Key, model, store.Selection{}, "", 1)
		if errors.Is(err, store.ErrNotFound) {
			v.NoForecasts = true
			return v, nil
		}
		return v, err
	}
	page, next, err := h.st.Pairs(ctx, se.Key, model, sel, token, pairsPageSize)
	var inv *store.InvalidError
	switch {
	case errors.Is(err, store.ErrNotFound):
		v.NoForecasts = true
		return v, nil
	case errors.As(err, &inv):
		v.Error = inv.Error()
		return v, nil
	case err != nil:
		return v, err
	}
	for _, pr := range page {
		e := pr.Actual - pr.Forecast
		v.Rows = append(v.Rows, pairRow{Origin: stampOf(pr.Origin, loc, now, false), Target: stampOf(pr.Target, loc, now, false), Lead: pr.Lead,
			Forecast: num(pr.Forecast), Actual: num(pr.Actual), Error: num(e), Late: pr.Late,
			ForecastReceivedAt: stampOf(pr.ForecastReceivedAt, loc, now, false)})
	}
	base := filterValues(q)
	if l := q.Get("lead"); l != "" {
		base.Set("lead", l)
	}
	if next != "" {
		nq := url.Values{}
		for k, vs := range base {
			nq[k] = vs
		}
		nq.Set("page", next)
		v.Next = seriesLink(se.Key, model, nq) + "#pairs"
	}
	if token != "" {
		v.First = seriesLink(se.Key, model, base) + "#pairs"
	}
	return v, nil
}

func or(s, def string) string {
	if s == "" {
		return def
	}
	return s
}

func seasonText(m int) string {
	if m == 0 {
		return "none"
	}
	return fmt.Sprintf("%d steps", m)
}

func decisionText(dec []int, all bool) string {
	if all {
		return "all leads"
	}
	return compactLeads(dec)
}

func rangeOf(lo, hi *float64) string {
	if lo == nil || hi == nil {
		return "—"
	}
	return num(*lo) + " – " + num(*hi)
}
