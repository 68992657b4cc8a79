package scoring

import (
	"encoding/binary"
	"hash/fnv"
	"math"
	"time"
)

// Quantity is what one scored pair, or one origin's pooled decision leads,
// contributes to a live window and to a band (method.md §4 step 1): |e|
// for MAE, e² for RMSE (the band is built on the MSE), e for ME. The
// backtest and production go through the same functions, so a window and
// its band always measure the same thing.
type Quantity struct {
	Abs, Sq, E float64
}

// pairQuantity is the quantity of one pair, e = actual − forecast.
func pairQuantity(p Pair) Quantity {
	e := p.Actual - p.Forecast
	return Quantity{Abs: math.Abs(e), Sq: e * e, E: e}
}

// poolOrigin is the pooled quantity of one origin (method.md §5): the mean
// over the decision leads of |e| and of e. ps are the origin's pairs in
// ascending lead order; ok is false when a decision lead has no pair (such
// an origin does not count for the series state). The pooled quantity has
// no RMSE: Sq is NaN.
func poolOrigin(ps []Pair, decision []int) (q Quantity, ok bool) {
	var a, b sum
	i := 0
	for _, h := range decision {
		for i < len(ps) && ps[i].Lead < h {
			i++
		}
		if i == len(ps) || ps[i].Lead != h {
			return Quantity{}, false
		}
		x := pairQuantity(ps[i])
		a.add(x.Abs)
		b.add(x.E)
	}
	n := float64(len(decision))
	return Quantity{Abs: a.value() / n, Sq: math.NaN(), E: b.value() / n}, len(decision) > 0
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

// WindowValues are the metrics of a window: its size, MAE, RMSE and ME
// (NaN when the window is empty; RMSE NaN for the pooled quantity).
type WindowValues struct {
	N             int
	MAE, RMSE, ME float64
}

// Values computes the window's metrics. The sums run over the entries
// oldest first every time, rather than being kept running: then a window
// rebuilt from stored pairs after a restart has bitwise the values of one
// that slid there, which is what makes the state a function of the data.
func (w *Window) Values() WindowValues {
	n := len(w.qs)
	if n == 0 {
		nan := math.NaN()
		return WindowValues{MAE: nan, RMSE: nan, ME: nan}
	}
	var a, s, e float64
	for i := range n {
		q := w.qs[(w.head+i)%n]
		a += q.Abs
		s += q.Sq
		e += q.E
	}
	nf := float64(n)
	return WindowValues{N: n, MAE: a / nf, RMSE: math.Sqrt(s / nf), ME: e / nf}
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
	out := make([]Judgement, 0, len(pairs))
	for _, p := range pairs {
		w.Push(p.Origin, pairQuantity(p))
		j := Judgement{Origin: p.Origin, Lead: p.Lead, WindowValues: w.Values()}
		if l != nil {
			j.Bands = l.Bands(j.N)
		}
		out = append(out, j)
	}
	return out
}
