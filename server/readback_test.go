package server_test

import (
	"math"
	"testing"
	"time"

	"google.golang.org/grpc"
	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/credentials/insecure"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/proto"
	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// A client built from the protos alone reads back exactly what it stored:
// forecast vectors with their late values and late re-issues, actuals with
// their revisions, the series' models, and the limits to size its pushes.
func TestReadBackWhatWasStored(t *testing.T) {
	t.Parallel()
	srv, c := start(t, storetest.URL(t))
	ctx := ctxT(t)
	conn, err := grpc.NewClient(srv.GRPCAddr(), grpc.WithTransportCredentials(insecure.NewCredentials()))
	if err != nil {
		t.Fatal(err)
	}
	defer conn.Close()
	info, err := aftercastv1.NewInfoServiceClient(conn).GetServerInfo(ctx, &aftercastv1.GetServerInfoRequest{})
	l := store.DefaultLimits
	if err != nil || info.GetMaxBatch() != int32(l.MaxBatch) || info.GetMaxMessageBytes() != 16<<20 || info.GetMaxHorizon() != int32(l.MaxHorizon) ||
		!info.GetEarliestTime().AsTime().Equal(store.MinTime) || !info.GetLatestTime().AsTime().Equal(store.MaxTime) || info.GetVersion() == "" {
		t.Fatalf("server info %v %v", info, err)
	}
	if _, err := c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: "rb", Step: "1h", Horizon: 3}}); err != nil {
		t.Fatal(err)
	}
	h := time.Hour
	push := func(fs ...*aftercastv1.Forecast) {
		t.Helper()
		if _, err := c.forecast.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: fs}); err != nil {
			t.Fatal(err)
		}
	}
	act := func(d time.Duration, v float64) {
		t.Helper()
		if _, err := c.actual.PushActuals(ctx, &aftercastv1.PushActualsRequest{Actuals: []*aftercastv1.Actual{{Series: "rb", Time: ts(d), Value: v}}}); err != nil {
			t.Fatal(err)
		}
	}
	issued := timestamppb.New(t0.Add(-30 * time.Minute))
	f0 := dense("rb", "m", 0, 10, 20, 30)
	f0.IssueTime = issued
	push(f0, &aftercastv1.Forecast{Series: "rb", Model: "m", OriginTime: ts(h), Values: &aftercastv1.Forecast_Sparse{
		Sparse: &aftercastv1.SparseValues{Points: []*aftercastv1.LeadValue{{Lead: 3, Value: 7}}}}})
	act(h, 12)
	act(h, 13)                           // revised
	act(2*h, 1)                          // origin 1h's lead 1 has no value: a later one is late
	push(dense("rb", "m", 0, 11))        // a late re-issue of lead 1, beside 10
	push(dense("rb", "m", h, 5))         // lead 1 of origin 1h arrives after its actual: late
	push(dense("rb", "other", 2*h, 1.5)) // another model

	fr, err := c.forecast.ListForecasts(ctx, &aftercastv1.ListForecastsRequest{Series: "rb", Model: "m", PageSize: 1})
	if err != nil || len(fr.GetForecasts()) != 1 || fr.GetNextPageToken() == "" {
		t.Fatalf("first page: %v %v", fr, err)
	}
	v0 := fr.GetForecasts()[0]
	late11 := 11.0
	want0 := &aftercastv1.StoredForecast{OriginTime: ts(0), IssueTime: issued, Points: []*aftercastv1.StoredPoint{
		{Lead: 1, Value: 10, LateReissue: &late11}, {Lead: 2, Value: 20}, {Lead: 3, Value: 30}}}
	if !proto.Equal(withoutReceiveTimes(v0), want0) || v0.GetFirstReceiveTime() == nil || v0.GetReceiveTime().AsTime().Before(v0.GetFirstReceiveTime().AsTime()) {
		t.Errorf("origin 0 read back as %v, want %v", v0, want0)
	}
	fr2, err := c.forecast.ListForecasts(ctx, &aftercastv1.ListForecastsRequest{Series: "rb", Model: "m", PageSize: 1, PageToken: fr.GetNextPageToken()})
	if err != nil || len(fr2.GetForecasts()) != 1 || fr2.GetNextPageToken() != "" {
		t.Fatalf("second page: %v %v", fr2, err)
	}
	want1 := &aftercastv1.StoredForecast{OriginTime: ts(h), Points: []*aftercastv1.StoredPoint{{Lead: 1, Value: 5, Late: true}, {Lead: 3, Value: 7}}}
	got1 := withoutReceiveTimes(fr2.GetForecasts()[0])
	got1.IssueTime = nil // the receive time of the first push stands in
	if !proto.Equal(got1, want1) {
		t.Errorf("origin 1h read back as %v, want %v", fr2.GetForecasts()[0], want1)
	}
	if _, err := c.forecast.ListForecasts(ctx, &aftercastv1.ListForecastsRequest{Series: "rb", Model: "other", PageToken: fr.GetNextPageToken()}); status.Code(err) != codes.InvalidArgument {
		t.Errorf("a token of another request: %v, want InvalidArgument", err)
	}

	// Quantiles come back per point, in the points' order; a lead the
	// quantiles' push did not cover reads NaN.
	q0 := dense("rb", "q", 0, 1, 2)
	q0.Quantiles = []*aftercastv1.QuantileValues{{Level: 0.1, Values: []float64{0.5, 1.5}}, {Level: 0.9, Values: []float64{1.5, 2.5}}}
	q1 := &aftercastv1.Forecast{Series: "rb", Model: "q", OriginTime: ts(0), Values: &aftercastv1.Forecast_Sparse{
		Sparse: &aftercastv1.SparseValues{Points: []*aftercastv1.LeadValue{{Lead: 3, Value: 3}}}}}
	push(q0, q1)
	qr, err := c.forecast.ListForecasts(ctx, &aftercastv1.ListForecastsRequest{Series: "rb", Model: "q"})
	if err != nil || len(qr.GetForecasts()) != 1 {
		t.Fatalf("quantiles read back: %v %v", qr, err)
	}
	gotQ := qr.GetForecasts()[0].GetQuantiles()
	if len(gotQ) != 2 || gotQ[0].GetLevel() != 0.1 || gotQ[1].GetLevel() != 0.9 {
		t.Fatalf("quantiles read back as %v", gotQ)
	}
	for k, want := range [][]float64{{0.5, 1.5, math.NaN()}, {1.5, 2.5, math.NaN()}} {
		got := gotQ[k].GetValues()
		if len(got) != 3 || got[0] != want[0] || got[1] != want[1] || !math.IsNaN(got[2]) {
			t.Errorf("quantile %v read back as %v, want %v", gotQ[k].GetLevel(), got, want)
		}
	}

	ar, err := c.actual.ListActuals(ctx, &aftercastv1.ListActualsRequest{Series: "rb"})
	if err != nil || len(ar.GetActuals()) != 2 {
		t.Fatalf("actuals %v %v", ar, err)
	}
	a := ar.GetActuals()[0]
	if !a.GetTime().AsTime().Equal(t0.Add(h)) || a.GetValue() != 13 || a.GetRevisions() != 1 || a.GetReceiveTime().AsTime().Before(a.GetFirstReceiveTime().AsTime()) {
		t.Errorf("revised actual read back as %v", a)
	}
	mr, err := c.series.ListModels(ctx, &aftercastv1.ListModelsRequest{Series: "rb"})
	if err != nil || len(mr.GetModels()) != 3 || mr.GetModels()[0].GetModel() != "m" || !mr.GetModels()[1].GetLastOriginTime().AsTime().Equal(t0.Add(2*h)) {
		t.Errorf("models %v %v", mr, err)
	}
	if _, err := c.series.ListModels(ctx, &aftercastv1.ListModelsRequest{Series: "nope"}); status.Code(err) != codes.NotFound {
		t.Errorf("models of an unknown series: %v", err)
	}
}

func withoutReceiveTimes(f *aftercastv1.StoredForecast) *aftercastv1.StoredForecast {
	g := proto.Clone(f).(*aftercastv1.StoredForecast)
	g.FirstReceiveTime, g.ReceiveTime = nil, nil
	return g
}
