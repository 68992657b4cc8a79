package drift_test

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"os"
	"testing"
	"time"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/drift"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

func TestMain(m *testing.M) { os.Exit(storetest.Main(m)) }

// scenario is a synthetic series: iid N(0, 1) errors at every (origin,
// lead), a backtest from the same process, then production origins with an
// optional change from origin changeAt on.
type scenario struct {
	seed     uint64
	leads    int
	backtest int
	prod     int
	changeAt int
	change   func(e float64) float64
}

var driftT0 = time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)

func origin(k int) time.Time { return driftT0.Add(time.Duration(k) * 24 * time.Hour) }

func level(t time.Time) float64 { return 100 + 10*math.Sin(float64(t.Unix())/7200) }

// data is the scenario's backtest rows and production forecasts and
// actuals, per production origin.
func (sc scenario) data(key string) ([]store.BacktestRow, []store.ForecastVector, [][]store.Actual) {
	r := rand.New(rand.NewPCG(sc.seed, 42))
	var rows []store.BacktestRow
	for k := range sc.backtest {
		o := origin(k)
		for h := 1; h <= sc.leads; h++ {
			tg := o.Add(time.Duration(h) * time.Hour)
			y := level(tg)
			rows = append(rows, store.BacktestRow{Series: key, Origin: o, Target: tg, Actual: y, Forecast: y - r.NormFloat64()})
		}
	}
	vs := make([]store.ForecastVector, sc.prod)
	as := make([][]store.Actual, sc.prod)
	for k := range sc.prod {
		o := origin(sc.backtest + k)
		vals := make([]float64, sc.leads)
		for h := 1; h <= sc.leads; h++ {
			tg := o.Add(time.Duration(h) * time.Hour)
			y := level(tg)
			e := r.NormFloat64()
			if sc.change != nil && k >= sc.changeAt {
				e = sc.change(e)
			}
			vals[h-1] = y - e
			as[k] = append(as[k], store.Actual{Series: key, Time: tg, Value: y})
		}
		vs[k] = store.ForecastVector{Series: key, Model: "m", Origin: o, Values: vals}
	}
	return rows, vs, as
}

// run creates the series, imports the backtest, pushes production in
// chunks, each drained by an evaluator (a fresh one, as after a restart,
// from chunk restartAfter on), and returns the events.
func (sc scenario) run(t *testing.T, ctx context.Context, st *store.Store, key string, restartAfter int) []store.DriftEvent {
	t.Helper()
	if _, _, err := st.CreateSeries(ctx, store.Series{Key: key, Step: "1h", Horizon: sc.leads}); err != nil {
		t.Fatal(err)
	}
	rows, vs, as := sc.data(key)
	if _, err := st.ImportBaseline(ctx, "m", rows, nil); err != nil {
		t.Fatal(err)
	}
	ev := drift.New(st, drift.Config{})
	const chunks = 4
	for c := range chunks {
		if restartAfter > 0 && c == restartAfter {
			ev = drift.New(store.New(st.Pool(), store.Limits{}), drift.Config{})
		}
		lo, hi := c*sc.prod/chunks, (c+1)*sc.prod/chunks
		if _, err := st.WriteForecasts(ctx, vs[lo:hi], 0); err != nil {
			t.Fatal(err)
		}
		var batch []store.Actual
		for _, a := range as[lo:hi] {
			batch = append(batch, a...)
		}
		if _, err := st.WriteActuals(ctx, batch, 0); err != nil {
			t.Fatal(err)
		}
		if err := ev.Drain(ctx); err != nil {
			t.Fatal(err)
		}
	}
	evs, err := st.DriftEvents(ctx, store.EventFilter{Series: key})
	if err != nil {
		t.Fatal(err)
	}
	return evs
}

// firstSeriesDegraded is the production origin index of the first
// series-level change to degraded at or after from, -1 when none.
func firstSeriesDegraded(evs []store.DriftEvent, backtest, from int) (int, scoring.Metric) {
	for _, ev := range evs {
		k := int(ev.Origin.Sub(driftT0)/(24*time.Hour)) - backtest
		if ev.Lead == 0 && ev.State == scoring.StateDegraded && k >= from {
			return k, ev.Metric
		}
	}
	return -1, ""
}

func ctxT(t *testing.T, d time.Duration) context.Context {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), d)
	t.Cleanup(cancel)
	return ctx
}

// method.md §5–6 end to end on PostgreSQL, six decision leads pooled: no
// series-level alarm over 120 healthy origins in at least 9 of 10 seeds; a
// ×1.5 error-scale step at origin 60 caught within 25 origins in at least
// 9 of 10; a +1 sd bias step raises a series-level event on ME in at
// least 9 of 10.
func TestDriftEndToEnd(t *testing.T) {
	t.Parallel()
	st := storetest.Store(t)
	ctx := ctxT(t, 5*time.Minute)
	const seeds = 10
	var quiet, caught, bias int
	var delays []int
	for seed := range uint64(seeds) {
		base := scenario{seed: seed, leads: 6, backtest: 365, prod: 120, changeAt: 60}
		if k, _ := firstSeriesDegraded(base.run(t, ctx, st, fmt.Sprintf("quiet-%d", seed), 0), base.backtest, 0); k < 0 {
			quiet++
		}
		sc := base
		sc.change = func(e float64) float64 { return 1.5 * e }
		if k, _ := firstSeriesDegraded(sc.run(t, ctx, st, fmt.Sprintf("scale-%d", seed), 0), sc.backtest, sc.changeAt); k >= 0 && k-sc.changeAt <= 25 {
			caught++
			delays = append(delays, k-sc.changeAt)
		}
		sc.change = func(e float64) float64 { return e + 1 }
		for _, ev := range sc.run(t, ctx, st, fmt.Sprintf("bias-%d", seed), 0) {
			k := int(ev.Origin.Sub(driftT0)/(24*time.Hour)) - sc.backtest
			if ev.Lead == 0 && ev.State == scoring.StateDegraded && ev.Metric == scoring.MetricME && k >= sc.changeAt {
				bias++
				break
			}
		}
	}
	t.Logf("no series-level alarm in %d/10 in-control runs; ×1.5 caught within 25 origins in %d/10 (delays %v); +1 sd bias raised an ME event in %d/10",
		quiet, caught, delays, bias)
	if quiet < 9 {
		t.Errorf("in-control: no alarm in %d of 10 seeds, want ≥ 9", quiet)
	}
	if caught < 9 {
		t.Errorf("×1.5 at origin 60: caught within 25 origins in %d of 10 seeds, want ≥ 9", caught)
	}
	if bias < 9 {
		t.Errorf("+1 sd bias: an ME event in %d of 10 seeds, want ≥ 9", bias)
	}
}

// A restart (a fresh store and evaluator, empty caches, state read back
// from PostgreSQL) gives exactly the events of an uninterrupted run, and
// the stored states are what a replay of the stored data gives.
func TestDriftStateSurvivesRestart(t *testing.T) {
	t.Parallel()
	st := storetest.Store(t)
	ctx := ctxT(t, 2*time.Minute)
	sc := scenario{seed: 3, leads: 4, backtest: 365, prod: 120, changeAt: 50, change: func(e float64) float64 { return 2 * e }}
	straight := sc.run(t, ctx, st, "straight", 0)
	restarted := sc.run(t, ctx, st, "restarted", 2)
	if len(straight) == 0 {
		t.Fatal("no events at all: the scenario should degrade")
	}
	if len(straight) != len(restarted) {
		t.Fatalf("%d events straight, %d with a restart", len(straight), len(restarted))
	}
	for i := range straight {
		a, b := straight[i], restarted[i]
		if a.Lead != b.Lead || !a.Origin.Equal(b.Origin) || a.State != b.State || a.Previous != b.Previous || a.Metric != b.Metric ||
			a.Cause != b.Cause || a.WindowN != b.WindowN || !(a.Value == b.Value || math.IsNaN(a.Value) && math.IsNaN(b.Value)) {
			t.Errorf("event %d differs:\n straight  %+v\n restarted %+v", i, a, b)
		}
	}
	sts, err := st.DriftStates(ctx, "straight", "m")
	if err != nil || len(sts) != sc.leads+1 || sts[0].Lead != 0 {
		t.Fatalf("states %+v %v", sts, err)
	}
	s0 := sts[0]
	if s0.State != scoring.StateDegraded || s0.Snapshot.WindowN != scoring.DriftWindow || s0.Snapshot.MAEAlarmLimit == nil ||
		s0.Onset.Before(origin(sc.backtest+sc.changeAt)) || s0.Snapshot.OriginsSinceOnset < 1 {
		t.Errorf("series state %+v", s0)
	}
	ev := drift.New(st, drift.Config{})
	history, version, err := ev.History(ctx, "straight", "m")
	if err != nil || version != 1 {
		t.Fatalf("history: %v (version %d)", err, version)
	}
	var lastSeries scoring.Change
	for _, c := range history {
		if c.Lead == 0 {
			lastSeries = c
		}
	}
	if lastSeries.To != s0.State || !lastSeries.Origin.Equal(s0.Onset) {
		t.Errorf("replayed history ends %v at %v; the stored series state is %s since %v", lastSeries.To, lastSeries.Origin, s0.State, s0.Onset)
	}
	// Events come back in sequence order, cause data (nothing was revised).
	for i, e := range straight {
		if i > 0 && e.Seq <= straight[i-1].Seq || e.Cause != scoring.CauseData && (i != 0 || e.Cause != scoring.CauseBaseline) {
			t.Errorf("event %d: seq %d cause %s", i, e.Seq, e.Cause)
		}
	}
	// With no mark left, draining again changes nothing.
	if err := ev.Drain(ctx); err != nil {
		t.Fatal(err)
	}
	after, _ := st.DriftEvents(ctx, store.EventFilter{Series: "straight"})
	if len(after) != len(straight) {
		t.Errorf("an idle drain announced %d events", len(after)-len(straight))
	}
}

// A write is acknowledged with its mark committed; an evaluator that dies
// before committing its judgement (a claim given up) leaves the marks, and
// the next evaluator judges them: no acknowledged write goes unjudged.
func TestMarksOutliveAFailedEvaluation(t *testing.T) {
	t.Parallel()
	st := storetest.Store(t)
	ctx := ctxT(t, 2*time.Minute)
	sc := scenario{seed: 5, leads: 3, backtest: 365, prod: 20}
	if _, _, err := st.CreateSeries(ctx, store.Series{Key: "crash", Step: "1h", Horizon: sc.leads}); err != nil {
		t.Fatal(err)
	}
	rows, vs, as := sc.data("crash")
	if _, err := st.ImportBaseline(ctx, "m", rows, nil); err != nil {
		t.Fatal(err)
	}
	if _, err := st.WriteForecasts(ctx, vs, 0); err != nil {
		t.Fatal(err)
	}
	var batch []store.Actual
	for _, a := range as {
		batch = append(batch, a...)
	}
	if _, err := st.WriteActuals(ctx, batch, 0); err != nil {
		t.Fatal(err)
	}
	pending, _, err := st.SeriesBacklog(ctx, "crash")
	if err != nil || pending != 2 { // the baseline's and the actuals'
		t.Fatalf("after the writes: %d marks (%v), want 2", pending, err)
	}
	c, err := st.ClaimDrift(ctx, 10)
	if err != nil || c == nil {
		t.Fatalf("claim: %v %v", c, err)
	}
	c.Release(ctx) // the evaluator died before committing
	if n, _, _ := st.SeriesBacklog(ctx, "crash"); n != 2 {
		t.Fatalf("a claim given up removed marks: %d left", n)
	}
	if sts, _ := st.DriftStates(ctx, "crash", "m"); len(sts) != 0 {
		t.Fatalf("a claim given up stored %d states", len(sts))
	}
	if err := drift.New(st, drift.Config{}).Drain(ctx); err != nil {
		t.Fatal(err)
	}
	sts, err := st.DriftStates(ctx, "crash", "m")
	if err != nil || len(sts) != sc.leads+1 || !sts[0].LastOrigin.Equal(origin(sc.backtest+sc.prod-1)) {
		t.Fatalf("after the next evaluator: %d states (%v), series judged up to %v", len(sts), err, sts)
	}
	if n, _, _ := st.SeriesBacklog(ctx, "crash"); n != 0 {
		t.Errorf("%d marks left after the drain", n)
	}
}

// A checkpoint that cannot be decoded is a cache miss: the evaluator
// replays from the beginning and ends where an intact run ends.
func TestUndecodableCheckpointIsReplayedOver(t *testing.T) {
	t.Parallel()
	st := storetest.Store(t)
	ctx := ctxT(t, 2*time.Minute)
	sc := scenario{seed: 6, leads: 3, backtest: 365, prod: 120, changeAt: 60, change: func(e float64) float64 { return 2 * e }}
	intact := sc.run(t, ctx, st, "intact", 0)
	sc.prod = 90
	sc.run(t, ctx, st, "broken", 0)
	if _, err := st.Pool().Exec(ctx, `UPDATE drift_checkpoints SET checkpoint = '{"leads": "not a map"}'
		WHERE series_id = (SELECT id FROM series WHERE key = 'broken')`); err != nil {
		t.Fatal(err)
	}
	sc.prod = 120
	_, vs, as := sc.data("broken")
	if _, err := st.WriteForecasts(ctx, vs[90:], 0); err != nil {
		t.Fatal(err)
	}
	var batch []store.Actual
	for _, a := range as[90:] {
		batch = append(batch, a...)
	}
	if _, err := st.WriteActuals(ctx, batch, 0); err != nil {
		t.Fatal(err)
	}
	if err := drift.New(st, drift.Config{}).Drain(ctx); err != nil {
		t.Fatalf("a broken checkpoint stopped the evaluator: %v", err)
	}
	a, _ := st.DriftStates(ctx, "intact", "m")
	b, _ := st.DriftStates(ctx, "broken", "m")
	if len(a) != len(b) || len(intact) == 0 {
		t.Fatalf("%d states intact, %d broken", len(a), len(b))
	}
	for i := range a {
		if a[i].State != b[i].State || !a[i].Onset.Equal(b[i].Onset) || !a[i].LastOrigin.Equal(b[i].LastOrigin) || *a[i].Snapshot.MAE != *b[i].Snapshot.MAE {
			t.Errorf("lead %d: intact %s since %v, MAE %v; after a broken checkpoint %s since %v, MAE %v",
				a[i].Lead, a[i].State, a[i].Onset, *a[i].Snapshot.MAE, b[i].State, b[i].Onset, *b[i].Snapshot.MAE)
		}
	}
}
