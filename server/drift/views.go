package drift

import (
	"context"
	"errors"
	"math"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
)

// snapshotOf is a lead's status as stored: its window, the bands it was
// judged against, and what entered its state.
func snapshotOf(st scoring.Status) store.Snapshot {
	w, b := st.Window, st.Bands
	snap := store.Snapshot{WindowN: w.N, Reason: st.Reason}
	if !st.Onset.IsZero() {
		snap.OriginsSinceOnset = st.EvaluationsSinceOnset()
	}
	if m := st.Entered.Metric; m != "" {
		snap.EnteredMetric, snap.EnteredValue, snap.EnteredLimit = m, fin(st.Entered.Value), fin(st.Entered.Limit)
	}
	if w.N == 0 {
		return snap
	}
	snap.MAE, snap.ME = fin(w.MAE), fin(w.ME)
	if w.Scale != 1 {
		snap.LevelScale = fin(w.Scale)
	}
	snap.BacktestMAE = fin(st.BacktestMAE)
	if a := b.MAE; a.Metric != "" {
		snap.MAEExpected, snap.MAEBandLower, snap.MAEBandUpper, snap.MAEAlarmLimit = fin(a.Expected), fin(a.Lower), fin(a.Upper), fin(a.AlarmUpper)
		snap.KEff = fin(a.KEff)
		if w.JudgedMAE > st.Judged.MAE.AlarmUpper {
			snap.Breached = append(snap.Breached, scoring.MetricMAE)
		}
	}
	if r := b.RMSE; r.Metric != "" {
		snap.RMSE, snap.RMSEExpected, snap.RMSEBandLower = fin(w.RMSE), fin(r.Expected), fin(r.Lower)
		snap.RMSEBandUpper, snap.RMSEAlarmLimit = fin(r.Upper), fin(r.AlarmUpper)
	}
	if m := b.ME; m.Metric != "" {
		snap.MEExpected, snap.MEBandLower, snap.MEBandUpper = fin(m.Expected), fin(m.Lower), fin(m.Upper)
		snap.MEAlarmLower, snap.MEAlarmUpper = fin(m.AlarmLower), fin(m.AlarmUpper)
		if j := st.Judged.ME; w.JudgedME < j.AlarmLower || w.JudgedME > j.AlarmUpper {
			snap.Breached = append(snap.Breached, scoring.MetricME)
		}
	}
	return snap
}

func fin(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

// LeadView is what a baseline expects of one lead (Lead 0: the pooled
// decision-lead quantity) for a live window of n origins.
type LeadView struct {
	Lead          int
	K             int
	KEff          float64
	Expected      scoring.Metrics // every metric over the backtest pairs; zero for the pooled entry
	MAE, RMSE, ME scoring.Band    // RMSE is zero for the pooled entry
	Usable        bool
	Reason        string
	Scale         scoring.Scale // b̂ and φ of method.md §4a; the bands are of errors divided by it
}

func viewOf(l *scoring.LeadReference, n int) LeadView {
	b := l.Bands(n)
	return LeadView{Lead: l.Lead, K: l.Abs.K, KEff: l.Abs.KEff, Expected: l.Expected, MAE: b.MAE, RMSE: b.RMSE, ME: b.ME,
		Usable: l.Verdict.Usable, Reason: l.Verdict.Reason, Scale: l.Scale}
}

// BaselineView returns a baseline version (0: the active one) with what it
// expects of every lead and of the pooled quantity (nil when no backtest
// origin has every decision lead) for a window of n origins.
func (e *Evaluator) BaselineView(ctx context.Context, key, model string, version, n int) (store.BaselineVersion, []LeadView, *LeadView, error) {
	b, err := e.st.GetBaseline(ctx, key, model, version)
	if err != nil {
		return store.BaselineVersion{}, nil, nil, err
	}
	se, err := e.st.GetSeries(ctx, key)
	if err != nil {
		return store.BaselineVersion{}, nil, nil, err
	}
	ref, err := e.reference(ctx, &se, model, b.Version)
	if err != nil {
		return store.BaselineVersion{}, nil, nil, err
	}
	var leads []LeadView
	for _, l := range b.Leads {
		leads = append(leads, viewOf(ref.Lead(l.Lead), n))
	}
	var pooled *LeadView
	if l := ref.Lead(0); l != nil {
		v := viewOf(l, n)
		pooled = &v
	}
	return b.BaselineVersion, leads, pooled, nil
}

// LeadViews returns, for each lead of ns, what the active baseline expects
// of a window of ns[lead] origins, with the version; no views and version 0
// without a baseline.
func (e *Evaluator) LeadViews(ctx context.Context, key, model string, ns map[int]int) (int, map[int]LeadView, error) {
	ref, version, err := e.Reference(ctx, key, model)
	if err != nil || ref == nil {
		return 0, nil, err
	}
	out := map[int]LeadView{}
	for h, n := range ns {
		if l := ref.Lead(h); l != nil && h > 0 && n >= 1 {
			out[h] = viewOf(l, n)
		}
	}
	return version, out, nil
}

// Reference returns the prepared active baseline of (key, model) and its
// version; nil and 0 without a baseline.
func (e *Evaluator) Reference(ctx context.Context, key, model string) (*scoring.Reference, int, error) {
	se, b, err := e.st.ActiveBaseline(ctx, key, model)
	if se != nil && errors.Is(err, store.ErrNotFound) {
		return nil, 0, nil
	}
	if err != nil {
		return nil, 0, err
	}
	ref, err := e.reference(ctx, se, model, b.Version)
	return ref, b.Version, err
}
