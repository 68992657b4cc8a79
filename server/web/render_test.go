package web

import (
	"bytes"
	"html/template"
	"math"
	"strings"
	"testing"
	"time"

	"github.com/aftercast/aftercast/scoring"
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
	ev := eventRow{ShowSeries: true, Time: when, Series: evil, Model: evil, Link: seriesLink(evil, evil, nil), Lead: "series",
		Origin: when, Metric: evil, Previous: viewState(scoring.StateWithin), State: viewState(scoring.StateDegraded),
		Value: "1.5", Limit: "1.2", Relation: "above 99% limit", WindowN: 30}
	events := eventList{Rows: []eventRow{ev}, Older: []eventRow{ev}, ShowSeries: true, Scope: "in the last 24 hours"}
	lay := layout{Title: evil, Now: when, Root: "./"}

	nan := math.NaN()
	pts := []leadPoint{{Lead: 1, MAE: 1, Expected: 0.9, Lower: 0.8, Upper: 1.1, Alarm: 1.2, State: scoring.StateDegraded, HasState: true, Title: evil},
		{Lead: 2, MAE: 1.1, Expected: nan, Lower: nan, Upper: nan, Alarm: nan}}
	series := &seriesPage{layout: lay, Series: evil, Model: evil, Self: seriesLink(evil, evil, nil),
		Settings: []setting{{"unit", evil}}, State: viewState(scoring.StateDegraded), Since: when,
		Pooled: []setting{{evil, evil}}, Drifted: []leadGroup{{viewState(scoring.StateDegraded), evil}}, Notices: []notice{{evil, evil}},
		Baseline: &baselineInfo{Version: 1, Created: when, Warnings: []string{evil}}, HasStates: true,
		LeadChart:   leadChart("lead-chart", pts, 2, []int{2}, false, evil, evil, evil),
		LeadRows:    []leadRow{{Lead: 1, Link: seriesLink(evil, evil, nil), State: viewState(scoring.StateDegraded), Note: evil}},
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
			Since: when, Drifted: []leadGroup{{viewState(scoring.StateDegraded), evil}}, LastOrigin: when, Overdue: evil, LastActual: when, Baseline: evil}}}
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
