package web_test

import (
	"context"
	"math"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"regexp"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/drift"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
	"github.com/aftercast/aftercast/server/web"
)

// The level-scaling scenario (method.md §4a; invented data): daily origins,
// two hourly leads, a year of backtest and 60 production origins starting
// at the top of the season. Forecasts follow the level 100·(1 + a·cos
// 2πk/365) and errors are 5·level/100·z, so the error scale grows with the
// level; from production origin 40 on the errors are 2.5 times as large,
// so every series ends degraded.
const (
	levelsModel  = "m"
	pendingModel = "pending"         // forecasts, not judged yet
	onlyModel    = "candidate"       // a backtest, no forecasts
	seasonKey    = "season/auto"     // a = 0.5, error scale auto: b̂ near 1
	steadyKey    = "steady/auto"     // a = 0, error scale auto: b̂ = 0
	absoluteKey  = "season/absolute" // a = 0.1, error scale absolute
)

// newLevelsFixture builds the scenario in a fresh database, drains the
// evaluator once (before the pending and candidate backtests are
// imported) and serves the pages over it.
func newLevelsFixture(t *testing.T) (*store.Store, *httptest.Server) {
	t.Helper()
	st := storetest.Store(t)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	ev := drift.New(st, drift.Config{Logger: storetest.Logger(t)})
	const leads, prod = 2, 60
	first := time.Now().UTC().Truncate(24*time.Hour).AddDate(0, 0, -prod)
	r := rand.New(rand.NewPCG(41, 42))
	backtest := func(key, model string, a float64) {
		var rows []store.BacktestRow
		for k := -365; k < 0; k++ {
			o := first.AddDate(0, 0, k)
			l := 100 * (1 + a*math.Cos(2*math.Pi*float64(k)/365))
			for h := 1; h <= leads; h++ {
				rows = append(rows, store.BacktestRow{Series: key, Origin: o, Target: o.Add(time.Duration(h) * time.Hour),
					Forecast: l, Actual: l + 5*l/100*r.NormFloat64()})
			}
		}
		if _, err := st.ImportBaseline(ctx, model, rows, nil); err != nil {
			t.Fatal(err)
		}
	}
	// live writes the production forecasts of every model, then the
	// actuals, so that no pair is late.
	live := func(key string, a float64, models ...string) {
		var vs []store.ForecastVector
		var as []store.Actual
		for k := range prod {
			o := first.AddDate(0, 0, k)
			l := 100 * (1 + a*math.Cos(2*math.Pi*float64(k)/365))
			grow := 1.0
			if k >= 40 {
				grow = 2.5
			}
			vals := make([]float64, leads)
			for h := 1; h <= leads; h++ {
				vals[h-1] = l
				as = append(as, store.Actual{Series: key, Time: o.Add(time.Duration(h) * time.Hour), Value: l + grow*5*l/100*r.NormFloat64()})
			}
			for _, m := range models {
				vs = append(vs, store.ForecastVector{Series: key, Model: m, Origin: o, Values: vals})
			}
		}
		if _, err := st.WriteForecasts(ctx, vs, 0); err != nil {
			t.Fatal(err)
		}
		if _, err := st.WriteActuals(ctx, as, 0); err != nil {
			t.Fatal(err)
		}
	}
	for _, c := range []struct {
		key  string
		a    float64
		mode scoring.ScaleMode
	}{{seasonKey, 0.5, scoring.ScaleAuto}, {steadyKey, 0, scoring.ScaleAuto}, {absoluteKey, 0.1, scoring.ScaleAbsolute}} {
		if _, _, err := st.CreateSeries(ctx, store.Series{Key: c.key, Step: "1h", Horizon: leads, Unit: "MW", ErrorScale: c.mode}); err != nil {
			t.Fatal(err)
		}
		backtest(c.key, levelsModel, c.a)
		models := []string{levelsModel}
		if c.key == seasonKey {
			models = append(models, pendingModel)
		}
		live(c.key, c.a, models...)
	}
	if err := ev.Drain(ctx); err != nil {
		t.Fatal(err)
	}
	// After the last drain, so not judged yet: the backtest of a model
	// with forecasts, which has no drift states then, and of one without.
	backtest(seasonKey, pendingModel, 0.5)
	backtest(seasonKey, onlyModel, 0.5)
	srv := httptest.NewServer(web.New(st, ev, storetest.Logger(t)))
	t.Cleanup(srv.Close)
	return st, srv
}

// section returns the part of body from the first occurrence of start to
// the next occurrence of end after it.
func section(t *testing.T, body, start, end string) string {
	t.Helper()
	i := strings.Index(body, start)
	if i < 0 {
		t.Fatalf("the page has no %q", start)
	}
	j := strings.Index(body[i:], end)
	if j < 0 {
		t.Fatalf("no %q after %q", end, start)
	}
	return body[i : i+j]
}

// leadCells reads the window MAE and the expectation of lead h from the
// lead table.
func leadCells(t *testing.T, body string, h int) (mae, expected float64) {
	t.Helper()
	tbl := section(t, body, `<table id="leads">`, "</table>")
	row := section(t, tbl, `#lead-history">`+strconv.Itoa(h)+`</a>`, "</tr>")
	m := regexp.MustCompile(`<td class="num">([^<]*)</td><td class="num">([^<]*)</td><td class="num">([^<]*)</td><td class="num nowrap">`).FindStringSubmatch(row)
	if m == nil {
		t.Fatalf("lead %d row: %s", h, row)
	}
	parse := func(s string) float64 {
		x, err := strconv.ParseFloat(strings.Replace(s, "−", "-", 1), 64)
		if err != nil {
			t.Fatalf("lead %d row: %q is not a number: %s", h, s, row)
		}
		return x
	}
	return parse(m[2]), parse(m[3])
}

// A level-scaled series says next to each expectation that it is the
// backtest's at these levels, with the plain backtest average and b̂, and
// labels the charts' expectation so; one without scaling (auto with b̂ = 0,
// or absolute) says none of it. The series' error scale mode is shown.
func TestLevelScaledExpectations(t *testing.T) {
	t.Parallel()
	st, srv := newLevelsFixture(t)
	get := func(t *testing.T, key, model string, extra ...string) string {
		t.Helper()
		status, body := fetch(t, srv.URL+"/"+seriesPath(key, model, extra...))
		if status != http.StatusOK {
			t.Fatalf("%s · %s: status %d", key, model, status)
		}
		inert(t, body)
		return body
	}
	levelWords := []string{"at these levels", "backtest average", "errors scale with level", "Backtest MAE", "at that window's levels"}

	t.Run("scaled", func(t *testing.T) {
		t.Parallel()
		s0 := statuses(t, st, seasonKey, levelsModel)[0]
		sn := s0.Snapshot
		if sn.LevelScale == nil || sn.BacktestMAE == nil || sn.MAEExpected == nil {
			t.Fatalf("the seasonal series' state is not level-scaled: %+v", sn)
		}
		if s0.State != scoring.StateDegraded {
			t.Fatalf("seasonal series %s, want degraded (errors ×2.5 for the last 20 origins)", s0.State)
		}
		body := get(t, seasonKey, levelsModel)
		if !regexp.MustCompile(`<li>error scale <b>auto \(errors scale with level, b̂ = (0\.\d+|1)\)</b></li>`).MatchString(body) {
			t.Errorf("the settings do not give the error scale auto with b̂: %s", section(t, body, `<ul class="settings">`, "</ul>"))
		}
		card := section(t, body, `<h2 id="series-state">`, "</section>")
		want := "<dt>MAE</dt><dd>" + fmtNum(*sn.MAE) + " (expected " + fmtNum(*sn.MAEExpected) + " at these levels, 95% band "
		if !strings.Contains(card, want) {
			t.Errorf("series state card lacks %q: %s", want, card)
		}
		if !regexp.MustCompile(regexp.QuoteMeta("; backtest average "+fmtNum(*sn.BacktestMAE)+"; errors scale with level, b̂ = ") + `(0\.\d+|1)\)</dd>`).MatchString(card) {
			t.Errorf("series state card lacks the backtest average %s and b̂: %s", fmtNum(*sn.BacktestMAE), card)
		}
		// Production starts at the top of the season: what the backtest
		// promises there is above its plain average.
		if *sn.MAEExpected <= *sn.BacktestMAE {
			t.Errorf("expected %v at the high season, backtest average %v: want the first larger", *sn.MAEExpected, *sn.BacktestMAE)
		}
		if !strings.Contains(card, "<dt>entered</dt><dd>on MAE: ") || !strings.Contains(card, " above the alarm limit ") ||
			!strings.Contains(card, "at that window&#39;s levels</dd>") {
			t.Errorf("the state entered does not say its limit was at that window's levels: %s", card)
		}
		for _, chart := range []string{"lead-chart", "origin-chart"} {
			fig := section(t, body, `<svg id="`+chart+`"`, "</figure>")
			if !strings.Contains(fig, "</svg>backtest expectation at these levels</li>") {
				t.Errorf("%s: the expectation is not labelled at these levels", chart)
			}
			if !strings.Contains(fig, "Errors scale with level on this series") {
				t.Errorf("%s: the description does not say errors scale with level", chart)
			}
		}
		tbl := section(t, body, `<table id="leads">`, "</table>")
		for _, want := range []string{`<th class="num">Expected at these levels</th>`, `<th class="num">Backtest MAE</th>`, `<th class="num">b̂</th>`} {
			if !strings.Contains(tbl, want) {
				t.Errorf("lead table lacks %q", want)
			}
		}
		st1 := statuses(t, st, seasonKey, levelsModel)[1]
		if st1.Snapshot.BacktestMAE == nil || !strings.Contains(tbl, `<td class="num">`+fmtNum(*st1.Snapshot.BacktestMAE)+`</td>`) {
			t.Errorf("lead table lacks lead 1's backtest MAE")
		}
		if !strings.Contains(body, "at that window&#39;s levels</span>") {
			t.Error("the events do not say their limits were at their window's levels")
		}
		baseline := section(t, body, `<h2 id="baseline">`, "</section>")
		for _, want := range []string{"<dt>error scale</dt><dd>auto: errors scale with level, b̂ = ", "the backtest&#39;s at that window&#39;s forecast levels",
			"it does not correct errors that change for other reasons"} {
			if !strings.Contains(baseline, want) {
				t.Errorf("baseline card lacks %q: %s", want, baseline)
			}
		}
	})

	t.Run("not scaled", func(t *testing.T) {
		t.Parallel()
		for _, c := range []struct{ key, mode string }{{steadyKey, "auto (b̂ = 0)"}, {absoluteKey, "absolute"}} {
			sn := statuses(t, st, c.key, levelsModel)[0].Snapshot
			if sn.LevelScale != nil || sn.MAEExpected == nil {
				t.Fatalf("%s: level scale %v, expected %v; want an unscaled judged window", c.key, sn.LevelScale, sn.MAEExpected)
			}
			body := get(t, c.key, levelsModel)
			if want := "<li>error scale <b>" + c.mode + "</b></li>"; !strings.Contains(body, want) {
				t.Errorf("%s: settings lack %q", c.key, want)
			}
			for _, w := range levelWords {
				if strings.Contains(strings.ReplaceAll(body, "&#39;", "'"), w) {
					t.Errorf("%s: an unscaled series says %q", c.key, w)
				}
			}
			card := section(t, body, `<h2 id="series-state">`, "</section>")
			if want := "<dt>MAE</dt><dd>" + fmtNum(*sn.MAE) + " (expected " + fmtNum(*sn.MAEExpected) + ", 95% band "; !strings.Contains(card, want) {
				t.Errorf("%s: series state card lacks %q: %s", c.key, want, card)
			}
			if !strings.Contains(card, " above the alarm limit ") {
				t.Errorf("%s: the state entered is not given: %s", c.key, card)
			}
			if !strings.Contains(section(t, body, `<svg id="lead-chart"`, "</figure>"), "</svg>backtest expectation</li>") {
				t.Errorf("%s: the lead chart's expectation is not labelled plain", c.key)
			}
		}
	})

	// Without drift states the lead chart draws the baseline for a full
	// window: at the forecast levels of each lead's live window, in units
	// beside its MAE, never the scaled band as it is (which would lie near
	// 0.05 against a MAE near 5).
	t.Run("no drift states", func(t *testing.T) {
		t.Parallel()
		body := get(t, seasonKey, pendingModel)
		if !strings.Contains(body, "No drift states yet") || !strings.Contains(body, "errors scale with level (b̂ = ") ||
			!strings.Contains(body, "so for leads 1-2 it is the expectation at the forecast levels of their live window") {
			t.Error("the page does not say the expectation is drawn at the live levels")
		}
		if !strings.Contains(section(t, body, `<svg id="lead-chart"`, "</figure>"), "</svg>backtest expectation at these levels</li>") {
			t.Error("the lead chart's expectation is not labelled at these levels")
		}
		for h := 1; h <= 2; h++ {
			mae, exp := leadCells(t, body, h)
			if !(exp > mae/2.5 && exp < mae*2.5) {
				t.Errorf("lead %d: window MAE %v beside an expectation of %v; want both in MW", h, mae, exp)
			}
		}
		if !strings.Contains(body, `<th class="num">Backtest MAE</th>`) {
			t.Error("the lead table does not give the backtest average")
		}

		body = get(t, seasonKey, onlyModel)
		if !strings.Contains(body, "Leads 1-2 have no live forecasts to set the level, so no expectation or band is drawn for them") {
			t.Error("a level-scaled baseline without forecasts: the page does not say why nothing is drawn")
		}
		if strings.Contains(body, `<path class="expected"`) || strings.Contains(body, `<path class="band"`) {
			t.Error("a level-scaled baseline drawn without a level to set it")
		}
		if !strings.Contains(body, `<th class="num">Backtest MAE</th>`) {
			t.Error("the lead table does not give the backtest average")
		}
	})
}
