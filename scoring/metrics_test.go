package scoring

import (
	"math"
	"math/rand/v2"
	"testing"
)

func relClose(a, b, tol float64) bool {
	if math.IsNaN(a) || math.IsNaN(b) {
		return math.IsNaN(a) && math.IsNaN(b)
	}
	if a == b {
		return true
	}
	return math.Abs(a-b) <= tol*math.Max(math.Abs(a), math.Abs(b))
}

func sameMetrics(t *testing.T, what string, got, want Metrics, tol float64) {
	t.Helper()
	if got.N != want.N || got.MAPEExcluded != want.MAPEExcluded || got.SMAPEExcluded != want.SMAPEExcluded {
		t.Errorf("%s: counts n=%d/%d mape_excl=%d/%d smape_excl=%d/%d", what,
			got.N, want.N, got.MAPEExcluded, want.MAPEExcluded, got.SMAPEExcluded, want.SMAPEExcluded)
	}
	for _, f := range []struct {
		name      string
		got, want float64
	}{
		{"ME", got.ME, want.ME}, {"MAE", got.MAE, want.MAE}, {"RMSE", got.RMSE, want.RMSE},
		{"MAPE", got.MAPE, want.MAPE}, {"sMAPE", got.SMAPE, want.SMAPE}, {"WAPE", got.WAPE, want.WAPE},
		{"MASE", got.MASE, want.MASE},
	} {
		if !relClose(f.got, f.want, tol) {
			t.Errorf("%s: %s = %.17g, want %.17g", what, f.name, f.got, f.want)
		}
	}
}

// The worked example of method.md §2, computed by hand there.
func TestWorkedExample(t *testing.T) {
	t.Parallel()
	var a Accumulator
	for _, p := range [][2]float64{{10, 8}, {0, 1}, {5, 5}} {
		a.Add(p[0], p[1])
	}
	scale := MASEScale([]float64{4, 6, 5, 7}, 1)
	if !relClose(scale, 5.0/3, 1e-15) {
		t.Fatalf("MASE scale = %v, want 5/3", scale)
	}
	want := Metrics{N: 3, ME: 1.0 / 3, MAE: 1, RMSE: 1.2909944487358056, MAPE: 10, MAPEExcluded: 1,
		SMAPE: 74.07407407407408, WAPE: 20, MASE: 0.6}
	sameMetrics(t, "worked example", a.Metrics(scale), want, 1e-14)
}

func TestUndefinedMetrics(t *testing.T) {
	t.Parallel()
	var empty Accumulator
	m := empty.Metrics(1)
	for name, v := range map[string]float64{"ME": m.ME, "MAE": m.MAE, "RMSE": m.RMSE, "MAPE": m.MAPE, "sMAPE": m.SMAPE, "WAPE": m.WAPE, "MASE": m.MASE} {
		if Defined(v) {
			t.Errorf("empty accumulator: %s = %v, want undefined", name, v)
		}
	}
	var zeros Accumulator
	zeros.Add(0, 0)
	zeros.Add(0, 2)
	m = zeros.Metrics(NoScale)
	if Defined(m.MAPE) || m.MAPEExcluded != 2 {
		t.Errorf("all-zero actuals: MAPE = %v excluded %d; want undefined, 2", m.MAPE, m.MAPEExcluded)
	}
	if Defined(m.WAPE) || Defined(m.MASE) {
		t.Errorf("all-zero actuals: WAPE %v MASE %v; want undefined", m.WAPE, m.MASE)
	}
	if m.SMAPEExcluded != 1 || m.SMAPE != 200 {
		t.Errorf("sMAPE = %v excluded %d; want 200 over one pair, 1 excluded", m.SMAPE, m.SMAPEExcluded)
	}
	if got := zeros.Metrics(0).MASE; Defined(got) {
		t.Errorf("MASE with scale 0 = %v, want undefined", got)
	}
}

func randomPairs(r *rand.Rand, n int) [][2]float64 {
	ps := make([][2]float64, n)
	for i := range ps {
		y := math.Round(r.NormFloat64()*50+100) / 4 // some exact zeros and repeats
		if r.IntN(10) == 0 {
			y = 0
		}
		ps[i] = [2]float64{y, y + r.NormFloat64()*3}
	}
	return ps
}

// Merging accumulators over a split of the pairs equals one accumulator
// over all of them, and removing pairs equals never adding them.
func TestMergeAndRemove(t *testing.T) {
	t.Parallel()
	r := rand.New(rand.NewPCG(1, 2))
	for trial := range 50 {
		ps := randomPairs(r, 1+r.IntN(400))
		cut := r.IntN(len(ps) + 1)
		var all, left, right Accumulator
		for i, p := range ps {
			all.Add(p[0], p[1])
			if i < cut {
				left.Add(p[0], p[1])
			} else {
				right.Add(p[0], p[1])
			}
		}
		left.Merge(&right)
		sameMetrics(t, "merge", left.Metrics(1.5), all.Metrics(1.5), 1e-12)

		// Remove a random subset, compare with the accumulator of the rest.
		var kept Accumulator
		for _, p := range ps {
			if r.IntN(3) == 0 {
				all.Remove(p[0], p[1])
			} else {
				kept.Add(p[0], p[1])
			}
		}
		if kept.N() == 0 {
			continue
		}
		sameMetrics(t, "remove", all.Metrics(1.5), kept.Metrics(1.5), 1e-9)
		_ = trial
	}
}

// A revision replaces an actual: remove the old pair and add the new one.
func TestRevisionLeavesOnlyNewestValue(t *testing.T) {
	t.Parallel()
	var live, fresh Accumulator
	live.Add(100, 90)
	live.Add(50, 55)
	live.Remove(100, 90)
	live.Add(95, 90) // actual revised from 100 to 95
	fresh.Add(95, 90)
	fresh.Add(50, 55)
	sameMetrics(t, "revision", live.Metrics(NoScale), fresh.Metrics(NoScale), 1e-15)
}

// pairwiseSum has error growth O(log n)·ε, a reference the compensated
// accumulator must match without itself being naive.
func pairwiseSum(xs []float64) float64 {
	if len(xs) <= 64 {
		s := 0.0
		for _, x := range xs {
			s += x
		}
		return s
	}
	m := len(xs) / 2
	return pairwiseSum(xs[:m]) + pairwiseSum(xs[m:])
}

// 10^7 pairs of values near 1e9 agree with a two-pass float64 computation
// (errors first, then pairwise sums of each term) to 1e-9 relative.
func TestStabilityTenMillionPairsNear1e9(t *testing.T) {
	t.Parallel()
	if testing.Short() {
		t.Skip("10^7 pairs: skipped under -short")
	}
	const n = 10_000_000
	r := rand.New(rand.NewPCG(7, 9))
	ys := make([]float64, n)
	fs := make([]float64, n)
	var acc Accumulator
	for i := range n {
		y := 1e9 + r.Float64()*1e3
		f := y + r.NormFloat64()*10 + 0.5 // a bias, so ME is far from zero-cancellation
		ys[i], fs[i] = y, f
		acc.Add(y, f)
	}
	terms := make([]float64, n)
	mean := func(term func(i int) float64) float64 {
		for i := range n {
			terms[i] = term(i)
		}
		return pairwiseSum(terms) / n
	}
	me := mean(func(i int) float64 { return ys[i] - fs[i] })
	mae := mean(func(i int) float64 { return math.Abs(ys[i] - fs[i]) })
	mse := mean(func(i int) float64 { e := ys[i] - fs[i]; return e * e })
	mape := 100 * mean(func(i int) float64 { return math.Abs(ys[i]-fs[i]) / math.Abs(ys[i]) })
	smape := 100 * mean(func(i int) float64 { return 2 * math.Abs(ys[i]-fs[i]) / (math.Abs(ys[i]) + math.Abs(fs[i])) })
	sumAbsY := mean(func(i int) float64 { return math.Abs(ys[i]) }) * n
	want := Metrics{N: n, ME: me, MAE: mae, RMSE: math.Sqrt(mse), MAPE: mape, SMAPE: smape,
		WAPE: 100 * mae * n / sumAbsY, MASE: mae / 2}
	sameMetrics(t, "1e7 pairs near 1e9", acc.Metrics(2), want, 1e-9)

	// The same pairs split in ten merged accumulators agree too.
	var merged Accumulator
	for part := range 10 {
		var a Accumulator
		for i := part * n / 10; i < (part+1)*n/10; i++ {
			a.Add(ys[i], fs[i])
		}
		merged.Merge(&a)
	}
	sameMetrics(t, "1e7 pairs merged", merged.Metrics(2), want, 1e-9)
}

func TestMASEScale(t *testing.T) {
	t.Parallel()
	nan := math.NaN()
	cases := []struct {
		name string
		y    []float64
		m    int
		want float64
	}{
		{"method.md example", []float64{4, 6, 5, 7}, 1, 5.0 / 3},
		{"m below 1 is 1", []float64{4, 6, 5, 7}, 0, 5.0 / 3},
		{"seasonal m=2", []float64{1, 10, 3, 14, 2}, 2, (2 + 4 + 1) / 3.0},
		{"gap skips both differences", []float64{1, 2, nan, 4, 6}, 1, (1 + 2) / 2.0},
		{"too short", []float64{1, 2}, 2, nan},
		{"constant", []float64{3, 3, 3}, 1, 0},
	}
	for _, c := range cases {
		if got := MASEScale(c.y, c.m); !relClose(got, c.want, 1e-15) {
			t.Errorf("%s: %v, want %v", c.name, got, c.want)
		}
	}
}

func TestTabulate(t *testing.T) {
	t.Parallel()
	pairs := []Pair{{Lead: 2, Actual: 10, Forecast: 8}, {Lead: 1, Actual: 0, Forecast: 1}, {Lead: 2, Actual: 5, Forecast: 5}}
	tab := Tabulate(pairs, NoScale)
	if len(tab.Leads) != 2 || tab.Leads[0].Lead != 1 || tab.Leads[1].Lead != 2 {
		t.Fatalf("leads = %+v, want 1 then 2", tab.Leads)
	}
	if tab.Leads[0].N != 1 || tab.Leads[1].N != 2 || tab.Overall.N != 3 {
		t.Errorf("counts %d %d overall %d", tab.Leads[0].N, tab.Leads[1].N, tab.Overall.N)
	}
	if tab.Leads[1].MAE != 1 || !relClose(tab.Overall.RMSE, 1.2909944487358056, 1e-15) {
		t.Errorf("lead 2 MAE %v, overall RMSE %v", tab.Leads[1].MAE, tab.Overall.RMSE)
	}
}
