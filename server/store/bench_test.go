package store_test

// Store benchmarks. They load millions of points, so run them one at a time
// and once:
//
//	go test -run '^$' -bench . -benchtime 1x ./server/store/
//
// Each reports its own figure with b.ReportMetric, and logs (-v) where the
// time went, statement by statement, as seen from the client.

import (
	"cmp"
	"context"
	"fmt"
	"math"
	"math/rand/v2"
	"slices"
	"strings"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// benchTracer adds up client-side wall time per SQL statement (by its first
// words), a poor man's profile of a write path.
type benchTracer struct {
	mu    sync.Mutex
	total map[string]time.Duration
	count map[string]int
}

type benchTraceKey struct{}

type benchTraceStart struct {
	what string
	at   time.Time
}

func newBenchTracer() *benchTracer {
	return &benchTracer{total: map[string]time.Duration{}, count: map[string]int{}}
}

func (t *benchTracer) start(ctx context.Context, what string) context.Context {
	return context.WithValue(ctx, benchTraceKey{}, benchTraceStart{what, time.Now()})
}

func (t *benchTracer) end(ctx context.Context) {
	st, ok := ctx.Value(benchTraceKey{}).(benchTraceStart)
	if !ok {
		return
	}
	d := time.Since(st.at)
	t.mu.Lock()
	t.total[st.what] += d
	t.count[st.what]++
	t.mu.Unlock()
}

func (t *benchTracer) TraceQueryStart(ctx context.Context, _ *pgx.Conn, d pgx.TraceQueryStartData) context.Context {
	words := strings.Fields(d.SQL)
	return t.start(ctx, strings.Join(words[:min(len(words), 6)], " "))
}

func (t *benchTracer) TraceQueryEnd(ctx context.Context, _ *pgx.Conn, _ pgx.TraceQueryEndData) {
	t.end(ctx)
}

func (t *benchTracer) TraceCopyFromStart(ctx context.Context, _ *pgx.Conn, d pgx.TraceCopyFromStartData) context.Context {
	return t.start(ctx, "COPY "+d.TableName.Sanitize())
}

func (t *benchTracer) TraceCopyFromEnd(ctx context.Context, _ *pgx.Conn, _ pgx.TraceCopyFromEndData) {
	t.end(ctx)
}

// A batch is one round trip: it counts as one statement, named by the
// first words of what it holds.
func (t *benchTracer) TraceBatchStart(ctx context.Context, _ *pgx.Conn, d pgx.TraceBatchStartData) context.Context {
	var parts []string
	for _, q := range d.Batch.QueuedQueries {
		words := strings.Fields(q.SQL)
		parts = append(parts, strings.Join(words[:min(len(words), 2)], " "))
	}
	return t.start(ctx, "batch: "+strings.Join(parts, "; "))
}

func (t *benchTracer) TraceBatchQuery(context.Context, *pgx.Conn, pgx.TraceBatchQueryData) {}

func (t *benchTracer) TraceBatchEnd(ctx context.Context, _ *pgx.Conn, _ pgx.TraceBatchEndData) {
	t.end(ctx)
}

func (t *benchTracer) reset() {
	t.mu.Lock()
	clear(t.total)
	clear(t.count)
	t.mu.Unlock()
}

// report returns the six statements that took longest, with their share of
// wall time (benchmark logs are cut at ten lines without -v).
func (t *benchTracer) report(title string, wall time.Duration) string {
	t.mu.Lock()
	defer t.mu.Unlock()
	keys := slices.Collect(func(yield func(string) bool) {
		for k := range t.total {
			if !yield(k) {
				return
			}
		}
	})
	slices.SortFunc(keys, func(a, b string) int { return cmp.Compare(t.total[b], t.total[a]) })
	var sb strings.Builder
	fmt.Fprintf(&sb, "%s: %.2fs wall; client-side time per statement:\n", title, wall.Seconds())
	var sum time.Duration
	for i, k := range keys {
		sum += t.total[k]
		if i < 6 {
			fmt.Fprintf(&sb, "  %7.3fs %5.1f%% %6d× %s\n", t.total[k].Seconds(), 100*t.total[k].Seconds()/wall.Seconds(), t.count[k], k)
		}
	}
	fmt.Fprintf(&sb, "  %7.3fs %5.1f%% in SQL (%d statements), the rest in Go", sum.Seconds(), 100*sum.Seconds()/wall.Seconds(), len(keys))
	return sb.String()
}

// benchDB opens a pool, traced, on a fresh migrated database.
func benchDB(b *testing.B) (*store.Store, *pgxpool.Pool, *benchTracer) {
	b.Helper()
	cfg, err := pgxpool.ParseConfig(storetest.URL(b))
	if err != nil {
		b.Fatal(err)
	}
	tr := newBenchTracer()
	cfg.ConnConfig.Tracer = tr
	pool, err := pgxpool.NewWithConfig(context.Background(), cfg)
	if err != nil {
		b.Fatal(err)
	}
	b.Cleanup(pool.Close)
	return store.New(pool, store.Limits{}), pool, tr
}

// benchSeries creates n series named prefix-00000… in one statement and
// returns their ids by key index.
func benchSeries(b *testing.B, pool *pgxpool.Pool, prefix string, n int, step, zone string, horizon int) []int64 {
	b.Helper()
	ctx := context.Background()
	rows, err := pool.Query(ctx, `INSERT INTO series (key, step, horizon, time_zone)
		SELECT $1 || '-' || lpad(i::text, 5, '0'), $2, $3, $4 FROM generate_series(0, $5 - 1) AS i
		RETURNING id`, prefix, step, horizon, zone, n)
	if err != nil {
		b.Fatal(err)
	}
	ids, err := pgx.CollectRows(rows, pgx.RowTo[int64])
	if err != nil {
		b.Fatal(err)
	}
	return ids
}

func benchKey(prefix string, i int) string { return fmt.Sprintf("%s-%05d", prefix, i) }

func benchVals(rng *rand.Rand, n int) []float64 {
	vals := make([]float64, n)
	for i := range vals {
		vals[i] = 100 + 20*rng.NormFloat64()
	}
	return vals
}

// benchCopyForecasts loads vectors straight into a table of the forecasts'
// shape with COPY, the fastest way in.
func benchCopyForecasts(b *testing.B, ctx context.Context, pool *pgxpool.Pool, table string, rows [][]any) {
	b.Helper()
	if _, err := pool.CopyFrom(ctx, pgx.Identifier{table}, []string{"series_id", "model", "origin", "vals", "issued_at", "first_received_at", "received_at"}, pgx.CopyFromRows(rows)); err != nil {
		b.Fatal(err)
	}
}

func benchForecastRow(id int64, origin time.Time, vals []float64, now time.Time) []any {
	return []any{id, "m", origin, vals, now, now, now}
}

// BenchmarkForecastIngest pushes 10,000 hourly series × 48 leads per
// operation (one new origin each) through Store.WriteForecasts in batches of
// 500 vectors, then COPYs the same rows in the same batches into a scratch
// table of the forecasts' shape (CREATE TABLE … (LIKE forecasts): no keys),
// and reports both rates and their ratio. Target: the service path at ≥ 50%
// of raw COPY. For reference it also COPYs into a table with forecasts'
// primary and foreign keys, which any path keeping them pays.
func BenchmarkForecastIngest(b *testing.B) {
	const (
		nSeries = 10_000
		horizon = 48
		batch   = 500
	)
	s, pool, tr := benchDB(b)
	ctx := context.Background()
	ids := benchSeries(b, pool, "f", nSeries, "1h", "UTC", horizon)
	for _, sql := range []string{
		"CREATE TABLE raw_copy (LIKE forecasts)",
		// The same primary key and foreign key as forecasts: the floor of
		// any path that keeps them.
		"CREATE TABLE raw_copy_keys (LIKE forecasts INCLUDING ALL, FOREIGN KEY (series_id) REFERENCES series (id))",
	} {
		if _, err := pool.Exec(ctx, sql); err != nil {
			b.Fatal(err)
		}
	}
	rng := rand.New(rand.NewPCG(1, 1))
	vectors := func(origin time.Time) []store.ForecastVector {
		vs := make([]store.ForecastVector, nSeries)
		for i := range vs {
			vs[i] = store.ForecastVector{Series: benchKey("f", i), Model: "m", Origin: origin, Values: benchVals(rng, horizon)}
		}
		return vs
	}
	push := func(vs []store.ForecastVector) {
		for lo := 0; lo < len(vs); lo += batch {
			ack, err := s.WriteForecasts(ctx, vs[lo:lo+batch], lo)
			if err != nil {
				b.Fatal(err)
			}
			if ack.Accepted != batch*horizon {
				b.Fatalf("ack %+v", ack)
			}
		}
	}
	copyRows := func(table string, vs []store.ForecastVector) {
		now := time.Now()
		for lo := 0; lo < len(vs); lo += batch {
			rows := make([][]any, 0, batch)
			for i, v := range vs[lo : lo+batch] {
				rows = append(rows, benchForecastRow(ids[lo+i], v.Origin, v.Values, now))
			}
			benchCopyForecasts(b, ctx, pool, table, rows)
		}
	}
	// Warm up: the series cache, every pooled connection's staging table.
	push(vectors(t0.Add(-time.Hour)))
	copyRows("raw_copy", vectors(t0.Add(-time.Hour)))
	copyRows("raw_copy_keys", vectors(t0.Add(-time.Hour)))

	var svc, raw, rawKeys time.Duration
	var profile string
	b.ResetTimer()
	for i := range b.N {
		origin := t0.Add(time.Duration(i) * time.Hour)
		b.StopTimer()
		vs := vectors(origin)
		tr.reset()
		b.StartTimer()
		start := time.Now()
		push(vs)
		svc += time.Since(start)
		if i == 0 {
			profile = tr.report("service ingest, one origin of 10,000 series", time.Since(start))
		}
		start = time.Now()
		copyRows("raw_copy", vs)
		raw += time.Since(start)
		start = time.Now()
		copyRows("raw_copy_keys", vs)
		rawKeys += time.Since(start)
	}
	points := float64(b.N * nSeries * horizon)
	b.ReportMetric(points/svc.Seconds(), "svc-points/s")
	b.ReportMetric(points/raw.Seconds(), "copy-points/s")
	b.ReportMetric(points/rawKeys.Seconds(), "copy+keys-points/s")
	b.ReportMetric(100*raw.Seconds()/svc.Seconds(), "svc-%-of-copy")
	b.Logf("service %.0f points/s; raw COPY %.0f points/s, with forecasts' primary and foreign keys %.0f: service at %.0f%% of raw COPY (target ≥ 50%%), %.0f%% of COPY with the same keys",
		points/svc.Seconds(), points/raw.Seconds(), points/rawKeys.Seconds(), 100*raw.Seconds()/svc.Seconds(), 100*rawKeys.Seconds()/svc.Seconds())
	b.Log(profile)
}

// BenchmarkActualsReconcile pushes 100,000 actuals per operation through
// Store.WriteActuals, in batches of 5,000 (the CLI's default message: five
// times of 1,000 series, as a feed delivers them) and of 1,000, with the
// forecasts they meet already
// stored: daily origins with H = 2 (each actual meets 2 forecasts) and
// hourly origins with H = 48 (each meets 48). Target: ≥ 100,000 actuals/s
// with daily origins.
func BenchmarkActualsReconcile(b *testing.B) {
	for _, c := range []struct {
		name, step, zone       string
		horizon, series, batch int
	}{
		// 5000 actuals a message is what `aftercast push actuals` sends by
		// default; 1000 shows what smaller producer batches cost.
		{"daily-H2-batch5000", "1d", "Europe/Brussels", 2, 1000, 5000},
		{"daily-H2-batch1000", "1d", "Europe/Brussels", 2, 1000, 1000},
		{"hourly-H48-batch5000", "1h", "UTC", 48, 1000, 5000},
	} {
		b.Run(c.name, func(b *testing.B) {
			const perOp = 100_000
			batch := c.batch
			s, pool, tr := benchDB(b)
			ctx := context.Background()
			ids := benchSeries(b, pool, "a", c.series, c.step, c.zone, c.horizon)
			se, err := s.GetSeries(ctx, benchKey("a", 0))
			if err != nil {
				b.Fatal(err)
			}
			step := se.StepValue()
			loc := step.Location()
			base := time.Date(2026, 1, 1, 0, 0, 0, 0, loc)
			times := perOp / c.series // targets per series per operation
			rng := rand.New(rand.NewPCG(2, 2))
			var took time.Duration
			var pushed int
			for i := range b.N {
				b.StopTimer()
				// The forecasts whose targets are this operation's times:
				// origins from H steps before the first to one before the last.
				first := i*times + c.horizon
				now := time.Now()
				var rows [][]any
				for k := first - c.horizon; k < first+times-1; k++ {
					for _, id := range ids {
						rows = append(rows, benchForecastRow(id, step.Add(base, k), benchVals(rng, c.horizon), now))
					}
				}
				benchCopyForecasts(b, ctx, pool, "forecasts", rows)
				if _, err := pool.Exec(ctx, "ANALYZE"); err != nil {
					b.Fatal(err)
				}
				var as []store.Actual
				for k := first; k < first+times; k++ {
					t := step.Add(base, k)
					for j := range c.series {
						as = append(as, store.Actual{Series: benchKey("a", j), Time: t, Value: 100 + 20*rng.NormFloat64()})
					}
				}
				// Warm the series cache.
				if _, err := s.WriteActuals(ctx, as[:batch], 0); err != nil {
					b.Fatal(err)
				}
				as = as[batch:]
				tr.reset()
				b.StartTimer()
				start := time.Now()
				for lo := 0; lo < len(as); lo += batch {
					ack, err := s.WriteActuals(ctx, as[lo:min(lo+batch, len(as))], lo)
					if err != nil {
						b.Fatal(err)
					}
					if ack.Accepted != int64(min(batch, len(as)-lo)) {
						b.Fatalf("ack %+v", ack)
					}
				}
				took += time.Since(start)
				if i == 0 {
					b.Log(tr.report("actuals "+c.name, time.Since(start)))
				}
				pushed += len(as)
			}
			b.ReportMetric(float64(pushed)/took.Seconds(), "actuals/s")
		})
	}
}

// BenchmarkAccuracyQuery stores 2,000 hourly series × 100 origins × 48 leads
// (9.6 million forecast points, loaded by COPY) with all their actuals, then
// measures Store.Accuracy over a 30-origin window for one lead and for the
// full 48-lead table, on random series, and reports p50 and p99 latency.
// Targets: one lead p99 < 5 ms; full table p99 < 20 ms.
func BenchmarkAccuracyQuery(b *testing.B) {
	for _, shape := range []struct {
		name             string
		series, origins  int
		horizon, samples int
	}{
		{"2000x100x48", 2000, 100, 48, 1000},
		{"200x1000x48", 200, 1000, 48, 1000},
	} {
		b.Run(shape.name, func(b *testing.B) {
			s, pool, tr := benchDB(b)
			ctx := context.Background()
			loadStart := time.Now()
			ids := benchSeries(b, pool, "q", shape.series, "1h", "UTC", shape.horizon)
			rng := rand.New(rand.NewPCG(3, 3))
			now := time.Now()
			var rows [][]any
			flush := func() {
				benchCopyForecasts(b, ctx, pool, "forecasts", rows)
				rows = rows[:0]
			}
			for _, id := range ids {
				for o := range shape.origins {
					rows = append(rows, benchForecastRow(id, t0.Add(time.Duration(o)*time.Hour), benchVals(rng, shape.horizon), now))
				}
				if len(rows) >= 20_000 {
					flush()
				}
			}
			flush()
			var arows [][]any
			for _, id := range ids {
				for k := 1; k < shape.origins+shape.horizon; k++ {
					arows = append(arows, []any{id, t0.Add(time.Duration(k) * time.Hour), 100 + 20*rng.NormFloat64(), now, now})
				}
			}
			if _, err := pool.CopyFrom(ctx, pgx.Identifier{"actuals"}, []string{"series_id", "time", "value", "first_received_at", "received_at"}, pgx.CopyFromRows(arows)); err != nil {
				b.Fatal(err)
			}
			if _, err := pool.Exec(ctx, "VACUUM ANALYZE"); err != nil {
				b.Fatal(err)
			}
			var points int64
			if err := pool.QueryRow(ctx, "SELECT sum(cardinality(vals)) FROM forecasts").Scan(&points); err != nil {
				b.Fatal(err)
			}
			b.Logf("loaded %d forecast points and %d actuals in %.1fs", points, len(arows), time.Since(loadStart).Seconds())
			for i := range shape.series {
				if _, err := s.GetSeries(ctx, benchKey("q", i)); err != nil { // warm the series cache
					b.Fatal(err)
				}
			}

			for _, q := range []struct {
				name string
				sel  func() store.Selection
			}{
				{"one-lead-window30", func() store.Selection { return store.Selection{Leads: []int{1 + rng.IntN(shape.horizon)}, Window: 30} }},
				{"table-window30", func() store.Selection { return store.Selection{Window: 30} }},
			} {
				b.Run(q.name, func(b *testing.B) {
					// Each operation is `samples` queries, so that one
					// operation (-benchtime 1x) gives a p99.
					var lat []time.Duration
					query := func() {
						key := benchKey("q", rng.IntN(shape.series))
						start := time.Now()
						res, err := s.Accuracy(ctx, key, "m", q.sel(), math.NaN())
						if err != nil {
							b.Fatal(err)
						}
						lat = append(lat, time.Since(start))
						if res.Table.Overall.N == 0 {
							b.Fatal("no pairs")
						}
					}
					for range 50 { // warm-up
						query()
					}
					lat = lat[:0]
					tr.reset()
					b.ResetTimer()
					start := time.Now()
					for range b.N * shape.samples {
						query()
					}
					wall := time.Since(start)
					b.StopTimer()
					slices.Sort(lat)
					pct := func(p float64) float64 {
						return float64(lat[min(len(lat)-1, int(p*float64(len(lat))))].Microseconds()) / 1000
					}
					b.ReportMetric(pct(0.50), "p50-ms")
					b.ReportMetric(pct(0.99), "p99-ms")
					b.ReportMetric(float64(len(lat))/wall.Seconds(), "queries/s")
					b.Log(tr.report(fmt.Sprintf("%s %s, %d queries", shape.name, q.name, len(lat)), wall))
				})
			}
		})
	}
}
