package web_test

import (
	"context"
	"io"
	"math"
	"math/rand/v2"
	"net/http"
	"net/http/httptest"
	"os"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server/drift"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
	"github.com/aftercast/aftercast/server/web"
)

func TestMain(m *testing.M) { os.Exit(storetest.Main(m)) }

// The scenario's series and models. The odd model name is valid (keys and
// models are [A-Za-z0-9_.:/-]) and must come through links and pages intact.
const (
	driftKey   = "north/heat" // degrades on decision leads 13-24, improves on 1-3
	driftModel = "gbm-v3"
	calmKey    = "south/cool" // in control; its time zone is America/New_York
	calmModel  = "ets:v1/a.b-c"
	thinKey    = "north/thin" // a backtest too short for a band: insufficient_baseline
	rawKey     = "east/wind"  // forecasts and actuals, no baseline
	rawModel   = "naive"
	waitKey    = "west/solar" // a baseline, but drift not evaluated yet
	emptyKey   = "empty/series"
	// A model with a backtest on waitKey but no production forecasts.
	candidateModel = "candidate"
)

// fixture is a store holding the scenario and a test server over the
// pages.
type fixture struct {
	st  *store.Store
	srv *httptest.Server
	// last is the newest production origin.
	last time.Time
}

// newFixture builds the scenario: hourly series with daily origins, a
// 365-origin backtest per baselined series (100 for thinKey) whose error
// spread grows with the lead, and up to 150 production origins ending
// yesterday, pushed in chunks, with the evaluator drained after each as
// the service would.
func newFixture(t *testing.T) *fixture {
	t.Helper()
	st := storetest.Store(t)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	today := time.Now().UTC().Truncate(24 * time.Hour)
	const prod = 150
	first := today.AddDate(0, 0, -prod)
	f := &fixture{st: st, last: first.AddDate(0, 0, prod-1)}
	// The evaluator is drained after each chunk of the series whose drift
	// is judged; the others keep their marks pending.
	ev := drift.New(st, drift.Config{Logger: storetest.Logger(t)})

	for _, se := range []store.Series{
		{Key: driftKey, Step: "1h", Horizon: 24, Season: 24, Unit: "MW", DecisionLeads: []int{13, 14, 15, 16, 17, 18, 19, 20, 21, 22, 23, 24}},
		{Key: calmKey, Step: "1h", Horizon: 24, Unit: "MW", TimeZone: "America/New_York"},
		{Key: thinKey, Step: "1h", Horizon: 6, Unit: "MW"},
		{Key: rawKey, Step: "1h", Horizon: 6, Unit: "m/s" + evil},
		{Key: waitKey, Step: "1h", Horizon: 6, Unit: "kW"},
		{Key: emptyKey, Step: "1d", Horizon: 7, TimeZone: "Europe/Copenhagen"},
	} {
		if _, _, err := st.CreateSeries(ctx, se); err != nil {
			t.Fatal(err)
		}
	}
	level := func(tg time.Time) float64 {
		day := float64(tg.Unix()) / 86400
		return 100 + 20*math.Sin(2*math.Pi*float64(tg.Hour())/24) + 8*math.Sin(2*math.Pi*day/45) + 3*math.Sin(2*math.Pi*day/7)
	}
	spread := func(h int) float64 { return 1 + 0.06*float64(h) }

	type plan struct {
		key, model string
		horizon    int
		seed       uint64
		baseline   int // backtest origins; 0: none
		prod       int
		evaluate   bool
		change     func(k, h int, e float64) float64 // production origin k, lead h
	}
	plans := []plan{
		{driftKey, driftModel, 24, 1, 365, prod, true, func(k, h int, e float64) float64 {
			switch {
			case k >= 100 && h >= 13:
				return 1.9 * e
			case k >= 100 && h <= 3:
				return 0.4 * e
			}
			return e
		}},
		{calmKey, calmModel, 24, 2, 365, prod, true, nil},
		{thinKey, driftModel, 6, 6, 100, 40, true, nil},
		// Not evaluated: these come after the last drain.
		{rawKey, rawModel, 6, 3, 0, 40, false, nil},
		{waitKey, driftModel, 6, 4, 365, 40, false, nil},
		{waitKey, candidateModel, 6, 5, 365, 0, false, nil},
	}
	for _, p := range plans {
		r := rand.New(rand.NewPCG(p.seed, 7))
		if p.baseline > 0 {
			var rows []store.BacktestRow
			for k := range p.baseline {
				o := first.AddDate(0, 0, k-p.baseline)
				for h := 1; h <= p.horizon; h++ {
					tg := o.Add(time.Duration(h) * time.Hour)
					y := level(tg)
					rows = append(rows, store.BacktestRow{Series: p.key, Origin: o, Target: tg, Actual: y, Forecast: y - spread(h)*r.NormFloat64()})
				}
			}
			if _, err := st.ImportBaseline(ctx, p.model, rows, nil); err != nil {
				t.Fatal(err)
			}
		}
		const chunks = 3
		start := prod - p.prod
		for c := range chunks {
			if p.prod == 0 {
				break
			}
			var vs []store.ForecastVector
			var as []store.Actual
			for k := start + c*p.prod/chunks; k < start+(c+1)*p.prod/chunks; k++ {
				o := first.AddDate(0, 0, k)
				vals := make([]float64, p.horizon)
				for h := 1; h <= p.horizon; h++ {
					tg := o.Add(time.Duration(h) * time.Hour)
					y := level(tg)
					e := spread(h) * r.NormFloat64()
					if p.change != nil {
						e = p.change(k, h, e)
					}
					vals[h-1] = y - e
					as = append(as, store.Actual{Series: p.key, Time: tg, Value: y})
				}
				vs = append(vs, store.ForecastVector{Series: p.key, Model: p.model, Origin: o, Values: vals})
			}
			if _, err := st.WriteForecasts(ctx, vs, 0); err != nil {
				t.Fatal(err)
			}
			if _, err := st.WriteActuals(ctx, as, 0); err != nil {
				t.Fatal(err)
			}
			if p.evaluate {
				if err := ev.Drain(ctx); err != nil {
					t.Fatal(err)
				}
			}
		}
	}
	f.srv = httptest.NewServer(web.New(st, ev, storetest.Logger(t)))
	t.Cleanup(f.srv.Close)
	return f
}

// get fetches a page of the fixture's server: path is relative to its
// root, such as "series?series=…".
func (f *fixture) get(t *testing.T, path string) (int, string) {
	t.Helper()
	return fetch(t, f.srv.URL+"/"+path)
}

func fetch(t *testing.T, url string) (int, string) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
	if err != nil {
		t.Fatal(err)
	}
	resp, err := http.DefaultClient.Do(req)
	if err != nil {
		t.Fatal(err)
	}
	defer resp.Body.Close()
	b, err := io.ReadAll(resp.Body)
	if err != nil {
		t.Fatal(err)
	}
	return resp.StatusCode, string(b)
}
