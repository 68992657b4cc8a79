package server_test

import (
	"context"
	"errors"
	"math"
	"net/http"
	"os"
	"sync"
	"testing"
	"time"

	"google.golang.org/genproto/googleapis/rpc/errdetails"
	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	healthpb "google.golang.org/grpc/health/grpc_health_v1"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store/storetest"
)

func TestMain(m *testing.M) { os.Exit(storetest.Main(m)) }

type client struct {
	series   aftercastv1.SeriesServiceClient
	forecast aftercastv1.ForecastServiceClient
	actual   aftercastv1.ActualServiceClient
	accuracy aftercastv1.AccuracyServiceClient
	health   healthpb.HealthClient
}

// start runs a server on ports chosen by the OS against dbURL.
func start(t testing.TB, dbURL string) (*server.Server, client) {
	t.Helper()
	srv, err := server.New(server.Config{Listen: "127.0.0.1:0", MetricsListen: "127.0.0.1:0", DatabaseURL: dbURL, Logger: storetest.Logger(t)})
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), time.Minute)
	defer cancel()
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop(context.Background()) })
	conn, err := grpc.NewClient(srv.GRPCAddr(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { conn.Close() })
	return srv, client{aftercastv1.NewSeriesServiceClient(conn), aftercastv1.NewForecastServiceClient(conn),
		aftercastv1.NewActualServiceClient(conn), aftercastv1.NewAccuracyServiceClient(conn), healthpb.NewHealthClient(conn)}
}

// get is http.Get with a context.
func get(ctx context.Context, url string) (*http.Response, error) {
	req, err := http.NewRequestWithContext(ctx, http.MethodGet, url, nil)
	if err != nil {
		return nil, err
	}
	return http.DefaultClient.Do(req)
}

func ctxT(t *testing.T) context.Context {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	t.Cleanup(cancel)
	return ctx
}

var t0 = time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)

func ts(d time.Duration) *timestamppb.Timestamp { return timestamppb.New(t0.Add(d)) }

func dense(series, model string, origin time.Duration, vals ...float64) *aftercastv1.Forecast {
	return &aftercastv1.Forecast{Series: series, Model: model, OriginTime: ts(origin),
		Values: &aftercastv1.Forecast_Dense{Dense: &aftercastv1.DenseValues{Values: vals}}}
}

func TestServiceRoundTrip(t *testing.T) {
	t.Parallel()
	srv, c := start(t, storetest.URL(t))
	ctx := ctxT(t)
	if r, err := c.health.Check(ctx, &healthpb.HealthCheckRequest{}); err != nil || r.GetStatus() != healthpb.HealthCheckResponse_SERVING {
		t.Fatalf("health: %v %v", r, err)
	}
	for _, path := range []string{"/healthz", "/readyz", "/metrics"} {
		resp, err := get(ctx, "http://"+srv.MetricsAddr()+path)
		if err != nil || resp.StatusCode != http.StatusOK {
			t.Errorf("GET %s: %v %v", path, resp, err)
		}
		if resp != nil {
			resp.Body.Close()
		}
	}
	sp := &aftercastv1.Series{Key: "plant-7/heat", Step: "1h", Horizon: 24}
	if r, err := c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: sp}); err != nil || !r.GetCreated() {
		t.Fatalf("create: %v %v", r, err)
	}
	if r, err := c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: sp}); err != nil || r.GetCreated() {
		t.Fatalf("identical create: %v %v", r, err)
	}
	_, err := c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: "plant-7/heat", Step: "30m", Horizon: 24}})
	if status.Code(err) != codes.AlreadyExists {
		t.Errorf("conflicting create: %v, want AlreadyExists", err)
	}
	_, err = c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: "bad key", Step: "1h", Horizon: 0}})
	if fields := violations(err); !fields["key"] || !fields["horizon"] {
		t.Errorf("invalid create: %v, want BadRequest violations for key and horizon", err)
	}

	// The worked example of method.md §2 as lead 1 of three origins, streamed.
	stream, err := c.forecast.StreamForecasts(ctx)
	if err != nil {
		t.Fatal(err)
	}
	for i, v := range []float64{8, 1, 5} {
		if err := stream.Send(&aftercastv1.StreamForecastsRequest{Forecasts: []*aftercastv1.Forecast{dense("plant-7/heat", "m1", time.Duration(i)*time.Hour, v)}}); err != nil {
			t.Fatal(err)
		}
	}
	// A fourth message with a NaN and a lead beyond the horizon: rejected with indexes.
	bad := dense("plant-7/heat", "m1", 3*time.Hour, math.NaN())
	far := &aftercastv1.Forecast{Series: "plant-7/heat", Model: "m1", OriginTime: ts(4 * time.Hour),
		Values: &aftercastv1.Forecast_Sparse{Sparse: &aftercastv1.SparseValues{Points: []*aftercastv1.LeadValue{{Lead: 25, Value: 1}}}}}
	if err := stream.Send(&aftercastv1.StreamForecastsRequest{Forecasts: []*aftercastv1.Forecast{bad, far}}); err != nil {
		t.Fatal(err)
	}
	resp, err := stream.CloseAndRecv()
	if err != nil {
		t.Fatal(err)
	}
	sum := resp.GetSummary()
	if sum.GetAccepted() != 3 || sum.GetRejected() != 2 || len(sum.GetRejections()) != 2 {
		t.Fatalf("stream summary %v", sum)
	}
	if r := sum.GetRejections(); r[0].GetIndex() != 3 || r[0].GetLead() != 1 || r[1].GetIndex() != 4 || r[1].GetLead() != 25 {
		t.Errorf("rejections %v, want index 3 lead 1 and index 4 lead 25", r)
	}
	// Pushing again is all duplicates.
	again, err := c.forecast.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: []*aftercastv1.Forecast{
		dense("plant-7/heat", "m1", 0, 8), dense("plant-7/heat", "m1", time.Hour, 1), dense("plant-7/heat", "m1", 2*time.Hour, 5)}})
	if err != nil || again.GetSummary().GetDuplicate() != 3 || again.GetSummary().GetAccepted() != 0 {
		t.Fatalf("re-push: %v %v", again, err)
	}
	act := func(h time.Duration, v float64) *aftercastv1.Actual {
		return &aftercastv1.Actual{Series: "plant-7/heat", Time: ts(h), Value: v}
	}
	ar, err := c.actual.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: []*aftercastv1.Actual{act(time.Hour, 10), act(2*time.Hour, 3), act(3*time.Hour, 5)}})
	if err != nil || ar.GetSummary().GetAccepted() != 3 {
		t.Fatalf("actuals: %v %v", ar, err)
	}
	// Revise the second actual to 0: the example's value.
	ar, err = c.actual.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: []*aftercastv1.Actual{act(2*time.Hour, 0)}})
	if err != nil || ar.GetSummary().GetRevised() != 1 {
		t.Fatalf("revision: %v %v", ar, err)
	}
	acc, err := c.accuracy.GetAccuracy(ctx, &aftercastv1.GetAccuracyRequest{Series: "plant-7/heat", Model: "m1"})
	if err != nil {
		t.Fatal(err)
	}
	o := acc.GetOverall()
	if o.GetN() != 3 || o.GetMae() != 1 || o.GetMape() != 10 || o.GetMapeExcluded() != 1 || o.GetWape() != 20 || o.Mase != nil ||
		math.Abs(o.GetSmape()-74.07407407407408) > 1e-12 || math.Abs(o.GetRmse()-1.2909944487358056) > 1e-15 {
		t.Errorf("accuracy %v, want the worked example (MASE null without a baseline)", o)
	}
	if _, err := c.accuracy.GetAccuracy(ctx, &aftercastv1.GetAccuracyRequest{Series: "plant-7/heat", Model: "nope"}); status.Code(err) != codes.NotFound {
		t.Errorf("unknown model: %v, want NotFound", err)
	}
	_, err = c.accuracy.GetAccuracy(ctx, &aftercastv1.GetAccuracyRequest{Series: "plant-7/heat", Model: "m1",
		Selection: &aftercastv1.PairSelection{Leads: []int32{99}}})
	if !violations(err)["selection.leads"] {
		t.Errorf("lead out of range: %v, want a selection.leads violation", err)
	}
	pairs, err := c.accuracy.ListPairs(ctx, &aftercastv1.ListPairsRequest{Series: "plant-7/heat", Model: "m1", PageSize: 2})
	if err != nil || len(pairs.GetPairs()) != 2 || pairs.GetNextPageToken() == "" || pairs.GetPairs()[0].GetError() != 2 {
		t.Fatalf("pairs page 1: %v %v", pairs, err)
	}
}

func violations(err error) map[string]bool {
	out := map[string]bool{}
	if status.Code(err) != codes.InvalidArgument {
		return out
	}
	for _, d := range status.Convert(err).Details() {
		if br, ok := d.(*errdetails.BadRequest); ok {
			for _, v := range br.GetFieldViolations() {
				out[v.GetField()] = true
			}
		}
	}
	return out
}

// Two servers on one database, as two `serve` replicas, pushing the same
// data and their own data at once: nothing counted twice, no deadlock.
func TestTwoServersOneDatabase(t *testing.T) {
	t.Parallel()
	url := storetest.URL(t)
	_, a := start(t, url)
	_, b := start(t, url)
	ctx := ctxT(t)
	for _, key := range []string{"shared", "only-a", "only-b"} {
		if _, err := a.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: key, Step: "1h", Horizon: 48}}); err != nil {
			t.Fatal(err)
		}
	}
	const origins, leads = 60, 48
	batches := func(series string) [][]*aftercastv1.Forecast {
		var out [][]*aftercastv1.Forecast
		for k := 0; k < origins; k += 5 {
			var batch []*aftercastv1.Forecast
			for j := k; j < k+5; j++ {
				vals := make([]float64, leads)
				for h := range vals {
					vals[h] = float64(100 + j + h)
				}
				batch = append(batch, dense(series, "m", time.Duration(j)*time.Hour, vals...))
			}
			out = append(out, batch)
		}
		return out
	}
	var mu sync.Mutex
	accepted := map[string]int64{}
	push := func(c client, series string, reverse bool) error {
		stream, err := c.forecast.StreamForecasts(ctx)
		if err != nil {
			return err
		}
		bs := batches(series)
		for i := range bs {
			if reverse {
				i = len(bs) - 1 - i
			}
			if err := stream.Send(&aftercastv1.StreamForecastsRequest{Forecasts: bs[i]}); err != nil {
				return err
			}
		}
		r, err := stream.CloseAndRecv()
		if err != nil {
			return err
		}
		mu.Lock()
		accepted[series] += r.GetSummary().GetAccepted()
		mu.Unlock()
		return nil
	}
	pushActuals := func(c client) error {
		var as []*aftercastv1.Actual
		for h := 1; h <= origins+leads; h++ {
			as = append(as, &aftercastv1.Actual{Series: "shared", Time: ts(time.Duration(h) * time.Hour), Value: 150})
		}
		_, err := c.actual.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: as})
		return err
	}
	var wg sync.WaitGroup
	errs := make(chan error, 8)
	for _, job := range []func() error{
		func() error { return push(a, "shared", false) },
		func() error { return push(b, "shared", true) },
		func() error { return push(a, "shared", true) },
		func() error { return push(a, "only-a", false) },
		func() error { return push(b, "only-b", false) },
	} {
		wg.Add(1)
		go func() { defer wg.Done(); errs <- job() }()
	}
	wg.Wait()
	close(errs)
	for err := range errs {
		if err != nil {
			t.Fatal(err)
		}
	}
	for _, key := range []string{"shared", "only-a", "only-b"} {
		if accepted[key] != origins*leads {
			t.Errorf("%s: %d points accepted in all, want exactly %d", key, accepted[key], origins*leads)
		}
	}
	// Actuals from both replicas at once: every target once.
	var wg2 sync.WaitGroup
	var aerr [2]error
	for i, c := range []client{a, b} {
		wg2.Add(1)
		go func() { defer wg2.Done(); aerr[i] = pushActuals(c) }()
	}
	wg2.Wait()
	if err := errors.Join(aerr[:]...); err != nil {
		t.Fatal(err)
	}
	for _, c := range []client{a, b} {
		acc, err := c.accuracy.GetAccuracy(ctx, &aftercastv1.GetAccuracyRequest{Series: "shared", Model: "m"})
		if err != nil {
			t.Fatal(err)
		}
		if n := acc.GetOverall().GetN(); n != origins*leads {
			t.Errorf("scored pairs %d, want %d", n, origins*leads)
		}
		// forecast 100+j+h against 150: e = 50-j-h; mean over j<60, h<=48.
		var sum float64
		for j := range origins {
			for h := 1; h <= leads; h++ {
				sum += float64(150 - (100 + j + h - 1))
			}
		}
		if want := sum / (origins * leads); math.Abs(acc.GetOverall().GetMe()-want) > 1e-9 {
			t.Errorf("ME %v, want %v", acc.GetOverall().GetMe(), want)
		}
	}
}

// A stream's summary lists the first 1000 rejections in push order and says
// it is truncated; the counts cover every rejected item.
func TestStreamListsFirstRejections(t *testing.T) {
	t.Parallel()
	_, c := start(t, storetest.URL(t))
	ctx := ctxT(t)
	stream, err := c.actual.StreamActuals(ctx)
	if err != nil {
		t.Fatal(err)
	}
	for m := range 3 {
		msg := make([]*aftercastv1.Actual, 700)
		for i := range msg {
			msg[i] = &aftercastv1.Actual{Series: "nowhere", Time: ts(time.Duration(m*700+i) * time.Hour), Value: 1}
		}
		if err := stream.Send(&aftercastv1.StreamActualsRequest{Actuals: msg}); err != nil {
			t.Fatal(err)
		}
	}
	resp, err := stream.CloseAndRecv()
	if err != nil {
		t.Fatal(err)
	}
	sum := resp.GetSummary()
	if sum.GetRejected() != 2100 || len(sum.GetRejections()) != 1000 || !sum.GetRejectionsTruncated() {
		t.Fatalf("rejected %d, listed %d, truncated %v; want 2100, 1000, true", sum.GetRejected(), len(sum.GetRejections()), sum.GetRejectionsTruncated())
	}
	for i, r := range sum.GetRejections() {
		if r.GetIndex() != int64(i) {
			t.Fatalf("rejection %d has index %d, want push order", i, r.GetIndex())
		}
	}
}
