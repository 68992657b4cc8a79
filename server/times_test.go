package server_test

import (
	"context"
	"net/http"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/pglocal"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// Through gRPC, as any client sends them: a time in milliseconds put into
// seconds, the year 9999, a timestamp whose nanoseconds are out of range
// and an off-grid origin are refused item by item, naming the field; a
// time at the range's first instant is stored exactly.
func TestPushRefusesTimesOutsideRangeAndGrid(t *testing.T) {
	t.Parallel()
	srv, c := start(t, storetest.URL(t))
	ctx := ctxT(t)
	if _, err := c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: "g", Step: "1h", Horizon: 2}}); err != nil {
		t.Fatal(err)
	}
	ms := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC).UnixMilli()
	acts := []*aftercastv1.Actual{
		{Series: "g", Time: &timestamppb.Timestamp{Seconds: ms}, Value: 1},                               // ms in seconds: year 58 000
		{Series: "g", Time: timestamppb.New(time.Date(9999, 1, 1, 0, 0, 0, 0, time.UTC)), Value: 1},      // once stored as 1815
		{Series: "g", Time: &timestamppb.Timestamp{Seconds: 1767225600, Nanos: 2_000_000_000}, Value: 1}, // nanos out of range
		{Series: "g", Time: timestamppb.New(time.Date(1900, 1, 1, 0, 0, 0, 0, time.UTC)), Value: 1},      // the first instant
		{Series: "g", Time: timestamppb.New(time.Date(2026, 1, 1, 0, 30, 0, 0, time.UTC)), Value: 1},     // off the hourly grid
	}
	resp, err := c.actual.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: acts})
	if err != nil {
		t.Fatal(err)
	}
	sum := resp.GetSummary()
	if sum.GetAccepted() != 1 || sum.GetRejected() != 4 || len(sum.GetRejections()) != 4 {
		t.Fatalf("summary %v", sum)
	}
	for i, r := range sum.GetRejections() {
		want := []string{"outside the accepted range", "outside the accepted range", "nanos 2000000000 outside", "not on the series' grid"}[i]
		if r.GetField() != "time" || !strings.Contains(r.GetReason(), want) {
			t.Errorf("rejection %d: %v, want field time and %q", i, r, want)
		}
	}
	f := &aftercastv1.Forecast{Series: "g", Model: "m", OriginTime: &timestamppb.Timestamp{Seconds: ms},
		Values: &aftercastv1.Forecast_Dense{Dense: &aftercastv1.DenseValues{Values: []float64{1, 2}}}}
	fr, err := c.forecast.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: []*aftercastv1.Forecast{f}})
	if err != nil {
		t.Fatal(err)
	}
	if s := fr.GetSummary(); s.GetRejected() != 2 || s.GetRejections()[0].GetField() != "origin_time" {
		t.Errorf("origin in milliseconds: %v", s)
	}
	// The freshness the alerts read is in range.
	_, as, err := srv.Store().Freshness(ctx)
	if err != nil || len(as) != 1 || !as[0].LastTime.Equal(time.Date(1900, 1, 1, 0, 0, 0, 0, time.UTC)) {
		t.Errorf("freshness %+v %v", as, err)
	}
}

// With PostgreSQL gone mid-session (shut down under the running service),
// a push fails with Unavailable — which clients retry — not Internal, and
// /readyz reports the database down instead of a cached success.
func TestPushWithTheDatabaseGoneIsUnavailable(t *testing.T) {
	t.Parallel()
	ctx := ctxT(t)
	cl, err := pglocal.Start(ctx, pglocal.Options{Logger: storetest.Logger(t)})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = cl.Stop(context.Background()) })
	srv, c := start(t, cl.URL("postgres"))
	if _, err := c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: "u", Step: "1h", Horizon: 1}}); err != nil {
		t.Fatal(err)
	}
	ready := func() int {
		resp, err := get(ctx, "http://"+srv.MetricsAddr()+"/readyz")
		if err != nil {
			t.Fatal(err)
		}
		resp.Body.Close()
		return resp.StatusCode
	}
	if code := ready(); code != http.StatusOK {
		t.Fatalf("readyz before: %d", code)
	}
	if err := cl.Stop(ctx); err != nil {
		t.Fatal(err)
	}
	_, err = c.actual.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: []*aftercastv1.Actual{
		{Series: "u", Time: timestamppb.New(time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)), Value: 1}}})
	if status.Code(err) != codes.Unavailable {
		t.Errorf("push with the database gone: %v, want Unavailable", err)
	}
	if code := ready(); code != http.StatusServiceUnavailable {
		t.Errorf("readyz with the database gone: %d, want 503", code)
	}
}
