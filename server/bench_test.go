package server_test

import (
	"context"
	"fmt"
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
			fmt.Sscanf(strings.TrimSpace(rest), "%f", &kb)
			return kb / 1024
		}
	}
	return 0
}

// messages gathers items into messages of up to batch and sends each when
// full, as a producer streams them: the whole push is never held at once,
// so the process's peak RSS stays the server's.
func messages[T any](b *testing.B, batch int, send func([]T) error) *messageBuffer[T] {
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

// BenchmarkGRPCActuals pushes actuals end to end — gRPC stream, commit,
// pairs counted, drift re-evaluated, acknowledgement — for 1,000 daily
// series with H = 2 (each actual meets 2 forecasts), 100 days each, in
// messages of 5,000 (the CLI's default), then pushes the same again (all
// duplicates). Reports actuals/s for both.
func BenchmarkGRPCActuals(b *testing.B) {
	const series, days, horizon, batch = 1000, 100, 2, 5000
	srv, c := start(b, storetest.URL(b))
	ctx := context.Background()
	st := srv.Store()
	day := 24 * time.Hour
	var vs []store.ForecastVector
	for i := range series {
		key := fmt.Sprintf("d%04d", i)
		if _, _, err := st.CreateSeries(ctx, store.Series{Key: key, Step: "1d", Horizon: horizon}); err != nil {
			b.Fatal(err)
		}
		for k := -horizon; k < days; k++ {
			vs = append(vs, store.ForecastVector{Series: key, Model: "m", Origin: t0.Add(time.Duration(k) * day), Values: []float64{100, 101}})
		}
	}
	for lo := 0; lo < len(vs); lo += batch {
		if _, err := st.WriteForecasts(ctx, vs[lo:min(lo+batch, len(vs))], lo); err != nil {
			b.Fatal(err)
		}
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
		for k := range days {
			for i := range series {
				out.add(&aftercastv1.Actual{Series: fmt.Sprintf("d%04d", i), Time: ts(time.Duration(k) * day), Value: float64(90 + i%20)})
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
		var sum *aftercastv1.ActualPushSummary
		first, sum = push()
		if sum.GetAccepted() != series*days {
			b.Fatalf("summary %v", sum)
		}
		again, sum = push()
		if sum.GetDuplicate() != series*days {
			b.Fatalf("re-push summary %v", sum)
		}
	}
	n := float64(series * days)
	b.ReportMetric(n/first.Seconds(), "actuals/s")
	b.ReportMetric(n/again.Seconds(), "repush-actuals/s")
	b.Logf("%d actuals: first push %v, identical re-push %v", int(n), first.Round(time.Millisecond), again.Round(time.Millisecond))
}
