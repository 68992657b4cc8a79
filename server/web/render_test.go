package web

import (
	"bytes"
	"html/template"
	"math"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
)

// The store refuses series keys and model names outside [A-Za-z0-9_.:/-],
// so a key holding markup cannot reach the pages through it. The templates
// must render one inert all the same: render them directly with view
// models full of it.
func TestTemplatesRenderMarkupInert(t *testing.T) {
	t.Parallel()
	const evil = `<script>alert(1)</script>`
	const escaped = `&lt;script&gt;alert(1)&lt;/script&gt;`
	now := time.Date(2026, 3, 1, 12, 0, 0, 0, time.UTC)
	when := stampOf(now.Add(-time.Hour), time.UTC, now, true)
	ev := eventRow{ShowSeries: true, Recorded: when, Cause: evil, CauseTitle: evil, Series: evil, Model: evil, Link: seriesLink(evil, evil, nil), Lead: "series",
		Origin: when, Metric: evil, Previous: viewState(scoring.StateWithin), State: viewState(scoring.StateDegraded),
		Value: "1.5", Limit: "1.2", Relation: "above 99% limit", WindowN: 30}
	events := eventList{Rows: []eventRow{ev}, Older: []eventRow{ev}, ShowSeries: true, Scope: "in the last 24 hours"}
	lay := layout{Title: evil, Now: when, Root: "./"}
	onset := onsetView{Origin: when, OriginText: evil, Lasted: evil, Entered: evil, Noticed: when}

	nan := math.NaN()
	pts := []leadPoint{{Lead: 1, MAE: 1, Expected: 0.9, Lower: 0.8, Upper: 1.1, Alarm: 1.2, State: scoring.StateDegraded, HasState: true, Title: evil},
		{Lead: 2, MAE: 1.1, Expected: nan, Lower: nan, Upper: nan, Alarm: nan}}
	series := &seriesPage{layout: lay, Series: evil, Model: evil, Self: seriesLink(evil, evil, nil),
		Settings: []setting{{"unit", evil}}, State: viewState(scoring.StateDegraded), Onset: onset,
		Pooled: []setting{{evil, evil}}, Drifted: []leadGroup{{viewState(scoring.StateDegraded), evil}}, Notices: []notice{{evil, evil}},
		Baseline: &baselineInfo{Version: 1, Created: when, Warnings: []string{evil}}, HasStates: true,
		LeadChart:   leadChart("lead-chart", pts, 2, []int{2}, false, evil, evil, evil),
		LeadRows:    []leadRow{{Lead: 1, Link: seriesLink(evil, evil, nil), State: viewState(scoring.StateDegraded), Onset: onset, Note: evil}},
		LeadOptions: []leadOption{{Lead: 1, Label: evil, Selected: true}}, Lead: 1, LeadNote: evil, LeadError: evil, OriginNote: evil,
		OriginChart: originChart("origin-chart", 1, []windowPoint{{Origin: now, N: 30, MAE: 1, Expected: 1, Lower: 0.5, Upper: 1.5, Alarm: 2}},
			[]eventMark{{Origin: now, State: scoring.StateDegraded, Title: evil}}, evil, time.UTC),
		PairsChart: pairsChart("pairs-chart", 1, []time.Time{now}, []float64{1}, []float64{2}, evil, time.UTC),
		Events:     events,
		Pairs: pairsView{Filter: pairsFilter{evil, evil, evil, evil, evil}, Hidden: []setting{{"series", evil}}, LeadHidden: []setting{{evil, evil}},
			Error: evil, Rows: []pairRow{{Origin: when, Target: when, Lead: 1, Forecast: "1", Actual: "2", Error: "1"}},
			Next: seriesLink(evil, evil, nil), First: seriesLink(evil, evil, nil), PageSize: 50}}
	overview := &overviewPage{layout: lay, Events: events, Counts: []stateCount{{noState(evil), 1}},
		Rows: []overviewRow{{Series: evil, Model: evil, Link: seriesLink(evil, evil, nil), State: viewState(scoring.StateDegraded),
			Onset: onset, Drifted: []leadGroup{{viewState(scoring.StateDegraded), evil}}, LastOrigin: when, Overdue: evil, LastActual: when, Baseline: evil}}}
	message := &messagePage{layout: lay, Heading: evil, Text: evil}

	for _, c := range []struct {
		name string
		t    *template.Template
		data any
	}{{"overview", templates.overview, overview}, {"series", templates.series, series}, {"message", templates.message, message}} {
		var buf bytes.Buffer
		if err := c.t.Execute(&buf, c.data); err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		out := buf.String()
		if strings.Contains(strings.ToLower(out), "<script") {
			i := strings.Index(strings.ToLower(out), "<script")
			t.Errorf("%s: unescaped markup: …%s…", c.name, out[max(0, i-100):min(len(out), i+60)])
		}
		if n := strings.Count(out, escaped); n < 2 {
			t.Errorf("%s: the key appears escaped %d times, want it everywhere it is printed", c.name, n)
		}
		if !strings.Contains(out, "series?model=%3Cscript%3Ealert%281%29%3C%2Fscript%3E") && c.name != "message" {
			t.Errorf("%s: links do not carry the key query-escaped", c.name)
		}
	}
}

func TestCompactLeads(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		in   []int
		want string
	}{
		{nil, ""}, {[]int{3}, "3"}, {[]int{1, 2, 3, 7, 25, 26, 27}, "1-3, 7, 25-27"}, {[]int{5, 4, 4, 1}, "1, 4-5"},
	} {
		if got := compactLeads(c.in); got != c.want {
			t.Errorf("compactLeads(%v) = %q, want %q", c.in, got, c.want)
		}
		if c.want == "" {
			continue
		}
		back, err := parseLeads(c.want, 100)
		if err != nil || compactLeads(back) != c.want {
			t.Errorf("parseLeads(%q) = %v, %v: not the inverse", c.want, back, err)
		}
	}
	for _, bad := range []string{"0", "1-x", "5-3", "101", "a"} {
		if _, err := parseLeads(bad, 100); err == nil {
			t.Errorf("parseLeads(%q) accepted", bad)
		}
	}
}

func TestRelative(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		d    time.Duration
		want string
	}{
		{30 * time.Second, "under a minute ago"}, {5 * time.Minute, "5 min ago"}, {3*time.Hour + 12*time.Minute, "3 h 12 min ago"},
		{26 * time.Hour, "1 d 2 h ago"}, {15 * 24 * time.Hour, "15 d ago"}, {-2 * time.Hour, "in 2 h"},
	} {
		if got := relative(c.d); got != c.want {
			t.Errorf("relative(%v) = %q, want %q", c.d, got, c.want)
		}
	}
}

func TestNum(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		x    float64
		want string
	}{{1.2346, "1.235"}, {0.84, "0.8400"}, {-0.02556, "−0.02556"}, {12345.6, "12346"}, {math.NaN(), "—"}, {0, "0"}, {99.99, "99.99"}} {
		if got := num(c.x); got != c.want {
			t.Errorf("num(%v) = %q, want %q", c.x, got, c.want)
		}
	}
}

// The charts' paths break at gaps and never print exponents.
func TestPaths(t *testing.T) {
	t.Parallel()
	nan := math.NaN()
	got := polylines([]float64{0, 10, 20, 30, 40}, []float64{1, 2, nan, 4, 1e-7}, 2)
	want := []string{"M0.0 1.0L10.0 2.0", "M30.0 4.0L40.0 0.0"}
	if len(got) != len(want) || got[0] != want[0] || got[1] != want[1] {
		t.Errorf("polylines = %q, want %q", got, want)
	}
	got = areas([]float64{0, 10, 20}, []float64{1, nan, 1}, []float64{3, 3, 3}, 2)
	want = []string{"M-2.0 3.0L2.0 3.0L2.0 1.0L-2.0 1.0Z", "M18.0 3.0L22.0 3.0L22.0 1.0L18.0 1.0Z"}
	if len(got) != 2 || got[0] != want[0] || got[1] != want[1] {
		t.Errorf("areas = %q, want %q", got, want)
	}
}

// A state's words: its onset origin in the series' zone, the origins since,
// what entered it, and the wall clock only as "noticed at".
func TestStateWords(t *testing.T) {
	t.Parallel()
	cph, err := time.LoadLocation("Europe/Copenhagen")
	if err != nil {
		t.Fatal(err)
	}
	now := time.Date(2026, 3, 1, 12, 0, 0, 0, time.UTC)
	f := func(x float64) *float64 { return &x }
	st := store.DriftStatus{State: scoring.StateDegraded, Onset: time.Date(2025, 10, 14, 3, 0, 0, 0, time.UTC),
		Noticed: time.Date(2026, 2, 27, 9, 30, 41, 0, time.UTC), LastOrigin: time.Date(2025, 10, 26, 3, 0, 0, 0, time.UTC),
		Snapshot: store.Snapshot{EnteredMetric: scoring.MetricME, EnteredValue: f(-3.1), EnteredLimit: f(-2.4), OriginsSinceOnset: 12}}
	v := onsetOf(st, cph, now)
	if want := "since the 05:00 CEST origin of 14 Oct 2025, 12 origins ago; on ME: −3.100 below the alarm band's lower end −2.400"; v.Text() != want {
		t.Errorf("onset text\n got %q\nwant %q", v.Text(), want)
	}
	if v.Noticed.Text != "2026-02-27 09:30 UTC" || v.Noticed.Ago != "2 d 2 h ago" {
		t.Errorf("noticed %q, %q", v.Noticed.Text, v.Noticed.Ago)
	}
	st.Onset, st.Snapshot = time.Time{}, store.Snapshot{}
	if v := onsetOf(st, cph, now); v.Text() != "since the start of production" || v.Origin.Valid {
		t.Errorf("the state the period started in: %q", v.Text())
	}
	for _, c := range []struct {
		state        scoring.State
		metric       scoring.Metric
		value, limit float64
		want         string
	}{
		{scoring.StateDegraded, scoring.MetricMAE, 2.5, 2.04, "on MAE: 2.500 above the alarm limit 2.040"},
		{scoring.StateDegraded, scoring.MetricME, 0.5, 0.34, "on ME: 0.5000 above the alarm band's upper end 0.3400"},
		{scoring.StateImproved, scoring.MetricMAE, 0.6, 0.65, "on MAE: 0.6000 below the 95% bound 0.6500"},
		{scoring.StateWithin, scoring.MetricMAE, 0.75, 0.7, "on MAE: 0.7500 back within the 95% bound 0.7000"},
		// Degraded on low ME left straight for improved: ME is above its
		// lower 95% bound, so "below" would be false.
		{scoring.StateImproved, scoring.MetricME, -0.1, -0.2, "on ME: −0.1000 back within the 95% bound −0.2000"},
	} {
		if got := enteredText(c.state, c.metric, c.value, c.limit); got != c.want {
			t.Errorf("enteredText(%s, %s) = %q, want %q", c.state, c.metric, got, c.want)
		}
	}

	// Events: onset origin, cause in words, time recorded; the ME alarm
	// band whole.
	ev := viewEvent(store.DriftEvent{Time: now, Series: "s", Model: "m", Lead: 3, Origin: time.Date(2025, 10, 14, 3, 0, 0, 0, time.UTC),
		Cause: scoring.CauseRevision, Metric: scoring.MetricME, Previous: scoring.StateWithin, State: scoring.StateDegraded,
		Value: -3.1, Limit: -2.4, BandLower: -2.4, BandUpper: 2.2, WindowN: 30}, cph, now)
	if ev.Origin.Text != "2025-10-14 05:00 +02:00" || ev.Recorded.Text != "2026-03-01 12:00 UTC" || ev.Cause != "revision" ||
		ev.Relation != "outside the alarm band" || ev.Limit != "−2.400 – 2.200" {
		t.Errorf("event row: origin %q, recorded %q, cause %q, %q %q", ev.Origin.Text, ev.Recorded.Text, ev.Cause, ev.Relation, ev.Limit)
	}
	for c, want := range map[scoring.Cause]string{scoring.CauseData: "new data", scoring.CauseBaseline: "new baseline"} {
		if got, _ := causeLabel(c); got != want {
			t.Errorf("cause %s: %q, want %q", c, got, want)
		}
	}
}

// The fleet's chance pages: Σ origins a week / ChanceRunLength over the
// rows that can page.
func TestChance(t *testing.T) {
	t.Parallel()
	for _, c := range []struct {
		intervals      []time.Duration
		rows           int
		perWeek, every string
	}{
		{nil, 0, "", ""},
		{[]time.Duration{24 * time.Hour, 24 * time.Hour, 24 * time.Hour, 0}, 3, "0.015", "one every 1.3 years"}, // 21/1391
		{[]time.Duration{time.Hour}, 1, "0.12", "one every 8.3 weeks"},                                          // 168/1391
		{slices.Repeat([]time.Duration{time.Hour}, 100), 100, "12", ""},                                         // 16800/1391
	} {
		v := chanceOf(c.intervals)
		if v.Rows != c.rows || v.PerWeek != c.perWeek || v.Every != c.every || v.RunLength != 1391 {
			t.Errorf("chanceOf(%d intervals) = %+v, want %d rows, %q a week, %q", len(c.intervals), v, c.rows, c.perWeek, c.every)
		}
	}
}

// What a level-adjusted expectation says beside a live value (method.md
// §4a), and that an unscaled one says none of it.
func TestLevelWords(t *testing.T) {
	t.Parallel()
	f := func(x float64) *float64 { return &x }
	sn := store.Snapshot{WindowN: 30, MAE: f(4.3), MAEExpected: f(4.9), MAEBandLower: f(3.6), MAEBandUpper: f(6.4), MAEAlarmLimit: f(7), BacktestMAE: f(4.1)}
	if got, want := maeAgainst(sn, 0.93), "4.300 (expected 4.900, 95% band 3.600 – 6.400, alarm limit 7.000)"; got != want {
		t.Errorf("unscaled:\n got %q\nwant %q", got, want)
	}
	sn.LevelScale = f(1.19)
	if got, want := maeAgainst(sn, 0.93), "4.300 (expected 4.900 at these levels, 95% band 3.600 – 6.400, alarm limit 7.000; "+
		"backtest average 4.100; errors scale with level, b̂ = 0.93)"; got != want {
		t.Errorf("scaled:\n got %q\nwant %q", got, want)
	}
	if got, want := levelWords(nil, 0), "errors scale with level"; got != want {
		t.Errorf("levelWords without figures: %q, want %q", got, want)
	}
	sn.EnteredMetric, sn.EnteredValue, sn.EnteredLimit = scoring.MetricMAE, f(7.8), f(7.2)
	if got := onsetOf(store.DriftStatus{State: scoring.StateDegraded, Snapshot: sn}, time.UTC, time.Now()).Entered; got != "on MAE: 7.800 above the alarm limit 7.200 at that window's levels" {
		t.Errorf("entered on a scaled window: %q", got)
	}
	if expectationLabel(true) != "backtest expectation at these levels" || expectationLabel(false) != "backtest expectation" {
		t.Error("expectation labels")
	}
	pooled := &scoring.LeadReference{Scale: scoring.Scale{B: 0.934, Phi: 5}}
	for _, c := range []struct {
		mode        scoring.ScaleMode
		pooled      *scoring.LeadReference
		short, long string
	}{
		{scoring.ScaleAuto, pooled, "auto (errors scale with level, b̂ = 0.93)", "auto: errors scale with level, b̂ = 0.93 on the decision leads (φ = 5.000 MW)"},
		{scoring.ScaleAuto, &scoring.LeadReference{Scale: scoring.Scale{Phi: 5}}, "auto (b̂ = 0)", "auto: b̂ = 0 on the decision leads"},
		{scoring.ScaleAuto, nil, "auto", ""},
		{scoring.ScaleAbsolute, pooled, "absolute", "absolute: errors are judged as they are"},
	} {
		short, long := errorScaleText(c.mode, c.pooled, "MW")
		if short != c.short || !strings.HasPrefix(long, c.long) || (c.long == "") != (long == "") {
			t.Errorf("errorScaleText(%s, %v) = %q, %q; want %q, %q…", c.mode, c.pooled != nil, short, long, c.short, c.long)
		}
	}
}
