package server_test

import (
	"math"
	"math/rand/v2"
	"testing"
	"time"

	"google.golang.org/grpc/codes"
	"google.golang.org/grpc/status"
	"google.golang.org/protobuf/types/known/fieldmaskpb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// A seasonal series (method.md §4a; invented data): level 100·(1 + 0.6 cos)
// over a year of daily origins, error sd growing in proportion, four
// decision leads. The backtest is the year before; production starts at
// the winter peak. With the default error scale (auto) the healthy winter
// is judged and within. Switched to absolute, the pooled quantity's
// seasonal swing reads as autocorrelation (K_eff falls from ~300 to under
// 30), so the series cannot be judged at all — the failure the issue
// describes; back to auto it is within again. Each switch replays the
// production period and is announced with cause baseline.
func TestErrorScaleFollowsTheSeasons(t *testing.T) {
	t.Parallel()
	srv, c := start(t, storetest.URL(t))
	ctx := ctxT(t)
	st := srv.Store()
	const leads = 4
	created, err := c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: "season", Step: "1h", Horizon: leads}})
	if err != nil || created.GetSeries().GetErrorScale() != aftercastv1.ErrorScale_ERROR_SCALE_AUTO {
		t.Fatalf("create: %v %v, want error scale auto", created, err)
	}
	r := rand.New(rand.NewPCG(11, 12))
	level := func(k int) float64 { return 100 * (1 + 0.6*math.Cos(2*math.Pi*float64(k)/365)) }
	var rows []store.BacktestRow
	for k := -365; k < 0; k++ {
		o := t0.Add(time.Duration(k) * 24 * time.Hour)
		for h := 1; h <= leads; h++ {
			l := level(k)
			rows = append(rows, store.BacktestRow{Series: "season", Origin: o, Target: o.Add(time.Duration(h) * time.Hour), Forecast: l, Actual: l + 5*l/100*r.NormFloat64()})
		}
	}
	if _, err := st.ImportBaseline(ctx, "m", rows, nil); err != nil {
		t.Fatal(err)
	}
	for k := range 60 {
		o := t0.Add(time.Duration(k) * 24 * time.Hour)
		l := level(k)
		vals := make([]float64, leads)
		var as []store.Actual
		for h := 1; h <= leads; h++ {
			vals[h-1] = l
			as = append(as, store.Actual{Series: "season", Time: o.Add(time.Duration(h) * time.Hour), Value: l + 5*l/100*r.NormFloat64()})
		}
		if _, err := st.WriteForecasts(ctx, []store.ForecastVector{{Series: "season", Model: "m", Origin: o, Values: vals}}, 0); err != nil {
			t.Fatal(err)
		}
		if _, err := st.WriteActuals(ctx, as, 0); err != nil {
			t.Fatal(err)
		}
	}
	drift := aftercastv1.NewDriftServiceClient(dialT(t, srv.GRPCAddr()))
	seriesState := func() aftercastv1.DriftState {
		t.Helper()
		if err := srv.Drift().Drain(ctx); err != nil {
			t.Fatal(err)
		}
		resp, err := drift.ListDriftStates(ctx, &aftercastv1.ListDriftStatesRequest{Series: "season"})
		if err != nil || len(resp.GetStates()) != 1 {
			t.Fatalf("drift states: %v %v", resp, err)
		}
		return resp.GetStates()[0].GetSeriesStatus().GetState()
	}
	update := func(mode aftercastv1.ErrorScale) bool {
		t.Helper()
		resp, err := c.series.UpdateSeries(ctx, &aftercastv1.UpdateSeriesRequest{Series: &aftercastv1.Series{Key: "season", ErrorScale: mode},
			UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"error_scale"}}})
		if err != nil || resp.GetSeries().GetErrorScale() != mode {
			t.Fatalf("update to %v: %v %v", mode, resp, err)
		}
		return resp.GetChanged()
	}
	baselineEvents := func() int {
		t.Helper()
		resp, err := drift.ListDriftEvents(ctx, &aftercastv1.ListDriftEventsRequest{Series: "season", PageSize: 1000})
		if err != nil {
			t.Fatal(err)
		}
		n := 0
		for _, ev := range resp.GetEvents() {
			if ev.GetCause() == aftercastv1.DriftCause_DRIFT_CAUSE_BASELINE && ev.Lead == nil {
				n++
			}
		}
		return n
	}

	if s := seriesState(); s != aftercastv1.DriftState_DRIFT_STATE_WITHIN {
		t.Errorf("auto: a healthy winter is %v, want within", s)
	}
	if !update(aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE) || update(aftercastv1.ErrorScale_ERROR_SCALE_ABSOLUTE) {
		t.Error("update to absolute: changed should be true once, then false")
	}
	if s := seriesState(); s != aftercastv1.DriftState_DRIFT_STATE_INSUFFICIENT_BASELINE {
		t.Errorf("absolute: %v, want insufficient_baseline (the plain pooled quantity's K_eff is too small)", s)
	}
	if n := baselineEvents(); n != 1 {
		t.Errorf("%d series-level events with cause baseline after the switch to absolute, want 1", n)
	}
	update(aftercastv1.ErrorScale_ERROR_SCALE_AUTO)
	if s := seriesState(); s != aftercastv1.DriftState_DRIFT_STATE_WITHIN {
		t.Errorf("back to auto: %v, want within", s)
	}
	if n := baselineEvents(); n != 2 {
		t.Errorf("%d series-level events with cause baseline after switching back, want 2", n)
	}

	for _, bad := range []*aftercastv1.UpdateSeriesRequest{
		{Series: &aftercastv1.Series{Key: "season"}, UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"horizon"}}},
		{Series: &aftercastv1.Series{Key: "season"}},
		{Series: &aftercastv1.Series{Key: "season"}, UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"error_scale"}}},
		{Series: &aftercastv1.Series{Key: "season", DecisionLeads: []int32{9}}, UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"decision_leads"}}},
	} {
		if _, err := c.series.UpdateSeries(ctx, bad); status.Code(err) != codes.InvalidArgument {
			t.Errorf("update %v: %v, want InvalidArgument", bad, err)
		}
	}
	if _, err := c.series.UpdateSeries(ctx, &aftercastv1.UpdateSeriesRequest{Series: &aftercastv1.Series{Key: "nope"},
		UpdateMask: &fieldmaskpb.FieldMask{Paths: []string{"decision_leads"}}}); status.Code(err) != codes.NotFound {
		t.Errorf("update of an unknown series: %v, want NotFound", err)
	}
}
