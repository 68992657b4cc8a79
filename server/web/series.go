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
	LeadLevels  bool // some lead's errors scale with level: the table shows the backtest average and b̂
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
	ErrorScale   string // the series' mode and the pooled b̂, explained (method.md §4a)
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
	// Levels: the lead's errors scale with level (method.md §4a), so
	// Expected, Band and Alarm are the backtest's at the window's forecast
	// levels; BacktestMAE is the plain backtest average, Bhat its b̂.
	Levels      bool
	BacktestMAE string
	Bhat        string
	Note        string
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
	// The active baseline as the detector judges with it: its bands and
	// level scales (method.md §4a).
	var ref *scoring.Reference
	if active > 0 {
		if ref, _, err = h.ev.Reference(ctx, key, model); err != nil {
			return nil, 0, err
		}
	}
	sc := scalesOf(ref)
	short, long := errorScaleText(se.ErrorScale, pooledOf(ref), se.Unit)
	p.Settings = append(p.Settings, setting{"error scale", short})
	if p.Baseline != nil {
		p.Baseline.ErrorScale = long
	}

	byLead := map[int]store.DriftStatus{}
	for _, st := range states {
		byLead[st.Lead] = st
	}
	p.HasStates = len(states) > 0

	// The lead-step chart.
	var pts []leadPoint
	if p.HasStates {
		pts = p.statePoints(se.Horizon, byLead, dec, sc, loc, now)
	} else if pts, err = h.expectedPoints(ctx, key, model, se.Horizon, ref, !p.Pairs.NoForecasts); err != nil {
		return nil, 0, err
	}
	p.addSeriesState(byLead, dec, active, sc[0].B, pts, loc, now)
	windowNote := fmt.Sprintf("last %d origins", windowN)
	p.LeadChart = leadChart("lead-chart", pts, se.Horizon, dec, allDecision, se.Unit, se.Step, windowNote)

	// Which lead the origin and pairs charts show.
	if !p.chooseLead(q, se.Horizon, byLead, pts, sc, dec, allDecision, loc, now) {
		status = http.StatusBadRequest
	}

	events, list, err := h.latestEvents(ctx, key, model, seriesEvents, map[string]*time.Location{key: loc}, levelLeadsOf(states))
	if err != nil {
		return nil, 0, err
	}
	p.Events = list
	if !p.Pairs.NoForecasts {
		if err := h.leadHistory(ctx, p, se, model, active, ref, events, loc); err != nil {
			return nil, 0, err
		}
	}
	return p, status, nil
}

// scalesOf is the level scales (method.md §4a) of a prepared baseline by
// lead, the pooled quantity's at 0; empty without a baseline.
func scalesOf(ref *scoring.Reference) map[int]scoring.Scale {
	out := map[int]scoring.Scale{}
	if ref == nil {
		return out
	}
	if l := ref.Lead(0); l != nil {
		out[0] = l.Scale
	}
	for h := 1; h <= ref.Horizon; h++ {
		if l := ref.Lead(h); l != nil {
			out[h] = l.Scale
		}
	}
	return out
}

// pooledOf is the pooled decision-lead quantity of a prepared baseline;
// nil without a baseline or without one.
func pooledOf(ref *scoring.Reference) *scoring.LeadReference {
	if ref == nil {
		return nil
	}
	return ref.Lead(0)
}

// noStatesNotice says that a baseline has not been judged yet and what the
// lead chart shows instead (pts, from expectedPoints). Where errors scale
// with level (method.md §4a) the expectation depends on the forecast
// level: it is drawn at the levels of each lead's live window, and not at
// all for a lead without one. b is the pooled b̂.
func noStatesNotice(pts []leadPoint, b float64) []notice {
	var drawn, scaled, unleveled []int
	for _, pt := range pts {
		if defined(pt.Expected) {
			drawn = append(drawn, pt.Lead)
		}
		switch {
		case pt.Scaled:
			scaled = append(scaled, pt.Lead)
		case pt.Unleveled:
			unleveled = append(unleveled, pt.Lead)
		}
	}
	words := "errors scale with level"
	if b > 0 {
		words += " (b̂ = " + bhatText(b) + " on the decision leads)"
	}
	text := "No drift states yet: the baseline has not been judged against production pairs."
	if len(drawn) > 0 {
		text += " The lead chart shows the backtest expectation for a full window of " + strconv.Itoa(windowN) + " origins"
		if len(scaled) > 0 {
			text += fmt.Sprintf("; %s, so for leads %s it is the expectation at the forecast levels of their live window, "+
				"and the plain backtest average is in the table", words, compactLeads(scaled))
		}
		text += "."
	}
	out := []notice{{Text: text}}
	if len(unleveled) > 0 {
		out = append(out, notice{Text: fmt.Sprintf("Level-scaled baseline: %s, so what the backtest expects of a window depends on the forecast level. "+
			"Leads %s have no live forecasts to set the level, so no expectation or band is drawn for them; the plain backtest average is in the table.",
			words, compactLeads(unleveled))})
	}
	return out
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
// b is the pooled quantity's b̂ (method.md §4a), pts the lead chart's
// points.
func (p *seriesPage) addSeriesState(byLead map[int]store.DriftStatus, dec []int, active int, b float64, pts []leadPoint, loc *time.Location, now time.Time) {
	s0, ok := byLead[0]
	switch {
	case ok:
		p.State, p.Onset, p.LastOrigin = viewState(s0.State), onsetOf(s0, loc, now), stampOf(s0.LastOrigin, loc, now, true)
		p.Pooled = pooledSettings(s0.Snapshot, dec, b)
		if s0.BaselineVersion != active && active > 0 {
			p.Notices = append(p.Notices, notice{Text: fmt.Sprintf("The drift states were judged against baseline v%d; v%d is active and is used from the next evaluation on.",
				s0.BaselineVersion, active)})
		}
	case active > 0:
		p.State = noState("not evaluated yet")
		p.Notices = append(p.Notices, noStatesNotice(pts, b)...)
	default:
		p.State = noState("no baseline")
	}
}

// emptyPoints returns the lead chart's points with nothing to draw yet.
func emptyPoints(horizon int) []leadPoint {
	pts := make([]leadPoint, horizon)
	for i := range pts {
		nan := math.NaN()
		pts[i] = leadPoint{Lead: i + 1, MAE: nan, Expected: nan, Lower: nan, Upper: nan, Alarm: nan, BacktestMAE: nan}
	}
	return pts
}

// statePoints returns the lead chart's points from the leads' drift states,
// and lists the leads not within on the page, by state. sc are the
// baseline's level scales by lead.
func (p *seriesPage) statePoints(horizon int, byLead map[int]store.DriftStatus, dec []int, sc map[int]scoring.Scale, loc *time.Location, now time.Time) []leadPoint {
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
		pt.Scaled, pt.BacktestMAE = sn.LevelScale != nil, val(sn.BacktestMAE)
		pt.Title = leadTitle(h, slices.Contains(dec, h), st, sc[h].B, loc, now)
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
// active baseline's expectation for a full window (ref non-nil) and, when
// the model has forecasts, the live window MAE. A lead whose errors scale
// with level (b̂ > 0, method.md §4a) has bands of the scaled errors, which
// cannot stand beside a MAE in units as they are: they are multiplied by
// the mean level scale of the lead's live window, as the detector will
// judge it ("what the backtest promises at these levels"), and left out
// (Unleveled) when the lead has no live pairs to set the level.
func (h *handler) expectedPoints(ctx context.Context, key, model string, horizon int, ref *scoring.Reference, forecasts bool) ([]leadPoint, error) {
	pts := emptyPoints(horizon)
	levels := map[int]scoring.Scale{}
	for lead := 1; ref != nil && lead <= horizon; lead++ {
		if l := ref.Lead(lead); l != nil && l.Scale.B > 0 {
			levels[lead] = l.Scale
		}
	}
	var acc store.AccuracyResult
	if forecasts {
		var err error
		acc, err = h.st.AccuracyWithLevels(ctx, key, model, store.Selection{Window: windowN}, math.NaN(), levels)
		if err != nil && !errors.Is(err, store.ErrNotFound) {
			return nil, err
		}
		for _, l := range acc.Table.Leads {
			if l.Lead >= 1 && l.Lead <= horizon {
				pts[l.Lead-1].MAE, pts[l.Lead-1].N = l.MAE, int(l.N)
			}
		}
	}
	for lead := 1; ref != nil && lead <= horizon; lead++ {
		l := ref.Lead(lead)
		if l == nil || !l.Verdict.Usable {
			continue
		}
		pt := &pts[lead-1]
		pt.BacktestMAE = l.BacktestMAE
		b := l.Bands(windowN)
		if l.Scale.B > 0 {
			lv := acc.Levels[lead]
			if lv == nil || lv.N == 0 {
				pt.Unleveled = true
				continue
			}
			b, pt.Scaled = b.InUnits(lv.Window()), true
		}
		pt.Expected, pt.Lower, pt.Upper, pt.Alarm = b.MAE.Expected, b.MAE.Lower, b.MAE.Upper, b.MAE.AlarmUpper
	}
	return pts, nil
}

// chooseLead picks the lead the origin and pairs charts show — the one
// asked for in q, else defaultLead's — and fills the lead menu and table.
// It returns false when q asks for a lead that does not exist.
// pts are the lead chart's points and sc the baseline's level scales by
// lead, for the table.
func (p *seriesPage) chooseLead(q url.Values, horizon int, byLead map[int]store.DriftStatus, pts []leadPoint, sc map[int]scoring.Scale, dec []int, allDecision bool, loc *time.Location, now time.Time) bool {
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
		r := leadRowOf(h, byLead, slices.Contains(dec, h) && !allDecision, h == p.Lead, p.Series, p.Model, q, loc, now)
		if h <= len(pts) {
			r.addLevels(pts[h-1], sc[h].B, !p.HasStates)
		}
		p.LeadLevels = p.LeadLevels || r.Levels
		p.LeadRows = append(p.LeadRows, r)
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

// leadTitle is a lead's marker tooltip; b is the lead's b̂ (method.md §4a).
func leadTitle(h int, decision bool, st store.DriftStatus, b float64, loc *time.Location, now time.Time) string {
	sn := st.Snapshot
	s := fmt.Sprintf("lead %d", h)
	if decision {
		s += " (decision lead)"
	}
	s += ": " + viewState(st.State).Label + " " + onsetOf(st, loc, now).Text()
	if sn.MAE != nil {
		s += fmt.Sprintf("; window MAE %s over %d origins; expected %s", numPtr(sn.MAE), sn.WindowN, numPtr(sn.MAEExpected))
		if sn.LevelScale != nil {
			s += " at these levels (" + levelWords(sn.BacktestMAE, b) + ")"
		}
		s += fmt.Sprintf(", 95%% band %s to %s, alarm limit %s", numPtr(sn.MAEBandLower), numPtr(sn.MAEBandUpper), numPtr(sn.MAEAlarmLimit))
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

// addLevels adds to a lead's row what its chart point says of level
// scaling (method.md §4a): whether the expectation is at the window's
// levels, the plain backtest average and b̂. Without a drift state
// (fromPoint) the row takes the point's figures, which the chart draws.
func (r *leadRow) addLevels(pt leadPoint, b float64, fromPoint bool) {
	r.Levels = pt.Scaled || pt.Unleveled
	r.BacktestMAE, r.Bhat = num(pt.BacktestMAE), bhatText(b)
	if !fromPoint {
		return
	}
	r.MAE, r.Expected, r.Alarm = num(pt.MAE), num(pt.Expected), num(pt.Alarm)
	if pt.N > 0 {
		r.N = strconv.Itoa(pt.N)
	}
	if defined(pt.Lower) && defined(pt.Upper) {
		r.Band = num(pt.Lower) + " – " + num(pt.Upper)
	}
	if pt.Unleveled {
		r.Note = "errors scale with level: no expectation until the lead has live forecasts"
	}
}

// pooledSettings is the series-level window beside its band; b is the
// pooled quantity's b̂ (method.md §4a).
func pooledSettings(sn store.Snapshot, dec []int, b float64) []setting {
	if sn.Reason != "" && sn.MAE == nil {
		return []setting{{"baseline", sn.Reason}}
	}
	if sn.WindowN == 0 {
		return nil
	}
	return []setting{
		{"pooled over", "decision leads " + compactLeads(dec)},
		{"window", fmt.Sprintf("last %d origins", sn.WindowN)},
		{"MAE", maeAgainst(sn, b)},
		{"ME (bias)", fmt.Sprintf("%s (expected %s%s, 95%% band %s, alarm band %s)", numPtr(sn.ME), numPtr(sn.MEExpected), atTheseLevels(sn),
			rangeOf(sn.MEBandLower, sn.MEBandUpper), rangeOf(sn.MEAlarmLower, sn.MEAlarmUpper))},
	}
}

// leadHistory fills the origin and pairs charts of the chosen lead: the
// lead's scored pairs (late ones excluded) over the last originPoints
// origins plus a window's worth before them, the windowed MAE at each
// origin, and the band for each window's own n.
func (h *handler) leadHistory(ctx context.Context, p *seriesPage, se store.Series, model string, active int, ref *scoring.Reference, events []store.DriftEvent, loc *time.Location) error {
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
			// In units, at the forecast levels of each window (method.md §4a).
			wp.Expected, wp.Lower, wp.Upper, wp.Alarm = b.Expected, b.Lower, b.Upper, b.AlarmUpper
			wp.Scaled = lr.Scale.B > 0
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

// atTheseLevels is " at these levels" for an expectation adjusted to the
// window's forecast levels (method.md §4a), else "".
func atTheseLevels(sn store.Snapshot) string {
	if sn.LevelScale == nil {
		return ""
	}
	return " at these levels"
}

func rangeOf(lo, hi *float64) string {
	if lo == nil || hi == nil {
		return "—"
	}
	return num(*lo) + " – " + num(*hi)
}
