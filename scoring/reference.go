package scoring

import (
	"cmp"
	"math"
	"slices"
	"time"
)

// ReferenceSpec is what a baseline is judged with besides its pairs: the
// series' horizon and decision leads, the live window n and the MASE scale
// of the expected metrics (NaN when unknown).
type ReferenceSpec struct {
	Horizon   int
	Decision  []int // ascending; the pooled series quantity averages these leads
	Window    int
	MASEScale float64
}

// Reference is a baseline prepared for judging (method.md §4): per lead,
// and for the pooled decision-lead quantity of the series state, the band
// summaries, the usability verdict, and the bands of every window size up
// to the live window. It is immutable once built and safe to share.
type Reference struct {
	ReferenceSpec
	leads  map[int]*LeadReference
	pooled *LeadReference // nil when no backtest origin has every decision lead
}

// LeadReference is what the backtest expects of one lead (Lead > 0) or of
// the pooled decision-lead quantity (Lead 0).
type LeadReference struct {
	Lead          int
	Abs, Sq, Bias Summary // of |e|, e², e; Sq is empty for the pooled quantity
	Verdict       Verdict
	Expected      Metrics // every metric over the lead's backtest pairs; zero for the pooled quantity
	// limits[n-1] are the bounds of the bands for a window of n ≤ the live
	// window, kept as bare numbers: a prepared baseline is cached for every
	// judged (series, model), so its size matters.
	limits []bandLimits
}

// bandLimits are the bounds of the three bands for one window size, in the
// order Band lists them.
type bandLimits struct {
	mae, rmse [3]float64 // lower, upper, alarm upper
	me        [4]float64 // lower, upper, alarm lower, alarm upper
}

// BandSet is the bands of the three drift metrics for one window size.
// RMSE is the zero Band for the pooled quantity, which has none.
type BandSet struct {
	MAE, RMSE, ME Band
}

// NewReference prepares a baseline from its backtest pairs (in any order;
// one per origin and lead).
func NewReference(backtest []Pair, spec ReferenceSpec) *Reference {
	r := &Reference{ReferenceSpec: spec, leads: map[int]*LeadReference{}}
	r.Decision = slices.Clone(spec.Decision)
	ps := slices.Clone(backtest)
	slices.SortFunc(ps, comparePairs)
	byLead := map[int][]Quantity{}
	acc := map[int]*Accumulator{}
	var pooled []Quantity
	eachOrigin(ps, func(_ time.Time, group []Pair) {
		for _, p := range group {
			byLead[p.Lead] = append(byLead[p.Lead], pairQuantity(p))
			if acc[p.Lead] == nil {
				acc[p.Lead] = &Accumulator{}
			}
			acc[p.Lead].Add(p.Actual, p.Forecast)
		}
		if q, ok := poolOrigin(group, r.Decision); ok {
			pooled = append(pooled, q)
		}
	})
	for h, qs := range byLead {
		l := r.newLead(h, h, qs, true)
		l.Expected = acc[h].Metrics(spec.MASEScale)
		r.leads[h] = l
	}
	if len(pooled) > 0 {
		r.pooled = r.newLead(0, slices.Max(r.Decision), pooled, false)
	}
	return r
}

// newLead summarises one quantity series; lag is the lead that bounds the
// lag window (the largest decision lead for the pooled quantity).
func (r *Reference) newLead(lead, lag int, qs []Quantity, rmse bool) *LeadReference {
	abs, sq, e := make([]float64, len(qs)), make([]float64, len(qs)), make([]float64, len(qs))
	for i, q := range qs {
		abs[i], sq[i], e[i] = q.Abs, q.Sq, q.E
	}
	l := &LeadReference{Lead: lead, Abs: Summarize(abs, lag), Bias: Summarize(e, lag)}
	if rmse {
		l.Sq = Summarize(sq, lag)
	}
	l.Verdict = Usability(l.Abs)
	sizes := make([]int, r.Window)
	for i := range sizes {
		sizes[i] = i + 1
	}
	l.limits = make([]bandLimits, r.Window)
	usable := true
	for i, b := range l.Abs.Bands(MetricMAE, sizes...) {
		l.limits[i].mae, usable = [3]float64{b.Lower, b.Upper, b.AlarmUpper}, usable && b.Usable()
	}
	for i, b := range l.Bias.Bands(MetricME, sizes...) {
		l.limits[i].me, usable = [4]float64{b.Lower, b.Upper, b.AlarmLower, b.AlarmUpper}, usable && b.Usable()
	}
	if rmse {
		for i, b := range l.Sq.Bands(MetricRMSE, sizes...) {
			l.limits[i].rmse, usable = [3]float64{b.Lower, b.Upper, b.AlarmUpper}, usable && b.Usable()
		}
	}
	if !usable {
		l.limits = nil // Bands says why, size by size
	}
	return l
}

// Lead is the reference of lead h, or of the pooled quantity for h = 0;
// nil when the backtest has no pairs for it.
func (r *Reference) Lead(h int) *LeadReference {
	if h == 0 {
		return r.pooled
	}
	return r.leads[h]
}

// Bands returns the bands for a window of n origins: prepared for n up to
// the live window, computed for larger n (an accuracy query over a range).
func (l *LeadReference) Bands(n int) BandSet {
	if n < 1 || n > len(l.limits) {
		b := BandSet{MAE: l.Abs.Band(MetricMAE, n), ME: l.Bias.Band(MetricME, n)}
		if l.Lead > 0 {
			b.RMSE = l.Sq.Band(MetricRMSE, n)
		}
		return b
	}
	lim := l.limits[n-1]
	b := BandSet{
		MAE: l.Abs.bandOf(MetricMAE, n, lim.mae[0], lim.mae[1], math.Inf(-1), lim.mae[2]),
		ME:  l.Bias.bandOf(MetricME, n, lim.me[0], lim.me[1], lim.me[2], lim.me[3]),
	}
	if l.Lead > 0 {
		b.RMSE = l.Sq.bandOf(MetricRMSE, n, lim.rmse[0], lim.rmse[1], math.Inf(-1), lim.rmse[2])
	}
	return b
}

// bandOf is the band of metric m for n origins with the given bounds.
func (s *Summary) bandOf(m Metric, n int, lo, hi, alarmLo, alarmHi float64) Band {
	b := Band{Metric: m, N: n, Expected: s.Mean, Lower: lo, Upper: hi, AlarmLower: alarmLo, AlarmUpper: alarmHi, K: s.K, KEff: s.KEff}
	if m == MetricRMSE {
		b.Expected = math.Sqrt(s.Mean)
	}
	return b
}

func comparePairs(a, b Pair) int {
	return cmp.Or(a.Origin.Compare(b.Origin), cmp.Compare(a.Lead, b.Lead))
}

// eachOrigin calls f with each origin's pairs; ps is sorted by origin.
func eachOrigin(ps []Pair, f func(time.Time, []Pair)) {
	for i := 0; i < len(ps); {
		j := i + 1
		for j < len(ps) && ps[j].Origin.Equal(ps[i].Origin) {
			j++
		}
		f(ps[i].Origin, ps[i:j])
		i = j
	}
}
