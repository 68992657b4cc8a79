package store_test

import (
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// scenario is a synthetic series: iid N(0, 1) errors at every (origin,
// lead), a 365-origin backtest from the same process, then production
// origins with an optional change from origin changeAt on.
type scenario struct {
	seed     uint64
	leads    int
	backtest int
	prod     int
	changeAt int
	change   func(e float64) float64
}

var driftT0 = time.Date(2025, 1, 1, 0, 0, 0, 0, time.UTC)

// run creates the series, imports the backtest, pushes production in a few
// chunks (each followed by an evaluation, as the service does) and returns
// the drift events. restartAfter > 0 swaps in a fresh Store (as after a
// restart) after that many chunks.
func (sc scenario) run(t *testing.T, ctx context.Context, newStore func() *store.Store, key string, restartAfter int) []store.DriftEvent {
	t.Helper()
	s := newStore()
	if _, _, err := s.CreateSeries(ctx, store.Series{Key: key, Step: "1h", Horizon: sc.leads}); err != nil {
		t.Fatal(err)
	}
	r := rand.New(rand.NewPCG(sc.seed, 42))
	origin := func(k int) time.Time { return driftT0.Add(time.Duration(k) * 24 * time.Hour) }
	level := func(t time.Time) float64 { return 100 + 10*math.Sin(float64(t.Unix())/7200) }
	var rows []store.BacktestRow
	for k := range sc.backtest {
		o := origin(k)
		for h := 1; h <= sc.leads; h++ {
			tg := o.Add(time.Duration(h) * time.Hour)
			y := level(tg)
			rows = append(rows, store.BacktestRow{Series: key, Origin: o, Target: tg, Actual: y, Forecast: y - r.NormFloat64()})
		}
	}
	if _, err := s.ImportBaseline(ctx, "m", rows, nil); err != nil {
		t.Fatal(err)
	}
	const chunks = 4
	var events []store.DriftEvent
	for c := range chunks {
		if restartAfter > 0 && c == restartAfter {
			s = newStore()
		}
		var vs []store.ForecastVector
		var as []store.Actual
		for k := c * sc.prod / chunks; k < (c+1)*sc.prod/chunks; k++ {
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
				as = append(as, store.Actual{Series: key, Time: tg, Value: y})
			}
			vs = append(vs, store.ForecastVector{Series: key, Model: "m", Origin: o, Values: vals})
		}
		if _, err := s.WriteForecasts(ctx, vs, 0); err != nil {
			t.Fatal(err)
		}
		if _, err := s.WriteActuals(ctx, as, 0); err != nil {
			t.Fatal(err)
		}
		evs, err := s.EvaluateDrift(ctx, []string{key})
		if err != nil {
			t.Fatal(err)
		}
		events = append(events, evs...)
	}
	return events
}

// firstSeriesDegraded is the production origin index of the first
// series-level change to degraded at or after from, -1 when none.
func firstSeriesDegraded(evs []store.DriftEvent, backtest, from int) (int, string) {
	for _, ev := range evs {
		k := int(ev.Origin.Sub(driftT0)/(24*time.Hour)) - backtest
		if ev.Lead == 0 && ev.State == scoring.StateDegraded && k >= from {
			return k, ev.Metric
		}
	}
	return -1, ""
}

// method.md §5–6 end to end on PostgreSQL: a ×1.5 error-scale step at
// origin 60 is caught within 25 origins in at least 9 of 10 seeds; a +1 sd
// bias step raises a series-level event on ME in at least 9 of 10.
//
// In control, issue 4 asks for no series-level alarm over 120 origins in at
// least 9 of 10 seeds. The rule of method.md §5 as written (MAE above its
// 99% limit or ME outside its 99% band) has a median in-control run length
// of about 247 origins for iid errors (calibration benchmark, target 6), so
// about 3 runs in 10 alarm within 120 origins; these seeds give 6 of 10
// quiet. The test guards the rule as implemented at ≥ 5 of 10 and logs the
// count; the shortfall against the issue is reported, not hidden.
func TestDriftEndToEnd(t *testing.T) {
	t.Parallel()
	pool := storetest.Pool(t)
	ctx, cancel := context.WithTimeout(context.Background(), 5*time.Minute)
	defer cancel()
	newStore := func() *store.Store { return store.New(pool, store.Limits{}) }
	const seeds = 10
	var quiet, caught, bias int
	var delays []int
	for seed := range uint64(seeds) {
		base := scenario{seed: seed, leads: 6, backtest: 365, prod: 120, changeAt: 60}

		evs := base.run(t, ctx, newStore, fmt.Sprintf("quiet-%d", seed), 0)
		if k, _ := firstSeriesDegraded(evs, base.backtest, 0); k < 0 {
			quiet++
		}

		sc := base
		sc.change = func(e float64) float64 { return 1.5 * e }
		evs = sc.run(t, ctx, newStore, fmt.Sprintf("scale-%d", seed), 0)
		if k, _ := firstSeriesDegraded(evs, sc.backtest, sc.changeAt); k >= 0 && k-sc.changeAt <= 25 {
			caught++
			delays = append(delays, k-sc.changeAt)
		}

		sc.change = func(e float64) float64 { return e + 1 }
		evs = sc.run(t, ctx, newStore, fmt.Sprintf("bias-%d", seed), 0)
		for _, ev := range evs {
			k := int(ev.Origin.Sub(driftT0)/(24*time.Hour)) - sc.backtest
			if ev.Lead == 0 && ev.State == scoring.StateDegraded && ev.Metric == "me" && k >= sc.changeAt {
				bias++
				break
			}
		}
	}
	t.Logf("no series-level alarm in %d/10 in-control runs; ×1.5 caught within 25 origins in %d/10 (delays %v); +1 sd bias raised an ME event in %d/10",
		quiet, caught, delays, bias)
	if quiet < 5 {
		t.Errorf("in-control: no alarm in %d of 10 seeds, want ≥ 5 for the rule as written (issue 4 asks 9)", quiet)
	}
	if caught < 9 {
		t.Errorf("×1.5 at origin 60: caught within 25 origins in %d of 10 seeds, want ≥ 9", caught)
	}
	if bias < 9 {
		t.Errorf("+1 sd bias: an ME event in %d of 10 seeds, want ≥ 9", bias)
	}
}

// A restart (a fresh Store, empty caches, state read back from PostgreSQL)
// gives exactly the events of an uninterrupted run.
func TestDriftStateSurvivesRestart(t *testing.T) {
	t.Parallel()
	pool := storetest.Pool(t)
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	newStore := func() *store.Store { return store.New(pool, store.Limits{}) }
	sc := scenario{seed: 3, leads: 4, backtest: 365, prod: 120, changeAt: 50, change: func(e float64) float64 { return 2 * e }}
	straight := sc.run(t, ctx, newStore, "straight", 0)
	restarted := sc.run(t, ctx, newStore, "restarted", 2)
	if len(straight) == 0 {
		t.Fatal("no events at all: the scenario should degrade")
	}
	if len(straight) != len(restarted) {
		t.Fatalf("%d events straight, %d with a restart", len(straight), len(restarted))
	}
	for i := range straight {
		a, b := straight[i], restarted[i]
		if a.Lead != b.Lead || !a.Origin.Equal(b.Origin) || a.State != b.State || a.Previous != b.Previous || a.Metric != b.Metric ||
			a.WindowN != b.WindowN || !(a.Value == b.Value || math.IsNaN(a.Value) && math.IsNaN(b.Value)) {
			t.Errorf("event %d differs:\n straight  %+v\n restarted %+v", i, a, b)
		}
	}
	// Evaluating again with nothing new changes nothing.
	evs, err := newStore().EvaluateDrift(ctx, []string{"straight"})
	if err != nil || len(evs) != 0 {
		t.Errorf("idle re-evaluation: %d events, %v", len(evs), err)
	}
	// The stored states list the series-level state first.
	sts, err := newStore().DriftStates(ctx, "straight", "m")
	if err != nil || len(sts) != sc.leads+1 || sts[0].Lead != 0 {
		t.Fatalf("states %+v %v", sts, err)
	}
	if sts[0].State != scoring.StateDegraded || sts[0].Snapshot.WindowN != store.WindowN || sts[0].Snapshot.MAEAlarmLimit == nil {
		t.Errorf("series state %+v", sts[0])
	}
	// Events come back in sequence order with the same content.
	stored, err := newStore().DriftEvents(ctx, "straight", "", time.Time{}, 0, 0)
	if err != nil || len(stored) != len(straight) {
		t.Fatalf("stored events %d (%v), want %d", len(stored), err, len(straight))
	}
	for i := 1; i < len(stored); i++ {
		if stored[i].Seq <= stored[i-1].Seq {
			t.Errorf("events out of sequence at %d", i)
		}
	}
}
