package drift_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server/drift"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// benchSeries creates n daily series with horizon h, a backtest of 200
// origins each (imported in one call), and days of production forecasts
// and actuals (iid errors), judged by a drain; it returns the store.
func benchSeries(b *testing.B, n, h, days int) *store.Store {
	b.Helper()
	ctx := context.Background()
	st := storetest.Store(b)
	r := rand.New(rand.NewPCG(9, 9))
	var rows []store.BacktestRow
	for i := range n {
		key := fmt.Sprintf("b%04d", i)
		if _, _, err := st.CreateSeries(ctx, store.Series{Key: key, Step: "1d", Horizon: h}); err != nil {
			b.Fatal(err)
		}
		for k := -200; k < 0; k++ {
			o := driftT0.AddDate(0, 0, k)
			for l := 1; l <= h; l++ {
				rows = append(rows, store.BacktestRow{Series: key, Origin: o, Target: o.AddDate(0, 0, l), Actual: 100, Forecast: 100 - r.NormFloat64()})
			}
		}
	}
	if _, err := st.ImportBaseline(ctx, "m", rows, nil); err != nil {
		b.Fatal(err)
	}
	pushDaily(b, st, r, n, h, 0, days)
	if err := drift.New(st, drift.Config{}).Drain(ctx); err != nil {
		b.Fatal(err)
	}
	return st
}

// pushDaily writes, for each day k of [from, from+days) and every series,
// the forecast of origin k and the actual of day k, which completes lead h
// of origin k − h for every h, in batches of 5 000.
func pushDaily(b *testing.B, st *store.Store, r *rand.Rand, n, h, from, days int) {
	b.Helper()
	ctx := context.Background()
	var vs []store.ForecastVector
	var as []store.Actual
	for i := range n {
		key := fmt.Sprintf("b%04d", i)
		for k := from; k < from+days; k++ {
			o := driftT0.AddDate(0, 0, k)
			vals := make([]float64, h)
			for l := range vals {
				vals[l] = 100 - r.NormFloat64()
			}
			vs = append(vs, store.ForecastVector{Series: key, Model: "m", Origin: o, Values: vals})
			as = append(as, store.Actual{Series: key, Time: o, Value: 100})
		}
	}
	for lo := 0; lo < len(vs); lo += 5000 {
		if _, err := st.WriteForecasts(ctx, vs[lo:min(lo+5000, len(vs))], 0); err != nil {
			b.Fatal(err)
		}
	}
	for lo := 0; lo < len(as); lo += 5000 {
		if _, err := st.WriteActuals(ctx, as[lo:min(lo+5000, len(as))], 0); err != nil {
			b.Fatal(err)
		}
	}
}

// BenchmarkIncrementalOrigin1000Series: 1 000 daily series, H = 7, with 60
// judged production days each; one new day (an origin's forecast and the
// day's actual, which scores a lead of each of the last 7 origins) arrives
// for every series, and the evaluator judges it. Reports the wall time of
// the drain and evaluations per series.
func BenchmarkIncrementalOrigin1000Series(b *testing.B) {
	const n, h, days = 1000, 7, 60
	st := benchSeries(b, n, h, days)
	ev := drift.New(st, drift.Config{})
	r := rand.New(rand.NewPCG(10, 10))
	ctx := context.Background()
	// A day first, so that the evaluator has its prepared baselines cached,
	// as a running service has.
	pushDaily(b, st, r, n, h, days, 1)
	if err := ev.Drain(ctx); err != nil {
		b.Fatal(err)
	}
	var wall time.Duration
	k := days + 1
	b.ResetTimer()
	for b.Loop() {
		b.StopTimer()
		pushDaily(b, st, r, n, h, k, 1)
		k++
		before := ev.Evaluations()
		b.StartTimer()
		start := time.Now()
		if err := ev.Drain(ctx); err != nil {
			b.Fatal(err)
		}
		wall = time.Since(start)
		b.ReportMetric(float64(ev.Evaluations()-before)/n, "evaluations/series")
	}
	b.ReportMetric(wall.Seconds(), "s/drain")
	b.ReportMetric(float64(n)/wall.Seconds(), "series/s")
}

// BenchmarkRevisionTenOriginsBack: one hourly series, H = 48, a year of
// judged production (8 760 origins); an actual 10 origins back is revised
// and the evaluator re-judges. It must replay from the checkpoint before
// the change — O(10 + n) origins — not the year. Reports the origins
// replayed and the wall time of the drain.
func BenchmarkRevisionTenOriginsBack(b *testing.B) {
	ctx := context.Background()
	st := storetest.Store(b)
	const h, origins = 48, 8760
	if _, _, err := st.CreateSeries(ctx, store.Series{Key: "y", Step: "1h", Horizon: h}); err != nil {
		b.Fatal(err)
	}
	r := rand.New(rand.NewPCG(11, 11))
	var rows []store.BacktestRow
	for k := -400; k < 0; k++ {
		o := driftT0.Add(time.Duration(k) * time.Hour)
		for l := 1; l <= h; l++ {
			rows = append(rows, store.BacktestRow{Series: "y", Origin: o, Target: o.Add(time.Duration(l) * time.Hour), Actual: 100, Forecast: 100 - r.NormFloat64()})
		}
	}
	if _, err := st.ImportBaseline(ctx, "m", rows, nil); err != nil {
		b.Fatal(err)
	}
	var vs []store.ForecastVector
	var as []store.Actual
	for k := range origins {
		o := driftT0.Add(time.Duration(k) * time.Hour)
		vals := make([]float64, h)
		for l := range vals {
			vals[l] = 100 - r.NormFloat64()
		}
		vs = append(vs, store.ForecastVector{Series: "y", Model: "m", Origin: o, Values: vals})
		as = append(as, store.Actual{Series: "y", Time: o.Add(time.Hour), Value: 100})
	}
	for lo := 0; lo < len(vs); lo += 1000 {
		if _, err := st.WriteForecasts(ctx, vs[lo:min(lo+1000, len(vs))], 0); err != nil {
			b.Fatal(err)
		}
	}
	for lo := 0; lo < len(as); lo += 5000 {
		if _, err := st.WriteActuals(ctx, as[lo:min(lo+5000, len(as))], 0); err != nil {
			b.Fatal(err)
		}
	}
	ev := drift.New(st, drift.Config{})
	start := time.Now()
	if err := ev.Drain(ctx); err != nil {
		b.Fatal(err)
	}
	full, fullEvals := time.Since(start), ev.Evaluations()
	// The newest actual is that of origin 8759's lead 1; origin 8749's
	// lead 1 is 10 origins back.
	target := driftT0.Add(time.Duration(origins-10) * time.Hour)
	var wall time.Duration
	var evals int64
	b.ResetTimer()
	for i := 0; b.Loop(); i++ {
		b.StopTimer()
		if _, err := st.WriteActuals(ctx, []store.Actual{{Series: "y", Time: target, Value: 100 + float64(i%7+1)}}, 0); err != nil {
			b.Fatal(err)
		}
		before := ev.Evaluations()
		b.StartTimer()
		t := time.Now()
		if err := ev.Drain(ctx); err != nil {
			b.Fatal(err)
		}
		wall, evals = time.Since(t), ev.Evaluations()-before
	}
	b.ReportMetric(float64(evals)/(h+1), "origins-replayed")
	b.ReportMetric(wall.Seconds()*1000, "ms/revision")
	b.Logf("first judgement of the year: %d evaluations (%d origins × %d) in %v; a revision 10 origins back: %d evaluations in %v",
		fullEvals, fullEvals/(h+1), h+1, full.Round(time.Millisecond), evals, wall.Round(time.Microsecond))
}
