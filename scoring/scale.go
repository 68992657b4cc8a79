package scoring

import (
	"fmt"
	"math"
)

// ScaleMode is how a series' errors are scaled before they are judged
// (method.md §4a).
type ScaleMode string

// The modes of §4a. The zero value is ScaleAuto, the default.
const (
	ScaleAuto     ScaleMode = "auto"     // b̂ as fitted to the backtest
	ScaleAbsolute ScaleMode = "absolute" // b = 0: the plain band of §4
)

// ParseScaleMode reads a mode as the API and the CLI spell it; "" is auto.
func ParseScaleMode(s string) (ScaleMode, error) {
	switch ScaleMode(s) {
	case "", ScaleAuto:
		return ScaleAuto, nil
	case ScaleAbsolute:
		return ScaleAbsolute, nil
	}
	return "", fmt.Errorf("error scale %q: want auto or absolute", s)
}

// The constants of the fit of §4a.
const (
	scaleFloor     = 0.05 // φ as a share of the mean |ŷ|
	scaleMinBlocks = 4    // fewer blocks: b̂ = 0
)

// scaleMinSpread is ln 1.1: block levels spread less than 10% leave
// nothing to scale.
var scaleMinSpread = math.Log(1.1)

// Scale is the level scale of one quantity (a lead, or the pooled
// decision-lead quantity): s(ŷ) = max(|ŷ|, Phi)^B. B = 0 makes every scale
// 1, the plain band.
type Scale struct {
	B   float64 `json:"b"`
	Phi float64 `json:"phi"`
}

// Of is the scale of a pair whose forecast is yhat.
func (s Scale) Of(yhat float64) float64 {
	if s.B == 0 {
		return 1
	}
	return math.Pow(math.Max(math.Abs(yhat), s.Phi), s.B)
}

// FitScale fits the scale of a quantity to its backtest (method.md §4a).
// forecasts[t] and errors[t] are the forecasts and errors of the t-th
// backtest origin in origin order: one each for a lead, one per decision
// lead for the pooled quantity. φ is 5% of the mean |ŷ| over all of them;
// b̂ is the least-squares slope of ln(mean |e|) on ln(mean max(|ŷ|, φ)) over
// consecutive blocks of n origins (an incomplete last block dropped),
// clamped to [0, 1]; 0 with fewer than 4 blocks, block levels that spread
// less than 10%, or a block whose mean |e| is 0. ScaleAbsolute keeps φ for
// the record and sets b = 0.
func FitScale(forecasts, errors [][]float64, n int, mode ScaleMode) Scale {
	var all sum
	var count int
	for _, fs := range forecasts {
		for _, f := range fs {
			all.add(math.Abs(f))
			count++
		}
	}
	if count == 0 {
		return Scale{}
	}
	s := Scale{Phi: scaleFloor * all.value() / float64(count)}
	if mode == ScaleAbsolute || n < 1 {
		return s
	}
	var xs, ys []float64
	for start := 0; start+n <= len(forecasts); start += n {
		var lv, ae sum
		var k int
		for t := start; t < start+n; t++ {
			for i, f := range forecasts[t] {
				lv.add(math.Max(math.Abs(f), s.Phi))
				ae.add(math.Abs(errors[t][i]))
				k++
			}
		}
		xs, ys = append(xs, math.Log(lv.value()/float64(k))), append(ys, math.Log(ae.value()/float64(k)))
	}
	s.B = blockSlope(xs, ys)
	return s
}

// blockSlope is the clamped least-squares slope of y on x, or 0 when the
// blocks cannot support one.
func blockSlope(xs, ys []float64) float64 {
	if len(xs) < scaleMinBlocks {
		return 0
	}
	lo, hi := math.Inf(1), math.Inf(-1)
	var mx, my sum
	for i := range xs {
		if math.IsInf(xs[i], 0) || math.IsNaN(xs[i]) || math.IsInf(ys[i], 0) || math.IsNaN(ys[i]) {
			return 0
		}
		lo, hi = math.Min(lo, xs[i]), math.Max(hi, xs[i])
		mx.add(xs[i])
		my.add(ys[i])
	}
	if hi-lo < scaleMinSpread {
		return 0
	}
	k := float64(len(xs))
	xbar, ybar := mx.value()/k, my.value()/k
	var sxy, sxx sum
	for i := range xs {
		sxy.add((xs[i] - xbar) * (ys[i] - ybar))
		sxx.add((xs[i] - xbar) * (xs[i] - xbar))
	}
	return math.Min(math.Max(sxy.value()/sxx.value(), 0), 1)
}
