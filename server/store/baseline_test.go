package store_test

import (
	"errors"
	"math"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

func backtest(series string, origins, leads int, cadence time.Duration) []store.BacktestRow {
	var rows []store.BacktestRow
	for k := range origins {
		o := t0.Add(time.Duration(k) * cadence)
		for h := 1; h <= leads; h++ {
			rows = append(rows, store.BacktestRow{Series: series, Origin: o, Target: o.Add(time.Duration(h) * time.Hour),
				Forecast: float64(k % 7), Actual: float64(k%5 + h)})
		}
	}
	return rows
}

func TestImportBaseline(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "a", "1h", 4)
	mustSeries(t, s, "b", "1h", 4)
	rows := append(backtest("a", 20, 4, 24*time.Hour), backtest("b", 10, 3, time.Hour)...)
	training := []store.TrainingActual{{Series: "a", Time: t0.Add(-2 * time.Hour), Value: 4}, {Series: "a", Time: t0.Add(-time.Hour), Value: 6},
		{Series: "a", Time: t0, Value: 5}, {Series: "a", Time: t0.Add(time.Hour), Value: 7}}
	vs, err := s.ImportBaseline(ctx, "m", rows, training)
	if err != nil {
		t.Fatal(err)
	}
	if len(vs) != 2 || vs[0].Series != "a" || vs[0].Version != 1 || !vs[0].Created || vs[0].CadenceSteps != 24 || vs[1].CadenceSteps != 1 {
		t.Fatalf("versions %+v", vs)
	}
	// Scale from the three training actuals up to the first origin: (2+1)/2.
	if vs[0].TrainingCount != 3 || vs[0].MASEScale != 1.5 || !math.IsNaN(vs[1].MASEScale) {
		t.Errorf("scales %v (%d used) and %v", vs[0].MASEScale, vs[0].TrainingCount, vs[1].MASEScale)
	}
	kinds := map[string]bool{}
	for _, w := range vs[1].Warnings {
		kinds[w.Kind] = true
	}
	if !kinds[store.WarnHorizon] || !kinds[store.WarnNoTraining] {
		t.Errorf("b warnings %+v, want horizon and no-training", vs[1].Warnings)
	}
	// The same upload again makes no new version.
	again, err := s.ImportBaseline(ctx, "m", rows, training)
	if err != nil || again[0].Created || again[0].Version != 1 {
		t.Fatalf("re-import: %+v %v", again, err)
	}
	// A changed upload for a makes version 2, active; version 1 stays readable.
	rows[0].Forecast++
	v2, err := s.ImportBaseline(ctx, "m", rows[:80], nil)
	if err != nil || v2[0].Version != 2 || !v2[0].Created {
		t.Fatalf("second version: %+v %v", v2, err)
	}
	b, err := s.GetBaseline(ctx, "a", "m", 0)
	if err != nil || b.Version != 2 || !b.Active || len(b.Leads) != 4 || len(b.Leads[0].Origins) != 20 {
		t.Fatalf("active baseline: %+v %v", b.BaselineVersion, err)
	}
	old, err := s.GetBaseline(ctx, "a", "m", 1)
	if err != nil || old.Active || old.Leads[0].Forecasts[0] != 0 {
		t.Fatalf("version 1: %+v %v", old.BaselineVersion, err)
	}
	list, err := s.ListBaselineVersions(ctx, "a", "")
	if err != nil || len(list) != 2 || list[0].Version != 2 || !list[0].Active || list[1].Active {
		t.Fatalf("list %+v %v", list, err)
	}
	if _, err := s.GetBaseline(ctx, "a", "other", 0); !errors.Is(err, store.ErrNotFound) {
		t.Errorf("unknown model: %v", err)
	}
	// Bad rows fail the whole import and name the rows.
	bad := backtest("a", 3, 2, time.Hour)
	bad[1].Target = bad[1].Target.Add(time.Minute)
	bad[2].Actual = math.Inf(1)
	bad = append(bad, bad[0], store.BacktestRow{Series: "zz", Origin: t0, Target: t0.Add(time.Hour)})
	_, err = s.ImportBaseline(ctx, "m", bad, nil)
	var inv *store.InvalidError
	if !errors.As(err, &inv) {
		t.Fatalf("bad import: %v", err)
	}
	fields := map[string]bool{}
	for _, v := range inv.Violations {
		fields[v.Field] = true
	}
	for _, f := range []string{"rows[1].target_time", "rows[2].actual", "rows[6]", "rows[7].series"} {
		if !fields[f] {
			t.Errorf("no violation for %s in %+v", f, inv.Violations)
		}
	}
	if list, _ := s.ListBaselineVersions(ctx, "a", "m"); len(list) != 2 {
		t.Errorf("a failed import stored something: %d versions", len(list))
	}
}

// Production that starts after the import is judged when the baseline is
// read: a backtest with daily origins against hourly production warns.
func TestShapeWarningsFollowProduction(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "c", "1h", 2)
	if _, err := s.ImportBaseline(ctx, "m", backtest("c", 10, 2, 24*time.Hour), nil); err != nil {
		t.Fatal(err)
	}
	kinds := func() map[string]bool {
		b, err := s.GetBaseline(ctx, "c", "m", 0)
		if err != nil {
			t.Fatal(err)
		}
		out := map[string]bool{}
		for _, w := range b.Warnings {
			out[w.Kind] = true
		}
		return out
	}
	if kinds()[store.WarnCadence] {
		t.Fatal("cadence warning before any production")
	}
	for k := range 5 {
		o := t0.Add(time.Duration(500+k) * time.Hour)
		if _, err := s.WriteForecasts(ctx, []store.ForecastVector{{Series: "c", Model: "m", Origin: o, Values: []float64{1, 2}}}, 0); err != nil {
			t.Fatal(err)
		}
	}
	if !kinds()[store.WarnCadence] {
		t.Error("hourly production against a daily backtest: no cadence warning")
	}
}

// A failed read of the scale is an error, not an unknown scale: MASE must
// not silently vanish when the database does.
func TestActiveScaleReportsDatabaseErrors(t *testing.T) {
	t.Parallel()
	pool := storetest.Pool(t)
	s := store.New(pool, store.Limits{})
	ctx := ctxT(t)
	mustSeries(t, s, "sc", "1h", 2) // cached by the store from here on
	if scale, err := s.ActiveScale(ctx, "sc", "m"); err != nil || !math.IsNaN(scale) {
		t.Fatalf("no baseline: %v %v, want NaN and no error", scale, err)
	}
	pool.Close()
	if scale, err := s.ActiveScale(ctx, "sc", "m"); err == nil {
		t.Errorf("closed pool: scale %v and no error", scale)
	}
}
