package server_test

import (
	"math"
	"testing"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// Every rejection names the field as it was sent, with its index; lead
// means one thing (the lead of a rejected point, as sent), whole_vector
// marks a vector rejected whole; rejected counts every point, and a vector
// rejected whole with no point counts as one.
func TestRejectionPathsAndCounts(t *testing.T) {
	t.Parallel()
	_, c := start(t, storetest.URL(t))
	ctx := ctxT(t)
	if _, err := c.series.CreateSeries(ctx, &aftercastv1.CreateSeriesRequest{Series: &aftercastv1.Series{Key: "p", Step: "1h", Horizon: 3}}); err != nil {
		t.Fatal(err)
	}
	sparse := func(pts ...*aftercastv1.LeadValue) *aftercastv1.Forecast {
		return &aftercastv1.Forecast{Series: "p", Model: "m", OriginTime: ts(0),
			Values: &aftercastv1.Forecast_Sparse{Sparse: &aftercastv1.SparseValues{Points: pts}}}
	}
	withQ := dense("p", "m", 0, 1, 2)
	withQ.Quantiles = []*aftercastv1.QuantileValues{{Level: 0.1, Values: []float64{0, 1}}, {Level: 1.5, Values: []float64{3, 4}}}
	sparseQ := sparse(&aftercastv1.LeadValue{Lead: 3, Value: 9}, &aftercastv1.LeadValue{Lead: 1, Value: 8})
	sparseQ.Quantiles = []*aftercastv1.QuantileValues{{Level: 0.9, Values: []float64{10, 9}}} // in the points' order
	fs := []*aftercastv1.Forecast{
		dense("p", "m", 0, 1, math.NaN(), math.Inf(1), 4), // 0: NaN at lead 2, Inf at lead 3, lead 4 beyond the horizon
		sparse(&aftercastv1.LeadValue{Lead: 2, Value: 5}, &aftercastv1.LeadValue{Lead: 0, Value: 1},
			&aftercastv1.LeadValue{Lead: 2, Value: 6}, &aftercastv1.LeadValue{Lead: 3, Value: math.Inf(-1)}), // 1
		{Series: "p", Model: "m", OriginTime: ts(0)}, // 2: no values at all
		dense("nope", "m", 0, 1, 2),                  // 3: unknown series, two points
		withQ,                                        // 4: a quantile level out of range
		sparseQ,                                      // 5: quantiles of a sparse vector, fine
	}
	resp, err := c.forecast.PushForecasts(ctx, &aftercastv1.PushForecastsRequest{Forecasts: fs})
	if err != nil {
		t.Fatal(err)
	}
	s := resp.GetSummary()
	type rej struct {
		index int64
		lead  int32
		field string
		whole bool
	}
	want := []rej{
		{0, 2, "dense.values[1]", false}, {1, 0, "sparse.points[1].lead", false}, {1, 2, "sparse.points[2].lead", false},
		{0, 3, "dense.values[2]", false}, {0, 4, "dense.values[3]", false}, {1, 3, "sparse.points[3].value", false},
		{2, 0, "values", true}, {3, 0, "series", true}, {4, 0, "quantiles[1].level", true},
	}
	got := map[rej]bool{}
	for _, r := range s.GetRejections() {
		got[rej{r.GetIndex(), r.GetLead(), r.GetField(), r.GetWholeVector()}] = true
	}
	for _, w := range want {
		if !got[w] {
			t.Errorf("no rejection %+v in %v", w, s.GetRejections())
		}
	}
	if len(s.GetRejections()) != len(want) {
		t.Errorf("%d rejections, want %d: %v", len(s.GetRejections()), len(want), s.GetRejections())
	}
	// Points: vector 0 has 4 (1 accepted, 3 rejected), vector 1 four points
	// (1 accepted, 3 rejected), vector 2 none (counts 1), vector 3 two,
	// vector 4 two, vector 5 two accepted.
	if s.GetAccepted() != 4 || s.GetRejected() != 3+3+1+2+2 {
		t.Errorf("accepted %d rejected %d, want 4 and 11: %v", s.GetAccepted(), s.GetRejected(), s)
	}
}
