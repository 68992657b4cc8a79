package web_test

import (
	"context"
	"fmt"
	"html"
	"math"
	"net/http"
	"net/url"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
)

// evil is markup a person could type into a query parameter or a series
// unit; it must only ever come back escaped.
const evil = `<script>alert(1)</script>`

func seriesPath(key, model string, extra ...string) string {
	q := url.Values{"series": {key}, "model": {model}}
	for i := 0; i+1 < len(extra); i += 2 {
		q.Set(extra[i], extra[i+1])
	}
	return "series?" + q.Encode()
}

// inert fails when body carries a script element: the pages have none of
// their own, so one could only come from input.
func inert(t *testing.T, body string) {
	t.Helper()
	if strings.Contains(strings.ToLower(body), "<script") {
		i := strings.Index(strings.ToLower(body), "<script")
		t.Errorf("unescaped <script in the page: …%s…", body[max(0, i-80):min(len(body), i+80)])
	}
}

// overviewRow returns the table row of (series, model) on the overview.
func overviewRow(t *testing.T, body, key, model string) string {
	t.Helper()
	anchor := `<a class="key" href="` + html.EscapeString(seriesPath(key, model)) + `">` + html.EscapeString(key) + `</a> · ` + html.EscapeString(model)
	i := strings.Index(body, anchor)
	if i < 0 {
		t.Fatalf("overview has no row for %s · %s", key, model)
	}
	row := body[i:]
	if j := strings.Index(row, "</tr>"); j >= 0 {
		row = row[:j]
	}
	return row
}

// leadsIn reads the leads listed for a state in an overview row, such
// as "degraded: <span class="leads">7, 13-24</span>".
func leadsIn(t *testing.T, row, state string) []int {
	t.Helper()
	m := regexp.MustCompile(regexp.QuoteMeta(state) + `: <span class="leads">([^<]*)</span>`).FindStringSubmatch(row)
	if m == nil {
		return nil
	}
	var out []int
	for part := range strings.SplitSeq(m[1], ", ") {
		lo, hi, isRange := strings.Cut(part, "-")
		a, err := strconv.Atoi(lo)
		if err != nil {
			t.Fatalf("lead list %q", m[1])
		}
		b := a
		if isRange {
			if b, err = strconv.Atoi(hi); err != nil {
				t.Fatalf("lead list %q", m[1])
			}
		}
		for h := a; h <= b; h++ {
			out = append(out, h)
		}
	}
	return out
}

func span(a, b int) []int {
	var out []int
	for h := a; h <= b; h++ {
		out = append(out, h)
	}
	return out
}

func containsAll(have, want []int) bool {
	for _, h := range want {
		if !slices.Contains(have, h) {
			return false
		}
	}
	return true
}

// pairRow is one row of the pairs table as printed.
type pairRow struct {
	origin, target string
	lead           int
}

var pairRowRE = regexp.MustCompile(`<tr(?: class="late")?>\s*<td>([^<]+)</td><td>([^<]+)</td><td class="num">(\d+)</td>`)

func pairRows(t *testing.T, body string) []pairRow {
	t.Helper()
	i := strings.Index(body, `<table id="pairs-table">`)
	if i < 0 {
		return nil
	}
	tbl := body[i:]
	tbl = tbl[:strings.Index(tbl, "</table>")]
	var out []pairRow
	for _, m := range pairRowRE.FindAllStringSubmatch(tbl, -1) {
		h, _ := strconv.Atoi(m[3])
		out = append(out, pairRow{m[1], m[2], h})
	}
	return out
}

// printed is how the pages print a UTC time.
func printed(t time.Time) string { return t.UTC().Format("2006-01-02 15:04") + " UTC" }

func parsePrinted(t *testing.T, s string) time.Time {
	t.Helper()
	v, err := time.Parse("2006-01-02 15:04 UTC", s)
	if err != nil {
		t.Fatalf("printed time %q: %v", s, err)
	}
	return v
}

func nextLink(body string) string {
	m := regexp.MustCompile(`id="next-page" href="([^"]+)"`).FindStringSubmatch(body)
	if m == nil {
		return ""
	}
	return html.UnescapeString(m[1])
}

// statuses reads the stored drift states of (key, model) by lead.
func statuses(t *testing.T, st *store.Store, key, model string) map[int]store.DriftStatus {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
	defer cancel()
	sts, err := st.DriftStates(ctx, key, model)
	if err != nil {
		t.Fatal(err)
	}
	out := map[int]store.DriftStatus{}
	for _, s := range sts {
		out[s.Lead] = s
	}
	return out
}

// sinceText is how the pages say when a state began: at its onset origin,
// in loc, with the judged origins since (origins are daily and every one
// is scored in the fixture, so that count is the days from onset to the
// last origin judged).
func sinceText(st store.DriftStatus, loc *time.Location) string {
	o := st.Onset.In(loc)
	day := o.Format("2 Jan")
	if o.Year() != time.Now().In(loc).Year() {
		day = o.Format("2 Jan 2006")
	}
	return fmt.Sprintf(`since the <time datetime="%s">%s origin of %s</time>, %d origins ago`,
		o.Format(time.RFC3339), o.Format("15:04 MST"), day, int(st.LastOrigin.Sub(st.Onset)/(24*time.Hour)))
}

// noticedText is how the pages give the wall-clock time a state was
// announced: in UTC, whatever the series' zone.
func noticedText(st store.DriftStatus) string {
	return `noticed at <time datetime="` + st.Noticed.UTC().Truncate(time.Minute).Format(time.RFC3339) + `">` + printed(st.Noticed) + "</time>"
}

func TestPages(t *testing.T) {
	t.Parallel()
	f := newFixture(t)

	t.Run("overview", func(t *testing.T) {
		t.Parallel()
		status, body := f.get(t, "")
		if status != http.StatusOK {
			t.Fatalf("status %d", status)
		}
		inert(t, body)
		row := overviewRow(t, body, driftKey, driftModel)
		if !strings.Contains(row, `<span class="state degraded" data-state="degraded">`) || !strings.Contains(row, "degraded</span>") {
			t.Errorf("drifting series not shown as degraded: %s", row)
		}
		if got := leadsIn(t, row, "degraded"); !containsAll(got, span(13, 24)) {
			t.Errorf("degraded leads %v, want at least 13-24", got)
		}
		if got := leadsIn(t, row, "improved"); !containsAll(got, span(1, 3)) {
			t.Errorf("improved leads %v, want at least 1-3", got)
		}
		if !strings.Contains(row, printed(f.last)) || !strings.Contains(row, "v1") {
			t.Errorf("row lacks the last origin %s or the baseline version: %s", printed(f.last), row)
		}
		for _, c := range []struct{ key, model, state string }{
			{calmKey, calmModel, ""}, {rawKey, rawModel, "no baseline"}, {waitKey, driftModel, "not evaluated yet"},
		} {
			row := overviewRow(t, body, c.key, c.model)
			if c.state != "" && !strings.Contains(row, c.state+"</span>") {
				t.Errorf("%s · %s: want state %q in %s", c.key, c.model, c.state, row)
			}
		}
		if !strings.Contains(body, `<span class="key">`+emptyKey+`</span>`) || !strings.Contains(body, "no forecasts yet") {
			t.Error("the series without forecasts is not listed as such")
		}
		if !regexp.MustCompile(`(?s)<table id="events">.*<tbody>\s*<tr>`).MatchString(body) {
			t.Error("no drift events listed on the overview")
		}
		if strings.Contains(body, "99%") {
			t.Error("the overview still speaks of 99% limits")
		}
		// The model name with : / . - survives the round trip through a link.
		if status, body := f.get(t, seriesPath(calmKey, calmModel)); status != http.StatusOK || !strings.Contains(body, "· "+calmModel+" ") {
			t.Errorf("series page of model %q: status %d", calmModel, status)
		}
	})

	t.Run("states in data time", func(t *testing.T) {
		t.Parallel()
		_, body := f.get(t, "")
		ny, err := time.LoadLocation("America/New_York")
		if err != nil {
			t.Fatal(err)
		}
		for _, c := range []struct {
			key, model string
			loc        *time.Location
		}{{driftKey, driftModel, time.UTC}, {calmKey, calmModel, ny}} {
			s0 := statuses(t, f.st, c.key, c.model)[0]
			if s0.Onset.IsZero() || !s0.LastOrigin.After(s0.Onset) {
				t.Fatalf("%s: series state %s, onset %v, last origin %v: the fixture should have a state entered during production", c.key, s0.State, s0.Onset, s0.LastOrigin)
			}
			row := overviewRow(t, body, c.key, c.model)
			if want := sinceText(s0, c.loc); !strings.Contains(row, want) {
				t.Errorf("%s: overview row lacks %q: %s", c.key, want, row)
			}
			if want := noticedText(s0); !strings.Contains(row, want) {
				t.Errorf("%s: overview row lacks %q: %s", c.key, want, row)
			}
		}
		// The drifting series entered degraded on a metric: say which and
		// against what.
		s0 := statuses(t, f.st, driftKey, driftModel)[0]
		row := overviewRow(t, body, driftKey, driftModel)
		var want string
		switch s0.Snapshot.EnteredMetric {
		case scoring.MetricMAE:
			want = "on MAE: " + regexp.QuoteMeta(fmtNum(*s0.Snapshot.EnteredValue)) + " above the alarm limit " + regexp.QuoteMeta(fmtNum(*s0.Snapshot.EnteredLimit))
		case scoring.MetricME:
			want = "on ME: " + regexp.QuoteMeta(fmtNum(*s0.Snapshot.EnteredValue)) + " (below|above) the alarm band's (lower|upper) end " + regexp.QuoteMeta(fmtNum(*s0.Snapshot.EnteredLimit))
		default:
			t.Fatalf("degraded series entered on metric %q", s0.Snapshot.EnteredMetric)
		}
		if !regexp.MustCompile(want).MatchString(row) {
			t.Errorf("overview row does not say what entered degraded (%s): %s", want, row)
		}
		// The state the production period started in has no onset.
		thin := statuses(t, f.st, thinKey, driftModel)[0]
		if thin.State != scoring.StateInsufficientBaseline || !thin.Onset.IsZero() {
			t.Fatalf("thin series: state %s, onset %v; want insufficient_baseline from the start", thin.State, thin.Onset)
		}
		if row := overviewRow(t, body, thinKey, driftModel); !strings.Contains(row, "since the start of production") || strings.Contains(row, "origin of") {
			t.Errorf("a state held from the start of production: %s", row)
		}

		// The series page and its lead table say the same.
		_, body = f.get(t, seriesPath(driftKey, driftModel))
		i := strings.Index(body, `<h2 id="series-state">`)
		card := body[i : i+strings.Index(body[i:], "</section>")]
		for _, want := range []string{sinceText(s0, time.UTC), "<dt>entered</dt><dd>on " + metricName(s0.Snapshot.EnteredMetric) + ": ", "<dt>noticed at</dt>"} {
			if !strings.Contains(card, want) {
				t.Errorf("series state card lacks %q: %s", want, card)
			}
		}
		st := statuses(t, f.st, driftKey, driftModel)
		i = strings.Index(body, `<table id="leads">`)
		tbl := body[i : i+strings.Index(body[i:], "</table>")]
		for _, h := range []int{2, 6, 20} {
			j := strings.Index(tbl, `#lead-history">`+strconv.Itoa(h)+`</a>`)
			if j < 0 {
				t.Fatalf("lead table has no lead %d", h)
			}
			row := tbl[j : j+strings.Index(tbl[j:], "</tr>")]
			want := "since the start of production"
			if !st[h].Onset.IsZero() {
				want = sinceText(st[h], time.UTC)
			}
			if !strings.Contains(row, want) || !strings.Contains(row, noticedText(st[h])) {
				t.Errorf("lead %d (%s, onset %v): row lacks %q or when it was noticed: %s", h, st[h].State, st[h].Onset, want, row)
			}
		}
	})

	t.Run("chance pages", func(t *testing.T) {
		t.Parallel()
		_, body := f.get(t, "")
		i := strings.Index(body, `<div class="notice info" id="chance">`)
		if i < 0 {
			t.Fatal("the overview does not say how many pages chance alone gives")
		}
		note := body[i : i+strings.Index(body[i:], "</div>")]
		// Three (series, model) can page, all with daily origins: the
		// drifting and the calm series and the one not evaluated yet. Not
		// the one without a baseline, nor the model without forecasts, nor
		// the series whose baseline is insufficient (that would make 4:
		// 0.020). 3 · 7 / 1391 = 0.0151 a week, one every 66 weeks.
		if got := 3 * scoring.ChancePagesPerWeek(24*time.Hour); math.Abs(got-0.0151) > 0.0001 {
			t.Fatalf("3 daily series page %v times a week by chance", got)
		}
		for _, want := range []string{"about <b>0.015</b> pages a week", "the 3 series and models that can page", "one every 1.3 years",
			"pages about once per 1391 origins", "not a verdict", "must be set by the team that owns the decision"} {
			if !strings.Contains(note, want) {
				t.Errorf("chance note lacks %q: %s", want, note)
			}
		}
	})

	t.Run("series", func(t *testing.T) {
		t.Parallel()
		status, body := f.get(t, seriesPath(driftKey, driftModel))
		if status != http.StatusOK {
			t.Fatalf("status %d", status)
		}
		inert(t, body)
		if !regexp.MustCompile(`<h1>.*<span class="state degraded" data-state="degraded">.*degraded</span></h1>`).MatchString(body) {
			t.Error("the heading does not state the series as degraded")
		}
		for _, chart := range []string{"lead-chart", "origin-chart"} {
			i := strings.Index(body, `<svg id="`+chart+`"`)
			if i < 0 {
				t.Errorf("no %s", chart)
				continue
			}
			svg := body[i : i+strings.Index(body[i:], "</svg>")]
			for _, class := range []string{"band", "expected", "live", "alarm"} {
				if !strings.Contains(svg, `<path class="`+class+`" d="M`) {
					t.Errorf("%s has no %s path", chart, class)
				}
			}
			if !strings.Contains(svg, `<title id="`+chart+`-title">`) || !strings.Contains(svg, `<desc id="`+chart+`-desc">`) {
				t.Errorf("%s has no title and description", chart)
			}
		}
		if !strings.Contains(body, `<rect class="decision"`) || !strings.Contains(body, "decision leads 13-24") {
			t.Error("the decision leads are not marked on the lead chart")
		}
		if !strings.Contains(body, `class="marker degraded"`) || !strings.Contains(body, `class="marker improved"`) {
			t.Error("no per-lead state markers")
		}
		if !strings.Contains(body, `<svg id="pairs-chart"`) || !strings.Contains(body, `<path class="actual"`) {
			t.Error("no actuals chart")
		}
		if strings.Contains(body, "99%") {
			t.Error("the series page still speaks of 99% limits")
		}
		for _, want := range []string{"alarm limit", "<th class=\"num\">ME alarm band</th>"} {
			if !strings.Contains(body, want) {
				t.Errorf("series page lacks %q", want)
			}
		}
		// The chosen lead is a degraded one, and another can be asked for.
		m := regexp.MustCompile(`<h2 id="lead-history-h">Lead (\d+) over time</h2>`).FindStringSubmatch(body)
		if m == nil {
			t.Fatal("no lead history section")
		}
		if h, _ := strconv.Atoi(m[1]); h < 13 {
			t.Errorf("default lead %d, want a degraded decision lead", h)
		}
		_, body = f.get(t, seriesPath(driftKey, driftModel, "lead", "2"))
		if !strings.Contains(body, `<h2 id="lead-history-h">Lead 2 over time</h2>`) || !strings.Contains(body, `<svg id="origin-chart"`) {
			t.Error("lead=2 does not show lead 2")
		}
	})

	t.Run("events", func(t *testing.T) {
		t.Parallel()
		_, body := f.get(t, seriesPath(driftKey, driftModel))
		i := strings.Index(body, `<table id="events">`)
		if i < 0 {
			t.Fatal("no events table")
		}
		tbl := body[i : i+strings.Index(body[i:], "</table>")]
		rows := strings.Count(tbl, "<tr>") - 1 // the head row
		if rows < 1 {
			t.Fatal("events table is empty")
		}
		for _, want := range []string{"series", `<span class="state degraded" data-state="degraded">`, "above the alarm limit",
			"<th>Onset origin</th>", "<th>Cause</th>", "<th>Recorded</th>"} {
			if !strings.Contains(tbl, want) {
				t.Errorf("events lack %q", want)
			}
		}
		// Newest first: the first row is the last event stored, with its
		// onset origin, its cause and the time it was recorded. The fixture
		// only pushed new data in origin order.
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		evs, err := f.st.DriftEvents(ctx, store.EventFilter{Series: driftKey, Model: driftModel})
		if err != nil || len(evs) == 0 {
			t.Fatalf("stored events: %d, %v", len(evs), err)
		}
		last := evs[len(evs)-1]
		i = strings.Index(tbl, "<tbody>")
		first := tbl[i : i+strings.Index(tbl[i:], "</tr>")]
		for _, want := range []string{`<td class="nowrap"><time datetime="` + last.Origin.UTC().Format(time.RFC3339) + `">` + printed(last.Origin) + `</time>`,
			`<td class="nowrap" title="origins judged for the first time">new data</td>`,
			`<time datetime="` + last.Time.UTC().Truncate(time.Minute).Format(time.RFC3339) + `">` + printed(last.Time) + `</time>`} {
			if !strings.Contains(first, want) {
				t.Errorf("newest event row lacks %q: %s", want, first)
			}
		}
		if n := strings.Count(tbl, ">new data</td>"); n != rows {
			t.Errorf("%d of %d events caused by new data; the fixture only pushed new data", n, rows)
		}
		// The calm series' page lists only its own events.
		_, body = f.get(t, seriesPath(calmKey, calmModel))
		if strings.Contains(body, `lead=13#lead-history">lead 13</a>`) && strings.Contains(body, driftKey) {
			t.Error("the calm series' page shows another series' events")
		}
	})

	t.Run("pairs paging", func(t *testing.T) {
		t.Parallel()
		_, body := f.get(t, seriesPath(driftKey, driftModel))
		first := pairRows(t, body)
		if len(first) != 50 {
			t.Fatalf("first page has %d pairs, want 50", len(first))
		}
		next := nextLink(body)
		if next == "" {
			t.Fatal("no next link")
		}
		status, body := f.get(t, next)
		if status != http.StatusOK {
			t.Fatalf("next page: status %d", status)
		}
		second := pairRows(t, body)
		if len(second) != 50 {
			t.Fatalf("second page has %d pairs, want 50", len(second))
		}
		last, head := first[len(first)-1], second[0]
		lo, ho := parsePrinted(t, last.origin), parsePrinted(t, head.origin)
		if ho.Before(lo) || ho.Equal(lo) && head.lead <= last.lead {
			t.Errorf("second page starts at %v, not after the first page's last %v", head, last)
		}
		if !strings.Contains(body, "← first page") {
			t.Error("a later page has no link back to the first")
		}
	})

	t.Run("pairs filters", func(t *testing.T) {
		t.Parallel()
		_, body := f.get(t, seriesPath(driftKey, driftModel, "leads", "5"))
		rows := pairRows(t, body)
		if len(rows) != 50 || nextLink(body) == "" {
			t.Errorf("leads=5: %d rows (next link %q), want a full page and more", len(rows), nextLink(body))
		}
		for _, r := range rows {
			if r.lead != 5 {
				t.Fatalf("leads=5 gave a pair of lead %d", r.lead)
			}
		}
		from, to := f.last.AddDate(0, 0, -3), f.last.AddDate(0, 0, -1)
		_, body = f.get(t, seriesPath(driftKey, driftModel, "origin_from", from.Format(time.RFC3339), "origin_to", to.Format("2006-01-02")))
		rows = pairRows(t, body)
		if len(rows) != 2*24 || nextLink(body) != "" {
			t.Errorf("two origins: %d rows (next %q), want 48 and no next page", len(rows), nextLink(body))
		}
		for _, r := range rows {
			if o := parsePrinted(t, r.origin); o.Before(from) || !o.Before(to) {
				t.Fatalf("origin %v outside [%v, %v)", o, from, to)
			}
		}
		// Lead and origin filters together; the next link keeps them.
		_, body = f.get(t, seriesPath(driftKey, driftModel, "origin_from", from.Format(time.RFC3339), "origin_to", to.Format(time.RFC3339), "leads", "5-6"))
		if rows := pairRows(t, body); len(rows) != 4 {
			t.Errorf("two origins, leads 5-6: %d rows, want 4", len(rows))
		}
		_, body = f.get(t, seriesPath(driftKey, driftModel, "leads", "7", "target_from", f.last.Format("2006-01-02T15:04")))
		if rows := pairRows(t, body); len(rows) != 1 || rows[0].target != printed(f.last.Add(7*time.Hour)) {
			t.Errorf("lead 7 targets from the last origin: %v", rows)
		}
		_, body = f.get(t, seriesPath(driftKey, driftModel, "leads", "1-2,5", "origin_from", from.Format(time.RFC3339)))
		if next := nextLink(body); next != "" {
			t.Errorf("fewer than 50 pairs but a next link %q", next)
		}
		status, body := f.get(t, seriesPath(driftKey, driftModel, "leads", "99"))
		if status != http.StatusBadRequest || !strings.Contains(body, `<div class="error">leads: &#34;99&#34; is outside 1-24</div>`) {
			t.Errorf("leads=99: status %d; want 400 with the reason", status)
		}
		status, body = f.get(t, seriesPath(driftKey, driftModel, "page", "not-a-token"))
		if status != http.StatusBadRequest || !strings.Contains(body, "page_token") {
			t.Errorf("a forged page token: status %d", status)
		}
	})

	t.Run("no baseline", func(t *testing.T) {
		t.Parallel()
		status, body := f.get(t, seriesPath(rawKey, rawModel))
		if status != http.StatusOK {
			t.Fatalf("status %d", status)
		}
		inert(t, body)
		if !strings.Contains(body, "No baseline") {
			t.Error("the page does not say there is no baseline")
		}
		if strings.Contains(body, `<path class="band"`) || strings.Contains(body, `<path class="expected"`) {
			t.Error("bands drawn without a baseline")
		}
		if !strings.Contains(body, `<path class="live" d="M`) {
			t.Error("live accuracy not drawn")
		}
		// The unit is user input too, printed in the settings and on the axes.
		if !strings.Contains(body, "&lt;script&gt;alert(1)&lt;/script&gt;") {
			t.Error("the unit does not appear escaped")
		}
	})

	t.Run("no drift states", func(t *testing.T) {
		t.Parallel()
		status, body := f.get(t, seriesPath(waitKey, driftModel))
		if status != http.StatusOK {
			t.Fatalf("status %d", status)
		}
		if !strings.Contains(body, "No drift states yet") || !strings.Contains(body, "not evaluated yet") {
			t.Error("the page does not say there are no drift states")
		}
		if !strings.Contains(body, `<path class="band" d="M`) {
			t.Error("the baseline band is not drawn")
		}
		if !strings.Contains(body, `<p id="events" class="muted">No drift events`) {
			t.Error("the page does not say there are no events")
		}
	})

	t.Run("baseline only", func(t *testing.T) {
		t.Parallel()
		status, body := f.get(t, seriesPath(waitKey, candidateModel))
		if status != http.StatusOK {
			t.Fatalf("status %d", status)
		}
		if !strings.Contains(body, "No forecasts of this model have arrived yet.") || !strings.Contains(body, `<path class="band" d="M`) {
			t.Error("a model with a baseline but no forecasts: want the band and a word that no forecasts came")
		}
		if strings.Contains(body, `<svg id="origin-chart"`) || strings.Contains(body, `<path class="live"`) {
			t.Error("live values drawn without forecasts")
		}
	})

	t.Run("not found and bad requests", func(t *testing.T) {
		t.Parallel()
		for _, c := range []struct {
			path   string
			status int
			want   string
		}{
			{seriesPath("no/such", driftModel), 404, "There is no series &#34;no/such&#34;."},
			{seriesPath(driftKey, "nope"), 404, "has no forecasts and no baseline of model &#34;nope&#34;"},
			{"series?series=" + url.QueryEscape(driftKey), 400, "Choose a series and a model"},
			{"nothing/here", 404, "Page not found"},
			{seriesPath(driftKey, driftModel, "lead", "0"), 400, "is not one of 1-24"},
		} {
			status, body := f.get(t, c.path)
			if status != c.status || !strings.Contains(body, c.want) {
				t.Errorf("GET %s: status %d, want %d with %q", c.path, status, c.status, c.want)
			}
		}
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		req, _ := http.NewRequestWithContext(ctx, http.MethodPost, f.srv.URL+"/", strings.NewReader("x"))
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if resp.StatusCode != http.StatusMethodNotAllowed || resp.Header.Get("Allow") != "GET, HEAD" {
			t.Errorf("POST /: %d, Allow %q", resp.StatusCode, resp.Header.Get("Allow"))
		}
	})

	t.Run("input is rendered inert", func(t *testing.T) {
		t.Parallel()
		for _, c := range []struct {
			path      string
			reflected bool // the page quotes the input back
		}{
			{seriesPath(evil, driftModel), true},
			{seriesPath(driftKey, evil), true},
			{seriesPath(driftKey, driftModel, "lead", evil), true},
			{seriesPath(driftKey, driftModel, "leads", evil, "origin_from", evil), true},
			{seriesPath(driftKey, driftModel, "target_to", `"><script>alert(1)</script>`), true},
			{"series?series=" + evil + "&model=" + evil, true}, // not even query-escaped
			{evil, false},
		} {
			_, body := f.get(t, c.path)
			inert(t, body)
			if c.reflected && !strings.Contains(body, "&lt;script&gt;alert(1)&lt;/script&gt;") {
				t.Errorf("GET %s: the input is not quoted back escaped", c.path)
			}
		}
		// The pages forbid scripts outright, as a second line.
		ctx, cancel := context.WithTimeout(context.Background(), 10*time.Second)
		defer cancel()
		req, _ := http.NewRequestWithContext(ctx, http.MethodGet, f.srv.URL+"/", nil)
		resp, err := http.DefaultClient.Do(req)
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		if csp := resp.Header.Get("Content-Security-Policy"); !strings.Contains(csp, "default-src 'none'") || strings.Contains(csp, "script-src") {
			t.Errorf("Content-Security-Policy %q", csp)
		}
	})
}

// fmtNum is how the pages print a metric value: four significant digits
// and a true minus sign.
func fmtNum(x float64) string {
	d := 3 - int(math.Floor(math.Log10(math.Abs(x))))
	s := strconv.FormatFloat(x, 'f', max(0, min(d, 6)), 64)
	return strings.Replace(s, "-", "−", 1)
}

func metricName(m scoring.Metric) string { return strings.ToUpper(string(m)) }
