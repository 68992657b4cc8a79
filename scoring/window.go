package scoring

import (
	"encoding/binary"
	"hash/fnv"
	"math"
	"time"
)

// Quantity is what one scored pair, or one origin's pooled decision leads,
// contributes to a live window and to a band (method.md §4 step 1): |e|
// for MAE, e² for RMSE (the band is built on the MSE), e for ME, each
// divided by the level scale of §4a — these are what is judged — and the
// same in the series' unit, with the scale, for what people read. The
// backtest and production go through the same functions, so a window and
// its band always measure the same thing.
type Quantity struct {
	Abs, Sq, E    float64 // judged: |e|/s, e²/s², e/s
	UAbs, USq, UE float64 // in the series' unit
	S, S2         float64 // s(ŷ) and s(ŷ)² (means over the decision leads for the pooled quantity)
}

// pairQuantity is the quantity of one pair, e = actual − forecast, under
// the scale sc.
func pairQuantity(p Pair, sc Scale) Quantity {
	e := p.Actual - p.Forecast
	s := sc.Of(p.Forecast)
	return Quantity{Abs: math.Abs(e) / s, Sq: e * e / (s * s), E: e / s, UAbs: math.Abs(e), USq: e * e, UE: e, S: s, S2: s * s}
}

// poolOrigin is the pooled quantity of one origin (method.md §5): the mean
// over the decision leads of each pair's quantity under the pooled scale
// sc. ps are the origin's pairs in ascending lead order; ok is false when
// a decision lead has no pair (such an origin does not count for the
// series state). The pooled quantity has no RMSE: Sq and USq are NaN.
func poolOrigin(ps []Pair, decision []int, sc Scale) (q Quantity, ok bool) {
	dp := decisionPairs(ps, decision)
	if len(dp) == 0 {
		return Quantity{}, false
	}
	var a, e, ua, ue, s, s2 sum
	for _, p := range dp {
		x := pairQuantity(p, sc)
		a.add(x.Abs)
		e.add(x.E)
		ua.add(x.UAbs)
		ue.add(x.UE)
		s.add(x.S)
		s2.add(x.S2)
	}
	n := float64(len(dp))
	nan := math.NaN()
	return Quantity{Abs: a.value() / n, Sq: nan, E: e.value() / n, UAbs: ua.value() / n, USq: nan, UE: ue.value() / n,
		S: s.value() / n, S2: s2.value() / n}, true
}

// decisionPairs are the pairs of an origin's decision leads, or nil when
// one is missing.
func decisionPairs(ps []Pair, decision []int) []Pair {
	out := make([]Pair, 0, len(decision))
	i := 0
	for _, h := range decision {
		for i < len(ps) && ps[i].Lead < h {
			i++
		}
		if i == len(ps) || ps[i].Lead != h {
			return nil
		}
		out = append(out, ps[i])
	}
	return out
}

// Window is a live window of method.md §5: the last n origins' quantities
// of one lead (or of the pooled quantity), oldest first. The zero value is
// unusable; make one with [NewWindow].
type Window struct {
	origins []time.Time
	qs      []Quantity
	head    int // index of the oldest entry once the ring is full
}

// NewWindow returns an empty window of n origins.
func NewWindow(n int) *Window {
	return &Window{origins: make([]time.Time, 0, n), qs: make([]Quantity, 0, n)}
}

// Push adds the quantity of a newer origin, dropping the oldest when full.
func (w *Window) Push(origin time.Time, q Quantity) {
	if len(w.qs) < cap(w.qs) {
		w.origins, w.qs = append(w.origins, origin), append(w.qs, q)
		return
	}
	w.origins[w.head], w.qs[w.head] = origin, q
	w.head = (w.head + 1) % len(w.qs)
}

// Len is the number of origins in the window.
func (w *Window) Len() int { return len(w.qs) }

// Oldest is the origin of the oldest entry; zero when empty.
func (w *Window) Oldest() time.Time {
	if len(w.qs) == 0 {
		return time.Time{}
	}
	return w.origins[w.head]
}

// WindowValues are the metrics of a window: its size; MAE, RMSE and ME in
// the series' unit, which people read; the same metrics of the scaled
// quantities, which the detector judges against the bands; and the
// window's mean scale, which turns a band into the series' unit (method.md
// §4a). Metrics are NaN when the window is empty; RMSE is NaN for the
// pooled quantity. Without scaling the judged metrics equal the others and
// the scales are 1.
type WindowValues struct {
	N                               int
	MAE, RMSE, ME                   float64
	JudgedMAE, JudgedRMSE, JudgedME float64
	// Scale is the mean s(ŷ) over the window's pairs; ScaleRMSE the root of
	// the mean s(ŷ)², for RMSE.
	Scale, ScaleRMSE float64
}

// Values computes the window's metrics. The sums run over the entries
// oldest first every time, rather than being kept running: then a window
// rebuilt from stored pairs after a restart has bitwise the values of one
// that slid there, which is what makes the state a function of the data.
func (w *Window) Values() WindowValues {
	n := len(w.qs)
	if n == 0 {
		nan := math.NaN()
		return WindowValues{MAE: nan, RMSE: nan, ME: nan, JudgedMAE: nan, JudgedRMSE: nan, JudgedME: nan, Scale: nan, ScaleRMSE: nan}
	}
	var a, s, e, ua, us, ue, sc, sc2 float64
	for i := range n {
		q := w.qs[(w.head+i)%n]
		a += q.Abs
		s += q.Sq
		e += q.E
		ua += q.UAbs
		us += q.USq
		ue += q.UE
		sc += q.S
		sc2 += q.S2
	}
	nf := float64(n)
	return WindowValues{N: n, MAE: ua / nf, RMSE: math.Sqrt(us / nf), ME: ue / nf,
		JudgedMAE: a / nf, JudgedRMSE: math.Sqrt(s / nf), JudgedME: e / nf, Scale: sc / nf, ScaleRMSE: math.Sqrt(sc2 / nf)}
}

// fingerprint hashes the window's origins and quantities, oldest first; 0
// for an empty window.
func (w *Window) fingerprint() uint64 {
	n := len(w.qs)
	if n == 0 {
		return 0
	}
	h := fnv.New64a()
	var b [32]byte
	for i := range n {
		j := (w.head + i) % n
		q := w.qs[j]
		binary.LittleEndian.PutUint64(b[0:], uint64(w.origins[j].UnixNano()))
		binary.LittleEndian.PutUint64(b[8:], math.Float64bits(q.Abs))
		binary.LittleEndian.PutUint64(b[16:], math.Float64bits(q.Sq))
		binary.LittleEndian.PutUint64(b[24:], math.Float64bits(q.E))
		h.Write(b[:])
	}
	return h.Sum64()
}

// Windows is the window of every origin of one lead's pairs (sorted by
// origin), as a replay judges it, with the bands for its size: a lead's
// windowed metrics beside its band, for charts. Without a reference (l
// nil) the bands are zero.
func Windows(l *LeadReference, n int, pairs []Pair) []Judgement {
	w := NewWindow(n)
	var sc Scale
	if l != nil {
		sc = l.Scale
	}
	out := make([]Judgement, 0, len(pairs))
	for _, p := range pairs {
		w.Push(p.Origin, pairQuantity(p, sc))
		j := Judgement{Origin: p.Origin, Lead: p.Lead, WindowValues: w.Values()}
		if l != nil {
			j.Judged = l.Bands(j.N)
			j.Bands = j.Judged.InUnits(j.WindowValues)
		}
		out = append(out, j)
	}
	return out
}
