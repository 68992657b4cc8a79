package scoring

import "math"

// sum is a Kahan–Babuška–Neumaier compensated sum. Its error does not grow
// with the number of terms, which matters when 10^7 values near 1e9 are
// added; subtracting a term (for revisions) is adding its negation.
type sum struct{ s, c float64 }

func (k *sum) add(x float64) {
	t := k.s + x
	if math.Abs(k.s) >= math.Abs(x) {
		k.c += (k.s - t) + x
	} else {
		k.c += (x - t) + k.s
	}
	k.s = t
}

func (k *sum) merge(o sum) {
	k.add(o.s)
	k.add(o.c)
}

func (k sum) value() float64 { return k.s + k.c }

// Accumulator gathers the error metrics of method.md §2 over a stream of
// (actual, forecast) pairs in constant memory. Accumulators over disjoint
// sets of pairs can be merged, and a pair added earlier can be removed
// again, which is how a revised actual is re-scored. The zero value is an
// empty accumulator ready to use.
type Accumulator struct {
	n        int64
	e        sum // Σ e
	absE     sum // Σ |e|
	sqE      sum // Σ e²
	absY     sum // Σ |y|
	ape      sum // Σ |e|/|y| over y ≠ 0
	apeN     int64
	sape     sum // Σ 2|e|/(|y|+|ŷ|) over |y|+|ŷ| > 0
	sapeN    int64
	apeExcl  int64
	sapeExcl int64
}

// Add scores one pair: y is the actual, f the forecast; e = y − f.
func (a *Accumulator) Add(y, f float64) { a.update(y, f, 1) }

// Remove takes back a pair added earlier with the same values. Removing a
// pair that was never added leaves the accumulator meaningless.
func (a *Accumulator) Remove(y, f float64) { a.update(y, f, -1) }

func (a *Accumulator) update(y, f float64, sign float64) {
	e := y - f
	ae := math.Abs(e)
	ds := int64(sign)
	a.n += ds
	a.e.add(sign * e)
	a.absE.add(sign * ae)
	a.sqE.add(sign * e * e)
	a.absY.add(sign * math.Abs(y))
	if y != 0 {
		a.ape.add(sign * ae / math.Abs(y))
		a.apeN += ds
	} else {
		a.apeExcl += ds
	}
	if d := math.Abs(y) + math.Abs(f); d > 0 {
		a.sape.add(sign * 2 * ae / d)
		a.sapeN += ds
	} else {
		a.sapeExcl += ds
	}
}

// Merge adds every pair of b to a.
func (a *Accumulator) Merge(b *Accumulator) {
	a.n += b.n
	a.e.merge(b.e)
	a.absE.merge(b.absE)
	a.sqE.merge(b.sqE)
	a.absY.merge(b.absY)
	a.ape.merge(b.ape)
	a.apeN += b.apeN
	a.sape.merge(b.sape)
	a.sapeN += b.sapeN
	a.apeExcl += b.apeExcl
	a.sapeExcl += b.sapeExcl
}

// N is the number of pairs.
func (a *Accumulator) N() int64 { return a.n }

// Metrics are the error metrics of a set of pairs, as defined in method.md
// §2. Percent metrics (MAPE, SMAPE, WAPE) are in percent. A metric that is
// undefined for the set (no pairs, all actuals zero, unknown MASE scale) is
// NaN; use [Defined] to test for it.
type Metrics struct {
	N             int64
	ME            float64
	MAE           float64
	RMSE          float64
	MAPE          float64
	MAPEExcluded  int64 // pairs left out of MAPE because the actual is 0
	SMAPE         float64
	SMAPEExcluded int64 // pairs left out of sMAPE because |y|+|ŷ| = 0
	WAPE          float64
	MASE          float64
}

// Defined reports whether a metric value is defined (not NaN).
func Defined(x float64) bool { return !math.IsNaN(x) }

// Metrics returns the metrics of the pairs added so far. scale is the MASE
// scale (see [MASEScale]); pass NaN when it is unknown.
func (a *Accumulator) Metrics(scale float64) Metrics {
	nan := math.NaN()
	m := Metrics{N: a.n, ME: nan, MAE: nan, RMSE: nan, MAPE: nan, SMAPE: nan, WAPE: nan, MASE: nan,
		MAPEExcluded: a.apeExcl, SMAPEExcluded: a.sapeExcl}
	if a.n <= 0 {
		return m
	}
	n := float64(a.n)
	m.ME = a.e.value() / n
	m.MAE = nonNeg(a.absE.value()) / n
	m.RMSE = math.Sqrt(nonNeg(a.sqE.value()) / n)
	if a.apeN > 0 {
		m.MAPE = 100 * nonNeg(a.ape.value()) / float64(a.apeN)
	}
	if a.sapeN > 0 {
		m.SMAPE = 100 * nonNeg(a.sape.value()) / float64(a.sapeN)
	}
	if sy := a.absY.value(); sy > 0 {
		m.WAPE = 100 * nonNeg(a.absE.value()) / sy
	}
	if scale > 0 && !math.IsInf(scale, 0) {
		m.MASE = m.MAE / scale
	}
	return m
}

// nonNeg clamps the tiny negative residue that removing pairs from a sum of
// non-negative terms can leave behind.
func nonNeg(x float64) float64 { return max(x, 0) }

// MASEScale is the in-sample mean absolute seasonal difference of training
// actuals, mean over t of |y_t − y_{t−m}| (Hyndman & Koehler 2006). y must be
// on the series' grid in time order; a missing observation is NaN and every
// difference that touches it is skipped. m < 1 is taken as 1. The result is
// NaN when no difference can be formed; MASE is undefined for a scale of 0.
func MASEScale(y []float64, m int) float64 {
	m = max(m, 1)
	var s sum
	n := 0
	for t := m; t < len(y); t++ {
		d := y[t] - y[t-m]
		if math.IsNaN(d) {
			continue
		}
		s.add(math.Abs(d))
		n++
	}
	if n == 0 {
		return math.NaN()
	}
	return s.value() / float64(n)
}
