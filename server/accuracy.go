package server

import (
	"context"
	"math"
	"slices"

	"google.golang.org/protobuf/types/known/timestamppb"

	aftercastv1 "github.com/aftercast/aftercast/api/aftercast/v1"
	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
)

type accuracyService struct {
	*api
	aftercastv1.UnimplementedAccuracyServiceServer
}

func toSelection(p *aftercastv1.PairSelection) store.Selection {
	var sel store.Selection
	if r := p.GetOriginRange(); r != nil {
		if r.GetStartTime() != nil {
			sel.OriginFrom = r.GetStartTime().AsTime()
		}
		if r.GetEndTime() != nil {
			sel.OriginTo = r.GetEndTime().AsTime()
		}
	}
	if r := p.GetTargetRange(); r != nil {
		if r.GetStartTime() != nil {
			sel.TargetFrom = r.GetStartTime().AsTime()
		}
		if r.GetEndTime() != nil {
			sel.TargetTo = r.GetEndTime().AsTime()
		}
	}
	for _, h := range p.GetLeads() {
		sel.Leads = append(sel.Leads, int(h))
	}
	sel.Window = int(p.GetWindowOrigins())
	return sel
}

func optional(x float64) *float64 {
	if math.IsNaN(x) {
		return nil
	}
	return &x
}

func metricsToProto(m scoring.Metrics) *aftercastv1.AccuracyMetrics {
	return &aftercastv1.AccuracyMetrics{N: m.N, Me: optional(m.ME), Mae: optional(m.MAE), Rmse: optional(m.RMSE),
		Mape: optional(m.MAPE), MapeExcluded: m.MAPEExcluded, Smape: optional(m.SMAPE), SmapeExcluded: m.SMAPEExcluded,
		Wape: optional(m.WAPE), Mase: optional(m.MASE)}
}

func (s *accuracyService) GetAccuracy(ctx context.Context, req *aftercastv1.GetAccuracyRequest) (*aftercastv1.GetAccuracyResponse, error) {
	// The MASE scale comes from the active baseline's training actuals;
	// without one MASE is null.
	scale, err := s.store.ActiveScale(ctx, req.GetSeries(), req.GetModel())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	// The level scales of the active baseline (method.md §4a) put each
	// lead's band in the series' unit for the pairs selected.
	ref, _, err := s.drift.Reference(ctx, req.GetSeries(), req.GetModel())
	if err != nil {
		return nil, s.status(ctx, err)
	}
	levels := map[int]scoring.Scale{}
	for h := 1; ref != nil && h <= ref.Horizon; h++ {
		if l := ref.Lead(h); l != nil {
			levels[h] = l.Scale
		}
	}
	res, err := s.store.AccuracyWithLevels(ctx, req.GetSeries(), req.GetModel(), toSelection(req.GetSelection()), scale, levels)
	if err != nil {
		return nil, s.status(ctx, err)
	}
	out := &aftercastv1.GetAccuracyResponse{Series: res.Series.Key, Model: req.GetModel(), Step: res.Series.Step,
		Overall: metricsToProto(res.Table.Overall), OverallLateCount: res.Late}
	// Beside each lead: the baseline band for that lead's own number of
	// pairs, and the lead's current drift state.
	ns := map[int]int{}
	for _, l := range res.Table.Leads {
		ns[l.Lead] = int(l.N)
	}
	version, views, err := s.drift.LeadViews(ctx, req.GetSeries(), req.GetModel(), ns)
	if err != nil {
		return nil, s.status(ctx, err)
	}
	states := map[int]store.DriftStatus{}
	if version > 0 {
		sts, err := s.store.DriftStates(ctx, req.GetSeries(), req.GetModel())
		if err != nil {
			return nil, s.status(ctx, err)
		}
		for _, st := range sts {
			states[st.Lead] = st
		}
	}
	for _, l := range withLateOnlyLeads(res) {
		la := &aftercastv1.LeadAccuracy{Lead: int32(l.Lead), Metrics: metricsToProto(l.Metrics), LateCount: res.LateBy[l.Lead]}
		if v, ok := views[l.Lead]; ok {
			w := res.Levels[l.Lead].Window()
			b := scoring.BandSet{MAE: v.MAE, RMSE: v.RMSE, ME: v.ME}.InUnits(w)
			la.Baseline = &aftercastv1.LeadBaselineComparison{BaselineVersion: int32(version), K: int32(v.K), KEff: v.KEff,
				WindowN: int32(l.N), State: stateToProto[states[l.Lead].State], Mae: bandToProto(b.MAE), Rmse: bandToProto(b.RMSE), Me: bandToProto(b.ME),
				LevelScale: w.Scale, BacktestMae: optional(v.Expected.MAE)}
		}
		out.Leads = append(out.Leads, la)
	}
	return out, nil
}

// withLateOnlyLeads is the table's rows plus a row, with no scored pair,
// for each lead that has only late pairs: the response lists every lead
// with a scored or a late pair.
func withLateOnlyLeads(res store.AccuracyResult) []scoring.LeadMetrics {
	rows := slices.Clone(res.Table.Leads)
	var empty scoring.Accumulator
	for h, n := range res.LateBy {
		if n > 0 && !slices.ContainsFunc(rows, func(l scoring.LeadMetrics) bool { return l.Lead == h }) {
			rows = append(rows, scoring.LeadMetrics{Lead: h, Metrics: empty.Metrics(math.NaN())})
		}
	}
	slices.SortFunc(rows, func(a, b scoring.LeadMetrics) int { return a.Lead - b.Lead })
	return rows
}

func (s *accuracyService) ListPairs(ctx context.Context, req *aftercastv1.ListPairsRequest) (*aftercastv1.ListPairsResponse, error) {
	if req.GetPageSize() < 0 {
		return nil, invalidArg("page_size", "must not be negative")
	}
	pairs, next, err := s.store.Pairs(ctx, req.GetSeries(), req.GetModel(), toSelection(req.GetSelection()), req.GetPageToken(), int(req.GetPageSize()))
	if err != nil {
		return nil, s.status(ctx, err)
	}
	out := &aftercastv1.ListPairsResponse{NextPageToken: next, Pairs: make([]*aftercastv1.Pair, len(pairs))}
	for i, p := range pairs {
		out.Pairs[i] = &aftercastv1.Pair{OriginTime: timestamppb.New(p.Origin), TargetTime: timestamppb.New(p.Target), Lead: int32(p.Lead),
			Forecast: p.Forecast, Actual: p.Actual, Error: p.Actual - p.Forecast, Late: p.Late, LateReissue: p.Reissue,
			ForecastReceiveTime: timestamppb.New(p.ForecastReceivedAt), ActualFirstReceiveTime: timestamppb.New(p.ActualFirstReceived)}
	}
	return out, nil
}
