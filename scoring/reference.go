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
	Mode      ScaleMode // level scaling of §4a; "" is auto
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
	Expected      Metrics // every metric over the lead's backtest pairs, unscaled; zero for the pooled quantity
	// Scale is the level scale of §4a the quantities were divided by (b̂
	// and φ as fitted; b = 0 in absolute mode).
	Scale Scale
	// BacktestMAE is the plain mean |e| over the backtest (per origin for
	// the pooled quantity), the average the level-adjusted expectation of
	// a window is set beside.
	BacktestMAE float64
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
	byLead := map[int][][]Pair{}
	var pooled [][]Pair
	eachOrigin(ps, func(_ time.Time, group []Pair) {
		for i, p := range group {
			byLead[p.Lead] = append(byLead[p.Lead], group[i:i+1])
		}
		if dp := decisionPairs(group, r.Decision); len(dp) > 0 {
			pooled = append(pooled, dp)
		}
	})
	for h, origins := range byLead {
		sc := fitPairs(origins, spec.Window, spec.Mode)
		qs := make([]Quantity, len(origins))
		var acc Accumulator
		for i, o := range origins {
			qs[i] = pairQuantity(o[0], sc)
			acc.Add(o[0].Actual, o[0].Forecast)
		}
		l := r.newLead(h, h, qs, true)
		l.Scale, l.Expected = sc, acc.Metrics(spec.MASEScale)
		r.leads[h] = l
	}
	if len(pooled) > 0 {
		sc := fitPairs(pooled, spec.Window, spec.Mode)
		qs := make([]Quantity, len(pooled))
		for i, dp := range pooled {
			qs[i], _ = poolOrigin(dp, r.Decision, sc)
		}
		r.pooled = r.newLead(0, slices.Max(r.Decision), qs, false)
		r.pooled.Scale = sc
	}
	return r
}

// fitPairs fits the scale of a quantity to its backtest origins (each one
// pair, or the decision leads' pairs).
func fitPairs(origins [][]Pair, n int, mode ScaleMode) Scale {
	fs, es := make([][]float64, len(origins)), make([][]float64, len(origins))
	for i, o := range origins {
		fs[i], es[i] = make([]float64, len(o)), make([]float64, len(o))
		for j, p := range o {
			fs[i][j], es[i][j] = p.Forecast, p.Actual-p.Forecast
		}
	}
	return FitScale(fs, es, n, mode)
}

// newLead summarises one quantity series; lag is the lead that bounds the
// lag window (the largest decision lead for the pooled quantity).
func (r *Reference) newLead(lead, lag int, qs []Quantity, rmse bool) *LeadReference {
	abs, sq, e := make([]float64, len(qs)), make([]float64, len(qs)), make([]float64, len(qs))
	var plain sum
	for i, q := range qs {
		abs[i], sq[i], e[i] = q.Abs, q.Sq, q.E
		plain.add(q.UAbs)
	}
	l := &LeadReference{Lead: lead, Abs: Summarize(abs, lag), Bias: Summarize(e, lag), BacktestMAE: plain.value() / float64(len(qs))}
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

// InUnits turns bands of the scaled quantities into the series' unit for
// a window of these values (method.md §4a): MAE and ME bounds times the
// window's mean scale, RMSE bounds times the root of its mean squared
// scale — what the backtest promises for a window at these levels.
// Without scaling (scales of 1) the bands are unchanged.
func (b BandSet) InUnits(v WindowValues) BandSet {
	if v.N == 0 {
		return b
	}
	b.MAE, b.ME, b.RMSE = b.MAE.times(v.Scale), b.ME.times(v.Scale), b.RMSE.times(v.ScaleRMSE)
	return b
}

func (b Band) times(s float64) Band {
	if s == 1 || b.Metric == "" {
		return b
	}
	b.Expected, b.Lower, b.Upper, b.AlarmLower, b.AlarmUpper = b.Expected*s, b.Lower*s, b.Upper*s, b.AlarmLower*s, b.AlarmUpper*s
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
