package server_test

import (
	"context"
	"strings"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// Each of these pins a sentence of the protos' comments to behaviour.
func TestProtoCommentsHold(t *testing.T) {
	t.Parallel()
	ctx := ctxT(t)
	srv, err := server.New(server.Config{Listen: "127.0.0.1:0", MetricsListen: "-", DatabaseURL: storetest.URL(t),
		Logger: storetest.Logger(t), MaxMessageBytes: 64 << 10, Limits: store.Limits{MaxBatch: 50}})
	if err != nil {
		t.Fatal(err)
	}
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop(context.Background()) })
	conn, err := grpc.NewClient(srv.GRPCAddr(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	series := aftercastv1.NewSeriesServiceClient(conn)
	actuals := aftercastv1.NewActualServiceClient(conn)
	forecasts := aftercastv1.NewForecastServiceClient(conn)
	if _, err := series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: "c", Step: "1h", Horizon: 2}}); err != nil {
		t.Fatal(err)
	}
	many := func(n int) []*aftercastv1.Actual {
		as := make([]*aftercastv1.Actual, n)
		for i := range as {
			as[i] = &aftercastv1.Actual{Series: strings.Repeat("c", 1), Time: ts(time.Duration(i) * time.Hour), Value: 1}
		}
		return as
	}

	// "RESOURCE_EXHAUSTED for a message over the server's size limit".
	big := many(40)
	for _, a := range big {
		a.Series = strings.Repeat("x", 2000) // an unknown key, but the message is what is too big
	}
	if _, err := actuals.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: big}); status.Code(err) != codes.ResourceExhausted {
		t.Errorf("a message over the size limit: %v, want ResourceExhausted", err)
	}
	// "INVALID_ARGUMENT for more actuals in one message than max_batch".
	if _, err := actuals.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: many(51)}); status.Code(err) != codes.InvalidArgument {
		t.Errorf("a batch over max_batch: %v, want InvalidArgument", err)
	}
	info, err := aftercastv1.NewInfoServiceClient(conn).GetServerInfo(ctx, &aftercastv1.GetServerInfoRequest{})
	if err != nil || info.GetMaxBatch() != 50 || info.GetMaxMessageBytes() != 64<<10 {
		t.Errorf("server info %v %v, want the configured limits", info, err)
	}

	// ListDriftStates: a (series, model) without a baseline is listed, its
	// series level insufficient_baseline saying why.
	if _, err := forecasts.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: []*aftercastv1.Forecast{dense("c", "m", 0, 1, 2)}}); err != nil {
		t.Fatal(err)
	}
	drift := aftercastv1.NewDriftServiceClient(conn)
	ds, err := drift.ListDriftStates(ctx, &aftercastv1.ListDriftStatesRequest{})
	if err != nil || len(ds.GetStates()) != 1 || ds.GetStates()[0].GetModel() != "m" ||
		ds.GetStates()[0].GetSeriesStatus().GetState() != aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE ||
		!strings.Contains(ds.GetStates()[0].GetSeriesStatus().GetReason(), "no baseline") {
		t.Errorf("drift states without a baseline: %v %v", ds, err)
	}
	// GetBaseline's NOT_FOUND names what is missing in words.
	_, err = aftercastv1.NewBaselineServiceClient(conn).GetBaseline(ctx, &aftercastv1.GetBaselineRequest{Series: "c", Model: "m"})
	if status.Code(err) != codes.NotFound || !strings.Contains(err.Error(), `no baseline of model "m" for series "c"`) {
		t.Errorf("GetBaseline without one: %v", err)
	}

	// GetAccuracy lists a lead whose only pairs are late, with its count,
	// also under a window.
	if _, err := actuals.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: []*aftercastv1.Actual{{Series: "c", Time: ts(3 * time.Hour), Value: 1}}}); err != nil {
		t.Fatal(err)
	}
	late := dense("c", "m", time.Hour, 5, 6) // lead 2's target, 03:00, was known: late
	if _, err := forecasts.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: []*aftercastv1.Forecast{late}}); err != nil {
		t.Fatal(err)
	}
	for _, w := range []int32{0, 30} {
		acc, err := aftercastv1.NewAccuracyServiceClient(conn).GetAccuracy(ctx, &aftercastv1.GetAccuracyRequest{Series: "c", Model: "m",
			Selection: &aftercastv1.PairSelection{WindowOrigins: w}})
		if err != nil || len(acc.GetLeads()) != 1 || acc.GetLeads()[0].GetLead() != 2 || acc.GetLeads()[0].GetLateCount() != 1 ||
			acc.GetLeads()[0].GetMetrics().GetN() != 0 || acc.GetOverallLateCount() != 1 {
			t.Errorf("window %d: accuracy %v %v, want lead 2 with one late pair and none scored", w, acc, err)
		}
	}
}
