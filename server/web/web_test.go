package web_test

import (
	"context"
	"html"
	"net/http"
	"net/url"
	"regexp"
	"slices"
	"strconv"
	"strings"
	"testing"
	"time"
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
		// The model name with : / . - survives the round trip through a link.
		if status, body := f.get(t, seriesPath(calmKey, calmModel)); status != http.StatusOK || !strings.Contains(body, "· "+calmModel+" ") {
			t.Errorf("series page of model %q: status %d", calmModel, status)
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
		for _, want := range []string{"series", `<span class="state degraded" data-state="degraded">`, "above 99% limit"} {
			if !strings.Contains(tbl, want) {
				t.Errorf("events lack %q", want)
			}
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
