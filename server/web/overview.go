package web

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"net/url"
	"slices"
	"time"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
)

// overviewEvents is how many of the latest drift events the overview
// lists.
const overviewEvents = 20

// overviewPage is the view model of "/".
type overviewPage struct {
	layout
	Rows   []overviewRow
	Counts []stateCount // how many rows are in each state, worst first
	Chance chanceView
	Events eventList
}

// overviewRow is one (series, model), or a series without forecasts
// (Model empty).
type overviewRow struct {
	Series, Model string
	Link          string // relative URL of the series page; empty without a model
	State         stateView
	Onset         onsetView
	Drifted       []leadGroup // leads not within, by state
	LeadsJudged   int         // leads with a state
	LastOrigin    stamp
	Overdue       string // non-empty when the newest origin is later than two origin intervals: says so
	LastActual    stamp
	Baseline      string // "v3", "none", …
	rank          int
	state         scoring.State // series level, as stored; "" without one
	lastOrigin    time.Time
	interval      time.Duration
}

// leadGroup is the leads in one state, compactly: "degraded: 25-48".
type leadGroup struct {
	State stateView
	Leads string
}

type stateCount struct {
	State stateView
	N     int
}

// eventList is drift events, newest first: the first few in Rows, the
// rest in Older (folded away).
type eventList struct {
	Rows       []eventRow
	Older      []eventRow
	ShowSeries bool   // a column naming the series and model
	Truncated  bool   // older events exist that are not listed
	Levels     bool   // some row's limit is at its window's levels
	Scope      string // what was searched: "in the last 24 h", "since the start"
}

// eventRow is one drift event as the pages print it.
type eventRow struct {
	ShowSeries    bool  // in a list of every series: name it
	Recorded      stamp // when aftercast announced it (wall clock, UTC, to the minute)
	Series, Model string
	Link          string
	Lead          string // "lead 27" or "series"
	Origin        stamp  // onset: the origin at which the new state was entered (data time)
	Cause         string // "new data", "revision", "new baseline"
	CauseTitle    string // the cause explained
	Metric        string
	Previous      stateView
	State         stateView
	Value, Limit  string // "—" when the change had no metric; Limit may be a band "−2.4 – 2.2"
	Relation      string // how Value stands to Limit: "above the alarm limit"; empty without a metric
	Levels        bool   // Limit is the backtest's at that window's forecast levels (method.md §4a)
	WindowN       int
}

func seriesLink(key, model string, extra url.Values) string {
	q := url.Values{"series": {key}, "model": {model}}
	for k, v := range extra {
		q[k] = v
	}
	return "series?" + q.Encode()
}

func (h *handler) overview(ctx context.Context) (*overviewPage, error) {
	now := h.now()
	p := &overviewPage{layout: h.layout("Forecast accuracy against the backtest")}
	p.Home = true

	series, err := h.allSeries(ctx)
	if err != nil {
		return nil, err
	}
	locs := map[string]*time.Location{}
	for _, se := range series {
		locs[se.Key] = se.StepValue().Location()
	}
	states, err := h.st.DriftStates(ctx, "", "")
	if err != nil {
		return nil, err
	}
	fresh, actuals, err := h.st.Freshness(ctx)
	if err != nil {
		return nil, err
	}

	rows := overviewRows{}
	rows.addStates(states, locs, now)
	for _, f := range fresh {
		r := rows.row(f.Series, f.Model)
		r.LastOrigin = stampOf(f.LastOrigin, locs[f.Series], now, true)
		r.lastOrigin, r.interval = f.LastOrigin, f.OriginInterval
	}
	if err := h.addUnjudged(ctx, rows); err != nil {
		return nil, err
	}
	withModel := map[string]bool{}
	for k := range rows {
		withModel[k.series] = true
	}
	for _, se := range series {
		if !withModel[se.Key] {
			r := &overviewRow{Series: se.Key, State: noState("no forecasts yet"), rank: 7, Baseline: "—"}
			rows[overviewKey{se.Key, ""}] = r
		}
	}
	lastActual := map[string]store.ActualFreshness{}
	for _, a := range actuals {
		lastActual[a.Series] = a
	}
	var intervals []time.Duration // of the rows that can page
	for k, r := range rows {
		if r.Baseline != "none" && r.Baseline != "—" && r.state != scoring.StateInsufficientBaseline {
			intervals = append(intervals, r.interval)
		}
		if a, ok := lastActual[k.series]; ok {
			r.LastActual = stampOf(a.LastTime, locs[k.series], now, true)
		}
		// The usual origin interval is known from a baseline's cadence;
		// without one it would be a guess (the step).
		if r.interval > 0 && r.Baseline != "none" && now.Sub(r.lastOrigin) > 2*r.interval {
			r.Overdue = fmt.Sprintf("overdue: origins usually come every %s", durationText(r.interval))
		}
		p.Rows = append(p.Rows, *r)
	}
	p.Chance = chanceOf(intervals)
	slices.SortFunc(p.Rows, func(a, b overviewRow) int {
		return cmp.Or(cmp.Compare(a.rank, b.rank), cmp.Compare(a.Series, b.Series), cmp.Compare(a.Model, b.Model))
	})
	p.Counts = stateCounts(p.Rows)

	_, p.Events, err = h.latestEvents(ctx, "", "", overviewEvents, locs, levelLeadsOf(states))
	p.Events.ShowSeries = true
	for i := range p.Events.Rows {
		p.Events.Rows[i].ShowSeries = true
	}
	for i := range p.Events.Older {
		p.Events.Older[i].ShowSeries = true
	}
	return p, err
}

// allSeries lists every series, in key order.
func (h *handler) allSeries(ctx context.Context) ([]store.Series, error) {
	var series []store.Series
	for after := ""; ; {
		page, err := h.st.ListSeries(ctx, after, 1000)
		if err != nil {
			return nil, err
		}
		series = append(series, page...)
		if len(page) < 1000 {
			return series, nil
		}
		after = page[len(page)-1].Key
	}
}

// overviewKey names an overview row.
type overviewKey struct{ series, model string }

// overviewRows are the overview's rows while they are built.
type overviewRows map[overviewKey]*overviewRow

// row returns the row of series s and model m, adding it if new.
func (rows overviewRows) row(s, m string) *overviewRow {
	k := overviewKey{s, m}
	if rows[k] == nil {
		rows[k] = &overviewRow{Series: s, Model: m, Link: seriesLink(s, m, nil), Baseline: "none"}
	}
	return rows[k]
}

// addStates sets the rows' series-level states and lists their leads not
// within, by state.
func (rows overviewRows) addStates(states []store.DriftStatus, locs map[string]*time.Location, now time.Time) {
	byLead := map[overviewKey]map[scoring.State][]int{}
	for _, st := range states {
		r, k := rows.row(st.Series, st.Model), overviewKey{st.Series, st.Model}
		r.Baseline = fmt.Sprintf("v%d", st.BaselineVersion)
		if st.Lead == 0 {
			r.State, r.state = viewState(st.State), st.State
			r.Onset = onsetOf(st, locs[st.Series], now)
			r.rank = severity(st.State)
			continue
		}
		r.LeadsJudged++
		if st.State != scoring.StateWithin {
			if byLead[k] == nil {
				byLead[k] = map[scoring.State][]int{}
			}
			byLead[k][st.State] = append(byLead[k][st.State], st.Lead)
		}
	}
	for k, m := range byLead {
		r := rows[k]
		for _, s := range []scoring.State{scoring.StateDegraded, scoring.StateImproved, scoring.StateInsufficientData, scoring.StateInsufficientBaseline} {
			if len(m[s]) > 0 {
				r.Drifted = append(r.Drifted, leadGroup{State: viewState(s), Leads: compactLeads(m[s])})
			}
		}
	}
}

// addUnjudged says, for the rows without drift states, whether there is
// a baseline at all.
func (h *handler) addUnjudged(ctx context.Context, rows overviewRows) error {
	for k, r := range rows {
		if r.State.Class != "" {
			continue
		}
		r.rank = 6
		vs, err := h.st.ListBaselineVersions(ctx, k.series, k.model)
		if err != nil && !errors.Is(err, store.ErrNotFound) {
			return err
		}
		if len(vs) == 0 {
			r.State = noState("no baseline")
			continue
		}
		r.Baseline = fmt.Sprintf("v%d", vs[0].Version)
		r.State = noState("not evaluated yet")
	}
	return nil
}

// stateCounts counts the rows by state, in the order the states first
// appear.
func stateCounts(rows []overviewRow) []stateCount {
	counts := map[string]*stateCount{}
	var order []string
	for _, r := range rows {
		if counts[r.State.Label] == nil {
			counts[r.State.Label] = &stateCount{State: r.State}
			order = append(order, r.State.Label)
		}
		counts[r.State.Label].N++
	}
	var out []stateCount
	for _, l := range order {
		out = append(out, *counts[l])
	}
	return out
}

// eventsShown is how many events a list shows unfolded.
const eventsShown = 12

// eventWindows are how far back in record time latestEvents looks,
// widening until it has enough events.
var eventWindows = []struct {
	d    time.Duration
	text string
}{{24 * time.Hour, "in the last 24 hours"}, {7 * 24 * time.Hour, "in the last 7 days"},
	{30 * 24 * time.Hour, "in the last 30 days"}, {0, "since the start"}}

// levelKey names the drift state of one lead (0: the series) judged
// against one baseline version.
type levelKey struct {
	series, model string
	lead, version int
}

// levelLeads are the drift states whose errors scale with level (method.md
// §4a): their limits are the backtest's at the window's forecast levels.
type levelLeads map[levelKey]bool

// levelLeadsOf finds the level-scaled states: those whose window has a
// level scale.
func levelLeadsOf(states []store.DriftStatus) levelLeads {
	out := levelLeads{}
	for _, st := range states {
		if st.Snapshot.LevelScale != nil {
			out[levelKey{st.Series, st.Model, st.Lead, st.BaselineVersion}] = true
		}
	}
	return out
}

// of says whether an event was judged on a level-scaled quantity: its
// lead's current state is, against the same baseline version.
func (l levelLeads) of(ev store.DriftEvent) bool {
	return l[levelKey{ev.Series, ev.Model, ev.Lead, ev.BaselineVersion}]
}

// latestEvents returns the newest n drift events (of one series and model,
// or of all when empty), newest first, raw and as rows. The store lists
// events oldest first after a sequence number, so it reads recent time
// windows, widening them until n events are found. levels marks the rows
// whose limits are at their window's levels.
func (h *handler) latestEvents(ctx context.Context, seriesKey, model string, n int, locs map[string]*time.Location, levels levelLeads) ([]store.DriftEvent, eventList, error) {
	now := h.now()
	var list eventList
	for _, w := range eventWindows {
		var since time.Time
		if w.d > 0 {
			since = now.Add(-w.d)
		}
		var ring []store.DriftEvent
		total := 0
		for after := int64(0); ; {
			page, err := h.st.DriftEvents(ctx, store.EventFilter{Series: seriesKey, Model: model, Since: since, After: after})
			if err != nil {
				return nil, list, err
			}
			for _, ev := range page {
				ring = append(ring, ev)
				total++
				if len(ring) > n {
					ring = ring[1:]
				}
			}
			if len(page) < 10000 {
				break
			}
			after = page[len(page)-1].Seq
		}
		if len(ring) < n && w.d > 0 {
			continue
		}
		list.Scope = w.text
		list.Truncated = total > len(ring)
		slices.Reverse(ring)
		for i, ev := range ring {
			r := viewEvent(ev, locs[ev.Series], now)
			r.Levels = r.Relation != "" && levels.of(ev)
			list.Levels = list.Levels || r.Levels
			if i < eventsShown {
				list.Rows = append(list.Rows, r)
			} else {
				list.Older = append(list.Older, r)
			}
		}
		return ring, list, nil
	}
	return nil, list, nil
}

func viewEvent(ev store.DriftEvent, loc *time.Location, now time.Time) eventRow {
	r := eventRow{Recorded: stampOf(ev.Time.Truncate(time.Minute), time.UTC, now, true), Series: ev.Series, Model: ev.Model,
		Link: seriesLink(ev.Series, ev.Model, nil), Lead: leadLabel(ev.Lead), Origin: stampOf(ev.Origin, loc, now, false),
		Metric: metricLabel(ev.Metric), Previous: viewState(ev.Previous), State: viewState(ev.State),
		Value: num(ev.Value), Limit: num(ev.Limit), WindowN: ev.WindowN}
	r.Cause, r.CauseTitle = causeLabel(ev.Cause)
	if ev.Lead > 0 {
		r.Link = seriesLink(ev.Series, ev.Model, url.Values{"lead": {fmt.Sprint(ev.Lead)}})
	}
	if defined(ev.Value) && defined(ev.Limit) {
		r.Relation = relation(ev.State, ev.Metric, ev.Value, ev.Limit)
		// An event keeps the whole ME alarm band it was judged against.
		if ev.State == scoring.StateDegraded && ev.Metric == scoring.MetricME && defined(ev.BandLower) && defined(ev.BandUpper) {
			r.Relation, r.Limit = "outside the alarm band", num(ev.BandLower)+" – "+num(ev.BandUpper)
		}
	}
	return r
}

// durationText prints an origin interval: "1 h", "1 d", "7 d".
func durationText(d time.Duration) string {
	switch {
	case d%(24*time.Hour) == 0:
		return fmt.Sprintf("%d d", d/(24*time.Hour))
	case d%time.Hour == 0:
		return fmt.Sprintf("%d h", d/time.Hour)
	case d%time.Minute == 0:
		return fmt.Sprintf("%d min", d/time.Minute)
	}
	return d.String()
}
