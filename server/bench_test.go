package server_test

import (
	"context"
	"fmt"
	"math/rand/v2"
	"os"
	"strings"
	"testing"
	"time"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// peakRSS is this process's peak resident set (VmHWM), in MiB: server and
// client run in one process here, so it bounds the server's.
func peakRSS() float64 {
	b, err := os.ReadFile("/proc/self/status")
	if err != nil {
		return 0
	}
	for _, line := range strings.Split(string(b), "\n") {
		if rest, ok := strings.CutPrefix(line, "VmHWM:"); ok {
			var kb float64
			if _, err := fmt.Sscanf(strings.TrimSpace(rest), "%f", &kb); err != nil {
				return 0
			}
			return kb / 1024
		}
	}
	return 0
}

// messages gathers items into messages of up to batch and sends each when
// full, as a producer streams them: the whole push is never held at once,
// so the process's peak RSS stays the server's.
func messages[T any](b *testing.B, batch int, send func([]T) error) *messageBuffer[T] {
	b.Helper()
	return &messageBuffer[T]{b: b, batch: batch, send: send}
}

type messageBuffer[T any] struct {
	b     *testing.B
	batch int
	msg   []T
	send  func([]T) error
}

func (m *messageBuffer[T]) add(x T) {
	if m.msg = append(m.msg, x); len(m.msg) == m.batch {
		m.flush()
	}
}

func (m *messageBuffer[T]) flush() {
	if len(m.msg) == 0 {
		return
	}
	if err := m.send(m.msg); err != nil {
		m.b.Fatal(err)
	}
	m.msg = nil
}

// BenchmarkGRPCForecastIngest pushes forecasts end to end — gRPC stream,
// validation, commit, acknowledgement — for 10,000 series × 48 leads in
// messages of 500 vectors, as a producer would, then pushes the same again
// (all duplicates). Reports points/s for both and the peak RSS.
func BenchmarkGRPCForecastIngest(b *testing.B) {
	const series, leads, origins, batch = 10_000, 48, 3, 500
	srv, c := start(b, storetest.URL(b))
	ctx := context.Background()
	st := srv.Store()
	for i := range series {
		if _, _, err := st.CreateSeries(ctx, store.Series{Key: fmt.Sprintf("s%05d", i), Step: "1h", Horizon: leads}); err != nil {
			b.Fatal(err)
		}
	}
	rssBefore := peakRSS()
	push := func() (time.Duration, *aftercastv1.ForecastPushSummary) {
		start := time.Now()
		stream, err := c.forecast.StreamForecasts(ctx)
		if err != nil {
			b.Fatal(err)
		}
		out := messages(b, batch, func(m []*aftercastv1.Forecast) error {
			return stream.Send(&aftercastv1.StreamForecastsRequest{Forecasts: m})
		})
		for k := range origins {
			for i := range series {
				vals := make([]float64, leads)
				for h := range vals {
					vals[h] = float64(100 + i%17 + h)
				}
				out.add(dense(fmt.Sprintf("s%05d", i), "m", time.Duration(k)*24*time.Hour, vals...))
			}
		}
		out.flush()
		resp, err := stream.CloseAndRecv()
		if err != nil {
			b.Fatal(err)
		}
		return time.Since(start), resp.GetSummary()
	}
	b.ResetTimer()
	var first, again time.Duration
	for b.Loop() {
		var sum *aftercastv1.ForecastPushSummary
		first, sum = push()
		if sum.GetAccepted() != series*leads*origins && sum.GetDuplicate() != series*leads*origins {
			b.Fatalf("summary %v", sum)
		}
		again, sum = push()
		if sum.GetDuplicate() != series*leads*origins {
			b.Fatalf("re-push summary %v", sum)
		}
	}
	points := float64(series * leads * origins)
	b.ReportMetric(points/first.Seconds(), "points/s")
	b.ReportMetric(points/again.Seconds(), "repush-points/s")
	b.ReportMetric(peakRSS(), "peak-rss-MiB")
	b.Logf("%d points: first push %v, identical re-push %v; peak RSS %.0f MiB (%.0f MiB before the pushes)",
		int(points), first.Round(time.Millisecond), again.Round(time.Millisecond), peakRSS(), rssBefore)
}

// BenchmarkGRPCActuals pushes actuals end to end — gRPC stream, commit
// with the drift marks, pairs counted, acknowledgement — for 1,000 daily
// series with H = 2 (each actual meets 2 forecasts) and a baseline each,
// 100 days, in messages of 5,000 (the CLI's default), with the server's
// drift evaluator running; then pushes the same again (all duplicates).
// In the same run it writes the same shape through the store alone (no
// gRPC) into another 1,000 series: the store-level figure the gRPC one is
// compared with. Reports actuals/s for all three, their ratio, and how
// long after the last acknowledgement the evaluator had judged everything
// (pending marks drained).
func BenchmarkGRPCActuals(b *testing.B) {
	const series, days, horizon, batch = 1000, 100, 2, 5000
	srv, c := start(b, storetest.URL(b))
	ctx := context.Background()
	st := srv.Store()
	day := 24 * time.Hour
	r := rand.New(rand.NewPCG(1, 2))
	// Series d* are pushed through gRPC, s* through the store alone.
	var vs, directVs []store.ForecastVector
	var rows, directRows []store.BacktestRow
	for _, prefix := range []string{"d", "s"} {
		for i := range series {
			key := fmt.Sprintf("%s%04d", prefix, i)
			rs, fs := &rows, &vs
			if prefix == "s" {
				rs, fs = &directRows, &directVs
			} else if _, _, err := st.CreateSeries(ctx, store.Series{Key: key, Step: "1d", Horizon: horizon}); err != nil {
				b.Fatal(err)
			}
			for k := -200; k < 0; k++ {
				o := t0.Add(time.Duration(k) * day)
				for h := 1; h <= horizon; h++ {
					*rs = append(*rs, store.BacktestRow{Series: key, Origin: o, Target: o.Add(time.Duration(h) * day), Actual: 100, Forecast: 100 - r.NormFloat64()})
				}
			}
			for k := 0; k < days; k++ {
				*fs = append(*fs, store.ForecastVector{Series: key, Model: "m", Origin: t0.Add(time.Duration(k) * day),
					Values: []float64{100 - r.NormFloat64(), 100 - r.NormFloat64()}})
			}
		}
	}
	if _, err := st.ImportBaseline(ctx, "m", rows, nil); err != nil {
		b.Fatal(err)
	}
	for lo := 0; lo < len(vs); lo += batch {
		if _, err := st.WriteForecasts(ctx, vs[lo:min(lo+batch, len(vs))], lo); err != nil {
			b.Fatal(err)
		}
	}
	// The baselines judged and prepared, as in a running service.
	if err := srv.Drift().Drain(ctx); err != nil {
		b.Fatal(err)
	}
	actuals := func(prefix string) []*aftercastv1.Actual {
		var out []*aftercastv1.Actual
		for k := range days + 1 {
			for i := range series {
				out = append(out, &aftercastv1.Actual{Series: fmt.Sprintf("%s%04d", prefix, i), Time: ts(time.Duration(k) * day), Value: 100})
			}
		}
		return out
	}
	// The store-level figure: the same writes into another database of the
	// same content, which no evaluator works on.
	direct := store.New(storetest.Pool(b), store.Limits{})
	for i := range series {
		if _, _, err := direct.CreateSeries(ctx, store.Series{Key: fmt.Sprintf("s%04d", i), Step: "1d", Horizon: horizon}); err != nil {
			b.Fatal(err)
		}
	}
	if _, err := direct.ImportBaseline(ctx, "m", directRows, nil); err != nil {
		b.Fatal(err)
	}
	for lo := 0; lo < len(directVs); lo += batch {
		if _, err := direct.WriteForecasts(ctx, directVs[lo:min(lo+batch, len(directVs))], lo); err != nil {
			b.Fatal(err)
		}
	}
	storeLevel := func() time.Duration {
		as := toStore(actuals("s"))
		start := time.Now()
		for lo := 0; lo < len(as); lo += batch {
			if _, err := direct.WriteActuals(ctx, as[lo:min(lo+batch, len(as))], lo); err != nil {
				b.Fatal(err)
			}
		}
		return time.Since(start)
	}
	push := func() (time.Duration, *aftercastv1.ActualPushSummary) {
		start := time.Now()
		stream, err := c.actual.StreamActuals(ctx)
		if err != nil {
			b.Fatal(err)
		}
		out := messages(b, batch, func(m []*aftercastv1.Actual) error {
			return stream.Send(&aftercastv1.StreamActualsRequest{Actuals: m})
		})
		for _, a := range actuals("d") {
			out.add(a)
		}
		out.flush()
		resp, err := stream.CloseAndRecv()
		if err != nil {
			b.Fatal(err)
		}
		return time.Since(start), resp.GetSummary()
	}
	// drained waits until the evaluator has judged every mark.
	drained := func() time.Duration {
		start := time.Now()
		for {
			n, _, err := st.DriftBacklog(ctx)
			if err != nil {
				b.Fatal(err)
			}
			if n == 0 {
				return time.Since(start)
			}
			time.Sleep(10 * time.Millisecond)
		}
	}
	b.ResetTimer()
	var directTime, first, again, lag time.Duration
	for b.Loop() {
		directTime = storeLevel()
		var sum *aftercastv1.ActualPushSummary
		first, sum = push()
		lag = drained()
		if sum.GetAccepted() != series*(days+1) {
			b.Fatalf("summary %v", sum)
		}
		again, sum = push()
		if sum.GetDuplicate() != series*(days+1) {
			b.Fatalf("re-push summary %v", sum)
		}
	}
	n := float64(series * (days + 1))
	b.ReportMetric(n/directTime.Seconds(), "store-actuals/s")
	b.ReportMetric(n/first.Seconds(), "actuals/s")
	b.ReportMetric(directTime.Seconds()/first.Seconds(), "ratio")
	b.ReportMetric(lag.Seconds(), "drain-after-s")
	b.ReportMetric(n/again.Seconds(), "repush-actuals/s")
	b.Logf("%d actuals: store level %v; through gRPC %v (%.0f%% of the store's rate), judged %v after the last acknowledgement; identical re-push %v",
		int(n), directTime.Round(time.Millisecond), first.Round(time.Millisecond), 100*directTime.Seconds()/first.Seconds(),
		lag.Round(time.Millisecond), again.Round(time.Millisecond))
}

func toStore(as []*aftercastv1.Actual) []store.Actual {
	out := make([]store.Actual, len(as))
	for i, a := range as {
		out[i] = store.Actual{Series: a.GetSeries(), Time: a.GetTime().AsTime(), Value: a.GetValue()}
	}
	return out
}
