package store_test

import (
	"context"
	"errors"
	"fmt"
	"math"
	"os"
	"slices"
	"strings"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

func TestMain(m *testing.M) { os.Exit(storetest.Main(m)) }

var t0 = time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)

func ctxT(t *testing.T) context.Context {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	t.Cleanup(cancel)
	return ctx
}

func mustSeries(t *testing.T, s *store.Store, key, step string, horizon int) store.Series {
	t.Helper()
	se, _, err := s.CreateSeries(ctxT(t), store.Series{Key: key, Step: step, Horizon: horizon})
	if err != nil {
		t.Fatal(err)
	}
	return se
}

func TestCreateSeries(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	in := store.Series{Key: "plant-7/heat", Step: "1h", Horizon: 48, Season: 24, Unit: "MW", TimeZone: "Europe/Copenhagen", DecisionLeads: []int{25, 26}}
	se, created, err := s.CreateSeries(ctx, in)
	if err != nil || !created || se.ID == 0 {
		t.Fatalf("create: %+v %v %v", se, created, err)
	}
	if _, created, err := s.CreateSeries(ctx, in); err != nil || created {
		t.Errorf("identical create: created %v err %v; want a no-op", created, err)
	}
	other := in
	other.Horizon = 96
	if _, _, err := s.CreateSeries(ctx, other); !errors.Is(err, store.ErrConflict) {
		t.Errorf("different settings: err %v, want ErrConflict", err)
	}
	got, err := s.GetSeries(ctx, "plant-7/heat")
	if err != nil || got.Unit != "MW" || got.TimeZone != "Europe/Copenhagen" || len(got.DecisionLeads) != 2 {
		t.Errorf("get: %+v %v", got, err)
	}
	if _, err := s.GetSeries(ctx, "nope"); !errors.Is(err, store.ErrNotFound) {
		t.Errorf("get unknown: %v", err)
	}
	bad := store.Series{Key: "bad key!", Step: "7x", Horizon: 0, TimeZone: "Mars/Olympus", DecisionLeads: []int{99}}
	_, _, err = s.CreateSeries(ctx, bad)
	var inv *store.InvalidError
	if !errors.As(err, &inv) {
		t.Fatalf("invalid create: %v", err)
	}
	fields := map[string]bool{}
	for _, v := range inv.Violations {
		fields[v.Field] = true
	}
	for _, f := range []string{"key", "step", "horizon", "time_zone", "decision_leads"} {
		if !fields[f] {
			t.Errorf("invalid create: no violation for %s in %v", f, inv.Violations)
		}
	}
	list, err := s.ListSeries(ctx, "", 10)
	if err != nil || len(list) != 1 {
		t.Errorf("list: %v %v", list, err)
	}
}

// The worked example of method.md §2, pushed as lead 1 of three hourly
// origins, actuals first for one of them and after for the others.
func TestWorkedExampleThroughStore(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "p", "1h", 24)
	h := time.Hour
	if _, err := s.WriteActuals(ctx, []store.Actual{{Series: "p", Time: t0.Add(3 * h), Value: 5}}, 0); err != nil {
		t.Fatal(err)
	}
	ack, err := s.WriteForecasts(ctx, []store.ForecastVector{
		{Series: "p", Model: "m", Origin: t0, Values: []float64{8}},
		{Series: "p", Model: "m", Origin: t0.Add(h), Values: []float64{1}},
		{Series: "p", Model: "m", Origin: t0.Add(2 * h), Values: []float64{5}},
	}, 0)
	if err != nil {
		t.Fatal(err)
	}
	// The third forecast reached us after its actual: stored, not scored.
	if ack.Accepted != 2 || ack.Late != 1 {
		t.Fatalf("ack %+v, want 2 accepted 1 late", ack)
	}
	if _, err := s.WriteActuals(ctx, []store.Actual{{Series: "p", Time: t0.Add(h), Value: 10}, {Series: "p", Time: t0.Add(2 * h), Value: 0}}, 0); err != nil {
		t.Fatal(err)
	}
	res, err := s.Accuracy(ctx, "p", "m", store.Selection{}, math.NaN())
	if err != nil {
		t.Fatal(err)
	}
	if res.Late != 1 || res.Table.Overall.N != 2 {
		t.Fatalf("late %d n %d, want 1 and 2", res.Late, res.Table.Overall.N)
	}
	// In a fresh series, forecasts first and actuals after: all three score
	// and give the worked example, MASE 0.6 with the example's scale 5/3.
	mustSeries(t, s, "q", "1h", 24)
	if _, err := s.WriteForecasts(ctx, []store.ForecastVector{
		{Series: "q", Model: "m", Origin: t0, Values: []float64{8}},
		{Series: "q", Model: "m", Origin: t0.Add(h), Values: []float64{1}},
		{Series: "q", Model: "m", Origin: t0.Add(2 * h), Values: []float64{5}},
	}, 0); err != nil {
		t.Fatal(err)
	}
	if _, err := s.WriteActuals(ctx, []store.Actual{{Series: "q", Time: t0.Add(h), Value: 10}, {Series: "q", Time: t0.Add(2 * h), Value: 0}, {Series: "q", Time: t0.Add(3 * h), Value: 5}}, 0); err != nil {
		t.Fatal(err)
	}
	res, err = s.Accuracy(ctx, "q", "m", store.Selection{}, 5.0/3)
	if err != nil {
		t.Fatal(err)
	}
	m := res.Table.Overall
	if res.Late != 0 || m.N != 3 || m.MAE != 1 || m.MAPE != 10 || m.MAPEExcluded != 1 || m.WAPE != 20 ||
		math.Abs(m.SMAPE-74.07407407407408) > 1e-12 || math.Abs(m.MASE-0.6) > 1e-12 || math.Abs(m.RMSE-1.2909944487358056) > 1e-15 {
		t.Errorf("worked example through the store: %+v late %d", m, res.Late)
	}
	if _, err := s.Accuracy(ctx, "p", "typo", store.Selection{}, math.NaN()); !errors.Is(err, store.ErrNotFound) {
		t.Errorf("unknown model: %v, want ErrNotFound", err)
	}
}

func TestRejections(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "p", "1h", 3)
	ack, err := s.WriteForecasts(ctx, []store.ForecastVector{
		{Series: "p", Model: "m", Origin: t0, Values: []float64{1, 2, 3, 4}},                    // lead 4 beyond H
		{Series: "nope", Model: "m", Origin: t0, Values: []float64{1}},                          // unknown series
		{Series: "p", Model: "", Origin: t0, Values: []float64{1}},                              // no model
		{Series: "p", Model: "m", Origin: t0.Add(time.Hour), Values: []float64{math.Inf(1), 2}}, // Inf at lead 1
	}, 10)
	if err != nil {
		t.Fatal(err)
	}
	if ack.Accepted != 4 || ack.Rejected != 4 {
		t.Errorf("ack %+v, want 4 accepted 4 rejected", ack)
	}
	want := map[[2]int]string{{10, 4}: "lead", {11, 0}: "series", {12, 0}: "model", {13, 1}: "values"}
	for _, r := range ack.Rejections {
		if want[[2]int{r.Index, r.Lead}] != r.Field {
			t.Errorf("unexpected rejection %+v", r)
		}
		delete(want, [2]int{r.Index, r.Lead})
	}
	if len(want) > 0 {
		t.Errorf("missing rejections %v", want)
	}
	aack, err := s.WriteActuals(ctx, []store.Actual{{Series: "p", Time: t0, Value: math.NaN()}, {Series: "x", Time: t0, Value: 1}}, 0)
	if err != nil || aack.Rejected != 2 || len(aack.Rejections) != 2 {
		t.Errorf("actuals ack %+v err %v", aack, err)
	}
	var inv *store.InvalidError
	big := make([]store.Actual, store.DefaultLimits.MaxBatch+1)
	if _, err := s.WriteActuals(ctx, big, 0); !errors.As(err, &inv) {
		t.Errorf("oversized batch: %v, want InvalidError", err)
	}
}

// Re-issues replace values only for targets whose actual is unknown;
// revisions re-score; repeats are duplicates.
func TestReissueAndRevision(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "p", "1h", 3)
	h := time.Hour
	write := func(v store.ForecastVector) store.Ack {
		t.Helper()
		ack, err := s.WriteForecasts(ctx, []store.ForecastVector{v}, 0)
		if err != nil {
			t.Fatal(err)
		}
		return ack
	}
	act := func(at time.Time, v float64) store.Ack {
		t.Helper()
		ack, err := s.WriteActuals(ctx, []store.Actual{{Series: "p", Time: at, Value: v}}, 0)
		if err != nil {
			t.Fatal(err)
		}
		return ack
	}
	if a := write(store.ForecastVector{Series: "p", Model: "m", Origin: t0, Values: []float64{10, 20, 30}}); a.Accepted != 3 {
		t.Fatalf("first push %+v", a)
	}
	if a := write(store.ForecastVector{Series: "p", Model: "m", Origin: t0, Values: []float64{10, 20, 30}}); a.Duplicate != 3 {
		t.Fatalf("repeat %+v, want 3 duplicates", a)
	}
	if a := act(t0.Add(h), 12); a.Accepted != 1 {
		t.Fatalf("actual %+v", a)
	}
	// Re-issue: lead 1's actual is known, so 11 is stored beside the scored
	// 10 as late (method.md §3); leads 2, 3 change.
	if a := write(store.ForecastVector{Series: "p", Model: "m", Origin: t0, Values: []float64{11, 21, 30}}); a.Late != 1 || a.Accepted != 1 || a.Duplicate != 1 {
		t.Fatalf("re-issue %+v, want 1 late 1 accepted 1 duplicate", a)
	}
	// Pushing that late value again is a duplicate; another one replaces it, late again.
	if a := write(store.ForecastVector{Series: "p", Model: "m", Origin: t0, Values: []float64{11}}); a.Duplicate != 1 || a.Late != 0 {
		t.Fatalf("late re-issue pushed again %+v, want 1 duplicate", a)
	}
	act(t0.Add(2*h), 25)
	if a := act(t0.Add(2*h), 25); a.Duplicate != 1 {
		t.Fatalf("repeated actual %+v", a)
	}
	if a := act(t0.Add(2*h), 19); a.Revised != 1 {
		t.Fatalf("revised actual %+v", a)
	}
	res, err := s.Accuracy(ctx, "p", "m", store.Selection{}, math.NaN())
	if err != nil {
		t.Fatal(err)
	}
	// Pairs: lead 1 (12, 10) e=2; lead 2 (19, 21) e=-2.
	want := scoring.Tabulate([]scoring.Pair{{Lead: 1, Actual: 12, Forecast: 10}, {Lead: 2, Actual: 19, Forecast: 21}}, math.NaN())
	if !sameTable(res.Table, want) {
		t.Errorf("table %+v, want %+v", res.Table, want)
	}
	if res.Late != 1 || res.LateBy[1] != 1 {
		t.Errorf("late %d (by lead %v), want the late re-issue of lead 1", res.Late, res.LateBy)
	}
	// The pairs list the scored value, the late re-issue beside it, then
	// lead 2, a page each.
	pairs, next, err := s.Pairs(ctx, "p", "m", store.Selection{}, "", 1)
	if err != nil || len(pairs) != 1 || next == "" || pairs[0].Lead != 1 || pairs[0].Forecast != 10 || pairs[0].Late {
		t.Fatalf("page 1: %+v %q %v", pairs, next, err)
	}
	first := next
	pairs, next, err = s.Pairs(ctx, "p", "m", store.Selection{}, next, 1)
	if err != nil || len(pairs) != 1 || next == "" || pairs[0].Lead != 1 || pairs[0].Forecast != 11 || !pairs[0].Late || !pairs[0].Reissue {
		t.Fatalf("page 2: %+v %q %v", pairs, next, err)
	}
	pairs, next, err = s.Pairs(ctx, "p", "m", store.Selection{}, next, 1)
	if err != nil || len(pairs) != 1 || next != "" || pairs[0].Lead != 2 || pairs[0].Actual != 19 {
		t.Fatalf("page 3: %+v %q %v", pairs, next, err)
	}
	var inv *store.InvalidError
	if _, _, err := s.Pairs(ctx, "p", "m", store.Selection{}, "garbage!", 1); !errors.As(err, &inv) || !strings.Contains(err.Error(), "not a token this service issued") {
		t.Errorf("bad page token: %v", err)
	}
	// A token continues only its own request.
	if _, _, err := s.Pairs(ctx, "p", "m", store.Selection{Leads: []int{2}}, first, 1); !errors.As(err, &inv) || !strings.Contains(err.Error(), "continues another request") {
		t.Errorf("a token of another selection: %v", err)
	}
}

// sameTable compares tables exactly, NaN equal to NaN.
func sameTable(a, b scoring.Table) bool {
	eq := func(x, y scoring.Metrics) bool {
		f := func(p, q float64) bool { return p == q || math.IsNaN(p) && math.IsNaN(q) }
		return x.N == y.N && x.MAPEExcluded == y.MAPEExcluded && x.SMAPEExcluded == y.SMAPEExcluded &&
			f(x.ME, y.ME) && f(x.MAE, y.MAE) && f(x.RMSE, y.RMSE) && f(x.MAPE, y.MAPE) && f(x.SMAPE, y.SMAPE) && f(x.WAPE, y.WAPE) && f(x.MASE, y.MASE)
	}
	if len(a.Leads) != len(b.Leads) || !eq(a.Overall, b.Overall) {
		return false
	}
	for i := range a.Leads {
		if a.Leads[i].Lead != b.Leads[i].Lead || !eq(a.Leads[i].Metrics, b.Leads[i].Metrics) {
			return false
		}
	}
	return true
}

func TestDeleteBefore(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "p", "1h", 2)
	for k := range 5 {
		o := t0.Add(time.Duration(k) * time.Hour)
		if _, err := s.WriteForecasts(ctx, []store.ForecastVector{{Series: "p", Model: "m", Origin: o, Values: []float64{1, 2}}}, 0); err != nil {
			t.Fatal(err)
		}
		if _, err := s.WriteActuals(ctx, []store.Actual{{Series: "p", Time: o, Value: 1}}, 0); err != nil {
			t.Fatal(err)
		}
	}
	f, a, err := s.DeleteBefore(ctx, t0.Add(2*time.Hour))
	if err != nil || f != 2 || a != 2 {
		t.Fatalf("deleted %d forecasts %d actuals (%v), want 2 and 2", f, a, err)
	}
	pairs, _, err := s.Pairs(ctx, "p", "m", store.Selection{}, "", 100)
	if err != nil {
		t.Fatal(err)
	}
	for _, p := range pairs {
		if p.Origin.Before(t0.Add(2 * time.Hour)) {
			t.Errorf("pair from a deleted origin: %+v", p)
		}
	}
}

func TestFreshnessAndScoredCount(t *testing.T) {
	t.Parallel()
	s := storetest.Store(t)
	ctx := ctxT(t)
	mustSeries(t, s, "p", "1h", 3)
	h := time.Hour
	for k := range 3 {
		if _, err := s.WriteForecasts(ctx, []store.ForecastVector{{Series: "p", Model: "m", Origin: t0.Add(time.Duration(k) * h), Values: []float64{1, 2, 3}}}, 0); err != nil {
			t.Fatal(err)
		}
	}
	// t0+3h is lead 3 of origin 0, lead 2 of origin 1, lead 1 of origin 2.
	ack, err := s.WriteActuals(ctx, []store.Actual{{Series: "p", Time: t0.Add(3 * h), Value: 1}, {Series: "p", Time: t0.Add(h), Value: 1}}, 0)
	if err != nil || ack.Scored != 4 {
		t.Fatalf("ack %+v %v, want 4 pairs scored", ack, err)
	}
	// A revision scores nothing new.
	if ack, _ := s.WriteActuals(ctx, []store.Actual{{Series: "p", Time: t0.Add(3 * h), Value: 2}}, 0); ack.Scored != 0 || ack.Revised != 1 {
		t.Errorf("revision ack %+v", ack)
	}
	fs, as, err := s.Freshness(ctx)
	if err != nil || len(fs) != 1 || len(as) != 1 {
		t.Fatalf("freshness %v %v %v", fs, as, err)
	}
	if !fs[0].LastOrigin.Equal(t0.Add(2*h)) || fs[0].OriginInterval != h || !as[0].LastTime.Equal(t0.Add(3*h)) {
		t.Errorf("freshness %+v %+v", fs[0], as[0])
	}
}

// Series keys and model names compare bytewise (migration 006) on every
// server, also one whose default collation is a natural-language one: the
// test builds such a database with ICU's en-US, migrates it, and checks the
// declared collations and the order of listed series.
func TestIdentifiersCompareBytewise(t *testing.T) {
	t.Parallel()
	ctx := ctxT(t)
	admin := storetest.Pool(t)
	name := fmt.Sprintf("aftercast_icu_%d", time.Now().UnixNano())
	if _, err := admin.Exec(ctx, "CREATE DATABASE "+name+" TEMPLATE template0 LOCALE_PROVIDER icu ICU_LOCALE 'en-US' LOCALE 'C'"); err != nil {
		var pe *pgconn.PgError
		if errors.As(err, &pe) && pe.Code == "0A000" {
			// Debian's server has ICU; a server built without it cannot
			// make the database this test needs.
			t.Skipf("this PostgreSQL has no ICU: %v", err)
		}
		t.Fatalf("creating an ICU en-US database: %v", err)
	}
	t.Cleanup(func() { _, _ = admin.Exec(context.Background(), "DROP DATABASE IF EXISTS "+name+" WITH (FORCE)") })
	cfg := admin.Config().Copy()
	cfg.ConnConfig.Database = name
	pool, err := pgxpool.NewWithConfig(ctx, cfg)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(pool.Close)
	if _, err := store.Migrate(ctx, pool, nil); err != nil {
		t.Fatal(err)
	}
	// The test means something only if the database's own order differs.
	var natural bool
	if err := pool.QueryRow(ctx, "SELECT 'a' < 'B'").Scan(&natural); err != nil || !natural {
		t.Fatalf("the ICU database does not order 'a' before 'B' (%v, %v): it would not tell collations apart", natural, err)
	}
	rows, err := pool.Query(ctx, `SELECT table_name || '.' || column_name, coalesce(collation_name, '')
		FROM information_schema.columns WHERE table_schema = 'public' AND column_name IN ('key', 'model')`)
	if err != nil {
		t.Fatal(err)
	}
	cols := map[string]string{}
	var col, coll string
	if _, err := pgx.ForEachRow(rows, []any{&col, &coll}, func() error { cols[col] = coll; return nil }); err != nil {
		t.Fatal(err)
	}
	if len(cols) < 7 {
		t.Errorf("identifier columns found: %v, want series.key and six model columns", cols)
	}
	for c, coll := range cols {
		if coll != "C" {
			t.Errorf("%s has collation %q, want C", c, coll)
		}
	}
	s := store.New(pool, store.Limits{})
	keys := []string{"aB", "a-b", "B", "a", "A", "Ab"}
	for _, k := range keys {
		mustSeries(t, s, k, "1h", 2)
	}
	got, err := s.ListSeries(ctx, "", 100)
	if err != nil {
		t.Fatal(err)
	}
	var order []string
	for _, se := range got {
		order = append(order, se.Key)
	}
	want := slices.Clone(keys)
	slices.Sort(want) // Go compares strings bytewise
	if !slices.Equal(order, want) {
		t.Errorf("series listed as %v, want bytewise %v", order, want)
	}
}
