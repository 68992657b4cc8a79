package scoring

import (
	"math"
	"testing"
)

// The slope of the fit is ordinary least squares. Anscombe's first data
// set (Anscombe 1973, The American Statistician 27(1), 17–21; R's
// datasets::anscombe) has the published regression line y = 3.00 + 0.500x;
// lm(y1 ~ x1, anscombe) gives slope 0.5000909 (value recalled from R's
// output, checked here to the published 3 decimals and to 1e-6 of it).
func TestBlockSlopeIsLeastSquares(t *testing.T) {
	t.Parallel()
	x := []float64{10, 8, 13, 9, 11, 14, 6, 4, 12, 7, 5}
	y := []float64{8.04, 6.95, 7.58, 8.81, 8.33, 9.96, 7.24, 4.26, 10.84, 4.82, 5.68}
	if b := blockSlope(x, y); math.Abs(b-0.5000909) > 1e-6 {
		t.Errorf("slope %v, want 0.5000909", b)
	}
}

// blocks builds n-origin blocks of one pair each: block j has forecast
// level[j] and errors ±c·level^beta, so its mean |e| is exactly that.
func blocks(levels []float64, n int, c, beta float64) (fs, es [][]float64) {
	for _, l := range levels {
		for i := range n {
			e := c * math.Pow(l, beta)
			if i%2 == 1 {
				e = -e
			}
			fs, es = append(fs, []float64{l}), append(es, []float64{e})
		}
	}
	return fs, es
}

// Worked by hand (method.md §4a): when each block's mean |e| is c·L^β for
// block level L, ln mean |e| = ln c + β ln L and the slope is β; φ is 5%
// of the mean |ŷ|. Steeper than 1 is clamped to 1, falling to 0.
func TestFitScale(t *testing.T) {
	t.Parallel()
	levels := []float64{100, 200, 400, 800}
	for _, c := range []struct {
		name   string
		levels []float64
		beta   float64
		mode   ScaleMode
		wantB  float64
	}{
		{"square root", levels, 0.5, ScaleAuto, 0.5},
		{"proportional", levels, 1, ScaleAuto, 1},
		{"steeper than 1: clamped", levels, 1.5, ScaleAuto, 1},
		{"falling: clamped to 0", levels, -0.5, ScaleAuto, 0},
		{"absolute mode", levels, 0.5, ScaleAbsolute, 0},
		{"three blocks: too few", levels[:3], 0.5, ScaleAuto, 0},
		{"levels within 10%", []float64{100, 103, 106, 109.9}, 1, ScaleAuto, 0},
	} {
		fs, es := blocks(c.levels, 6, 5, c.beta)
		// An incomplete last block is dropped: it would pull b̂ down.
		fs, es = append(fs, []float64{300}), append(es, []float64{0.001})
		sc := FitScale(fs, es, 6, c.mode)
		var mean float64
		for _, f := range fs {
			mean += f[0]
		}
		mean /= float64(len(fs))
		if math.Abs(sc.B-c.wantB) > 1e-12 || math.Abs(sc.Phi-0.05*mean) > 1e-9 {
			t.Errorf("%s: %+v, want b %v and φ %v", c.name, sc, c.wantB, 0.05*mean)
		}
	}
}

// The floor: a forecast below φ is scaled as φ; b = 0 scales nothing,
// whatever the forecast (zero included).
func TestScaleOf(t *testing.T) {
	t.Parallel()
	sc := Scale{B: 0.5, Phi: 4}
	for _, c := range []struct{ yhat, want float64 }{{100, 10}, {-100, 10}, {1, 2}, {0, 2}} {
		if got := sc.Of(c.yhat); got != c.want {
			t.Errorf("s(%v) = %v, want %v", c.yhat, got, c.want)
		}
	}
	if got := (Scale{Phi: 0}).Of(0); got != 1 {
		t.Errorf("b = 0: s(0) = %v, want 1", got)
	}
}

// A scaled window judges |e|/s and reports plain units beside the mean
// scale, so a band of the scaled quantity times the scale is in units.
func TestScaledWindow(t *testing.T) {
	t.Parallel()
	sc := Scale{B: 1, Phi: 1}
	w := NewWindow(3)
	for i, p := range []Pair{{Forecast: 10, Actual: 12}, {Forecast: 20, Actual: 16}, {Forecast: 40, Actual: 46}} {
		w.Push(day(i), pairQuantity(p, sc))
	}
	v := w.Values()
	// |e| = 2, 4, 6; s = 10, 20, 40; |e|/s = 0.2, 0.2, 0.15; e/s = 0.2, −0.2, 0.15.
	want := WindowValues{N: 3, MAE: 4, ME: 4.0 / 3, JudgedMAE: 0.55 / 3, JudgedME: 0.15 / 3, Scale: 70.0 / 3}
	if v.N != 3 || v.MAE != want.MAE || math.Abs(v.ME-want.ME) > 1e-15 || math.Abs(v.JudgedMAE-want.JudgedMAE) > 1e-15 ||
		math.Abs(v.JudgedME-want.JudgedME) > 1e-15 || math.Abs(v.Scale-want.Scale) > 1e-13 ||
		math.Abs(v.ScaleRMSE-math.Sqrt(2100.0/3)) > 1e-12 {
		t.Errorf("window %+v, want %+v and ScaleRMSE √700", v, want)
	}
	b := BandSet{MAE: Band{Metric: MetricMAE, Expected: 0.2, Lower: 0.1, Upper: 0.3, AlarmLower: math.Inf(-1), AlarmUpper: 0.4}}.InUnits(v)
	if math.Abs(b.MAE.Upper-0.3*70/3) > 1e-12 || math.Abs(b.MAE.Expected-0.2*70/3) > 1e-12 || !math.IsInf(b.MAE.AlarmLower, -1) {
		t.Errorf("band in units %+v", b.MAE)
	}
}
