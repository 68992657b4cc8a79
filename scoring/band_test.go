package scoring

import (
	"encoding/csv"
	"errors"
	"io"
	"math"
	"math/rand/v2"
	"os"
	"strconv"
	"strings"
	"testing"
)

// A series small enough to check by hand: q = (2, 4, 4, 4, 5, 5, 7, 9),
// K = 8, lead 1. c = 5; deviations (−3, −1, −1, −1, 0, 0, 2, 4), Σd² = 32,
// so s² = 32/7 and γ̂₀ = 4. Lag products: Σd_t d_{t+1} = 13, Σd_t d_{t+2} =
// 4, so ρ̂₁ = 13/32 and ρ̂₂ = 4/32. mmax = max(⌈√8⌉+5, min(2, 2)) = 8 and
// crit = 1.96·√(log₁₀8/8) ≈ 0.6585; ρ̂₁…ρ̂₅ = (13, 4, 1, −6, −6)/32 are all
// below it, so m̂ = 1 and M = 2. With λ(½) = 1 and λ(1) = 0:
// f_K = 1 + 2·13/32 = 1.8125, K_eff = 8/1.8125, ν = K_eff − 1;
// f_4 = 1 + 2·(3/4)·13/32 = 1.609375;
// V(4) = (32/7)·(1.609375/4 + 1.8125/8) / (1 − 1.8125/8).
func TestSummarizeByHand(t *testing.T) {
	t.Parallel()
	s := Summarize([]float64{2, 4, 4, 4, 5, 5, 7, 9}, 1)
	if s.Unusable != "" {
		t.Fatal(s.Unusable)
	}
	wantRho := []float64{13.0 / 32, 4.0 / 32, 1.0 / 32, -6.0 / 32, -6.0 / 32, -10.0 / 32, -12.0 / 32}
	if len(s.Rho) != len(wantRho) {
		t.Fatalf("%d autocorrelations, want %d (lags 1..K−1)", len(s.Rho), len(wantRho))
	}
	for k, w := range wantRho {
		if !relClose(s.Rho[k], w, 1e-14) {
			t.Errorf("ρ̂_%d = %v, want %v", k+1, s.Rho[k], w)
		}
	}
	for _, c := range []struct {
		name      string
		got, want float64
	}{
		{"c", s.Mean, 5},
		{"s²", s.Var, 32.0 / 7},
		{"mmax", float64(s.MMax), 8},
		{"crit", s.Crit, 1.96 * math.Sqrt(math.Log10(8)/8)},
		{"m̂", float64(s.MHat), 1},
		{"M", float64(s.M), 2},
		{"f_K", s.FK, 1.8125},
		{"K_eff", s.KEff, 8 / 1.8125},
		{"ν", s.Nu, 8/1.8125 - 1},
		{"f_4", s.FactorN(4), 1.609375},
		{"f_1", s.FactorN(1), 1},
		{"V(4)", s.Variance(4), (32.0 / 7) * (1.609375/4 + 1.8125/8) / (1 - 1.8125/8)},
	} {
		if !relClose(c.got, c.want, 1e-14) {
			t.Errorf("%s = %.17g, want %.17g", c.name, c.got, c.want)
		}
	}
	// ME bound by hand from the t quantile (itself checked against R).
	v := s.Variance(4)
	tq := studentTQuantile(s.Nu, 0.975)
	for p, want := range map[float64]float64{0.975: 5 + tq*math.Sqrt(v), 0.025: 5 - tq*math.Sqrt(v), 0.5: 5} {
		if got, err := s.Bound(MetricME, 4, p); err != nil || !relClose(got, want, 1e-14) {
			t.Errorf("ME bound p=%v = %v, %v; want %v", p, got, err, want)
		}
	}
}

// band_reference.csv holds the summary, f_n, V and bounds that an
// independent R implementation of method.md §4 (make_quantiles.R) computed
// for the series of band_series.csv.
func TestBandAgainstR(t *testing.T) {
	t.Parallel()
	series := map[string][]float64{}
	leads := map[string]int{}
	for _, rec := range readCSV(t, "../testdata/quantiles/band_series.csv", "case,lead,t,e") {
		series[rec[0]] = append(series[rec[0]], parseF(t, rec[3]))
		leads[rec[0]], _ = strconv.Atoi(rec[1])
	}
	sums := map[string]Summary{}
	checked := 0
	for _, rec := range readCSV(t, "../testdata/quantiles/band_reference.csv", "case,metric,n,field,value") {
		name, m, field, want := rec[0], Metric(rec[1]), rec[3], parseF(t, rec[4])
		n, _ := strconv.Atoi(rec[2])
		id := name + "/" + string(m)
		s, ok := sums[id]
		if !ok {
			s = Summarize(Quantities(m, series[name]), leads[name])
			if s.Unusable != "" {
				t.Fatalf("%s: %s", id, s.Unusable)
			}
			sums[id] = s
		}
		var got float64
		switch field {
		case "K":
			got = float64(s.K)
		case "c":
			got = s.Mean
		case "s2":
			got = s.Var
		case "mhat":
			got = float64(s.MHat)
		case "M":
			got = float64(s.M)
		case "fK":
			got = s.FK
		case "nu":
			got = s.Nu
		case "Keff":
			got = s.KEff
		case "fn":
			got = s.FactorN(n)
		case "V":
			got = s.Variance(n)
		default:
			ps, ok := strings.CutPrefix(field, "bound@")
			if !ok {
				t.Fatalf("unknown field %q", field)
			}
			var err error
			if got, err = s.Bound(m, n, parseF(t, ps)); err != nil {
				t.Fatalf("%s n=%d %s: %v", id, n, field, err)
			}
		}
		checked++
		if !relClose(got, want, 1e-9) {
			t.Errorf("%s n=%d %s = %.17g, R %.17g", id, n, field, got, want)
		}
	}
	if checked < 200 {
		t.Errorf("only %d reference values checked", checked)
	}
	// The reference series cover the three branches of the lag window:
	// a run found early, the f_K clamp at 0.2, and the fallback to the
	// largest significant lag (m̂ = mmax).
	if s := sums["slow/mae"]; s.MHat != s.MMax || s.FK <= 1 {
		t.Errorf("slow/mae: m̂ = %d, mmax = %d, f_K = %v; want the fallback branch", s.MHat, s.MMax, s.FK)
	}
	if s := sums["waves/mae"]; s.FK != 0.2 {
		t.Errorf("waves/mae: f_K = %v, want the clamp 0.2", s.FK)
	}
}

func readCSV(t *testing.T, path, header string) [][]string {
	t.Helper()
	f, err := os.Open(path)
	if err != nil {
		t.Fatal(err)
	}
	defer f.Close()
	r := csv.NewReader(f)
	r.Comment = '#'
	h, err := r.Read()
	if err != nil || strings.Join(h, ",") != header {
		t.Fatalf("%s: header %v, %v; want %s", path, h, err, header)
	}
	var out [][]string
	for {
		rec, err := r.Read()
		if errors.Is(err, io.EOF) {
			return out
		}
		if err != nil {
			t.Fatal(err)
		}
		out = append(out, rec)
	}
}

func parseF(t *testing.T, s string) float64 {
	t.Helper()
	x, err := strconv.ParseFloat(s, 64)
	if err != nil {
		t.Fatal(err)
	}
	return x
}

func normals(seed uint64, n int) []float64 {
	r := rand.New(rand.NewPCG(seed, 0))
	e := make([]float64, n)
	for i := range e {
		e[i] = r.NormFloat64()
	}
	return e
}

func ar1(seed uint64, n int, phi float64) []float64 {
	z := normals(seed, n)
	e := make([]float64, n)
	x := z[0] / math.Sqrt(1-phi*phi)
	for i := range e {
		if i > 0 {
			x = phi*x + z[i]
		}
		e[i] = x
	}
	return e
}

// Independent errors: the autocorrelations are noise of size 1/√K, the run
// of five insignificant lags starts at once, so M is small and f ≈ 1.
func TestSummarizeIndependent(t *testing.T) {
	t.Parallel()
	for _, m := range []Metric{MetricMAE, MetricRMSE, MetricME} {
		s := Summarize(Quantities(m, normals(7, 2000)), 1)
		if s.Unusable != "" {
			t.Fatal(s.Unusable)
		}
		if s.M > 4 || math.Abs(s.FK-1) > 0.15 || math.Abs(s.FactorN(30)-1) > 0.15 {
			t.Errorf("%s: m̂ = %d, M = %d, f_K = %v, f_30 = %v; want M ≤ 4 and f ≈ 1", m, s.MHat, s.M, s.FK, s.FactorN(30))
		}
		if s.KEff < 1700 || s.KEff > 2400 {
			t.Errorf("%s: K_eff = %v, want ≈ K = 2000", m, s.KEff)
		}
	}
}

// AR(1) errors with φ = 0.8: ρ_k(e) = 0.8^k, long-run factor (1+φ)/(1−φ)
// = 9 for the mean of e; |e| and e² are autocorrelated less (about φ²ᵏ).
func TestSummarizeAR1(t *testing.T) {
	t.Parallel()
	e := ar1(11, 4000, 0.8)
	me := Summarize(Quantities(MetricME, e), 1)
	if me.MHat < 5 || me.FK < 6 || me.FK > 12 || me.KEff > 4000/6.0 {
		t.Errorf("ME: m̂ = %d, f_K = %v, K_eff = %v; want f_K ≈ 9", me.MHat, me.FK, me.KEff)
	}
	if f30 := me.FactorN(30); f30 <= 1 || f30 >= me.FK {
		t.Errorf("ME: f_30 = %v, want between 1 and f_K = %v (the window's triangular weights)", f30, me.FK)
	}
	mae := Summarize(Quantities(MetricMAE, e), 1)
	if mae.FK <= 1.5 || mae.KEff >= float64(mae.K)/1.5 {
		t.Errorf("MAE: f_K = %v, K_eff = %v; want f_K > 1.5, K_eff < K/1.5", mae.FK, mae.KEff)
	}
	if mae.Nu != mae.KEff-1 {
		t.Errorf("ν = %v, want K_eff − 1 = %v", mae.Nu, mae.KEff-1)
	}
}

// The lag-window rule on crafted autocorrelations, crit = 0.1, mmax = 10:
// m̂ is the first j in 1..mmax opening a run of five lags below crit; a run
// may reach past mmax (lags up to mmax+4 are computed) but not past the
// lags there are; without a run, m̂ is the largest significant lag ≤ mmax,
// or 1.
func TestSelectMHat(t *testing.T) {
	t.Parallel()
	const crit, mmax = 0.1, 10
	hi, lo := 0.5, 0.01
	mk := func(sig ...int) []float64 { // ρ̂_1..ρ̂_14, significant at the given lags
		rho := make([]float64, mmax+4)
		for i := range rho {
			rho[i] = lo
		}
		for _, k := range sig {
			rho[k-1] = hi
		}
		return rho
	}
	cases := []struct {
		name string
		rho  []float64
		want int
	}{
		{"no significant lag", mk(), 1},
		{"run after lag 3", mk(1, 2, 3), 4},
		{"lag 1 significant: run from 2", mk(1), 2},
		{"isolated lag 7 breaks the runs from 3..7: run from 8", mk(1, 2, 7), 8},
		{"runs broken everywhere up to 10: first run at 11 is out of range", mk(1, 2, 3, 5, 7, 9, 10), 10},
		{"run opening at mmax uses lags up to mmax+4", mk(1, 2, 3, 4, 5, 6, 7, 8, 9), 10},
		{"no run, largest significant lag ≤ mmax", mk(1, 3, 5, 8, 12), 8},
		{"|ρ̂| = crit is neither below nor above", func() []float64 { r := mk(1, 2, 3, 4); r[4] = crit; return r }(), 6},
		{"too few lags for any run", []float64{hi, lo, hi}, 3},
		{"too few lags, none significant", []float64{lo, lo}, 1},
		{"negative autocorrelations count by magnitude", func() []float64 { r := mk(); r[0], r[1] = -hi, -hi; return r }(), 3},
	}
	for _, c := range cases {
		if got := selectMHat(c.rho, mmax, crit); got != c.want {
			t.Errorf("%s: m̂ = %d, want %d", c.name, got, c.want)
		}
	}
	for x, want := range map[float64]float64{0: 1, 0.49: 1, 0.5: 1, 0.75: 0.5, 1: 0, 1.2: 0, -0.75: 0.5} {
		if got := flatTop(x); got != want {
			t.Errorf("λ(%v) = %v, want %v", x, got, want)
		}
	}
}

func TestSummaryUnusable(t *testing.T) {
	t.Parallel()
	cases := []struct {
		name string
		q    []float64
		want string
	}{
		{"empty", nil, "no backtest origins"},
		{"one origin", []float64{1}, "single backtest origin"},
		{"constant", []float64{2, 2, 2, 2}, "zero spread"},
		{"all zero errors", make([]float64, 200), "zero spread"},
		{"NaN", []float64{1, math.NaN(), 2}, "not finite"},
		{"Inf", []float64{1, 2, math.Inf(1)}, "not finite"},
	}
	for _, c := range cases {
		s := Summarize(c.q, 1)
		if !strings.Contains(s.Unusable, c.want) || s.K != len(c.q) {
			t.Errorf("%s: Unusable = %q, K = %d; want %q, K = %d", c.name, s.Unusable, s.K, c.want, len(c.q))
		}
		for _, m := range []Metric{MetricMAE, MetricRMSE, MetricME} {
			b := s.Band(m, 30)
			if b.Usable() || b.Unusable != s.Unusable || !math.IsNaN(b.Upper) || !math.IsNaN(b.AlarmUpper) || b.K != len(c.q) {
				t.Errorf("%s %s: band %+v, want unusable with NaN bounds", c.name, m, b)
			}
		}
		if _, err := s.Bound(MetricMAE, 30, 0.5); err == nil {
			t.Errorf("%s: Bound without error", c.name)
		}
		if !math.IsNaN(s.Variance(30)) || !math.IsNaN(s.FactorN(30)) {
			t.Errorf("%s: V, f_n not NaN", c.name)
		}
		v := Usability(s)
		if v.Usable || !strings.Contains(v.Reason, "K="+strconv.Itoa(len(c.q))) || !strings.Contains(v.Reason, "K_eff") {
			t.Errorf("%s: verdict %+v", c.name, v)
		}
	}
	// Two distinct values are the smallest usable series.
	if s := Summarize([]float64{1, 3}, 1); s.Unusable != "" || s.Rho[0] != -0.5 {
		t.Errorf("K = 2: %q, ρ̂ = %v; want usable, ρ̂_1 = −½", s.Unusable, s.Rho)
	}
	// A zero mean is fine for ME but gives no Gamma band.
	s := Summarize([]float64{-1, 1, -1, 1, 1, -1}, 1)
	if b := s.Band(MetricME, 3); !b.Usable() || b.Expected != 0 || !(b.Lower < 0 && b.Upper > 0) {
		t.Errorf("ME with c = 0: %+v", b)
	}
	if b := s.Band(MetricMAE, 3); b.Usable() || !strings.Contains(b.Unusable, "positive mean") {
		t.Errorf("MAE with c = 0: %+v", b)
	}
	for _, n := range []int{0, -1} {
		if b := s.Band(MetricME, n); b.Usable() {
			t.Errorf("n = %d: usable band", n)
		}
	}
	for _, p := range []float64{0, 1, -0.1, math.NaN()} {
		if _, err := s.Bound(MetricME, 3, p); !errors.Is(err, ErrBandLevel) {
			t.Errorf("p = %v: err = %v, want ErrBandLevel", p, err)
		}
	}
}

func TestBandShape(t *testing.T) {
	t.Parallel()
	e := ar1(3, 365, 0.3)
	for _, m := range []Metric{MetricMAE, MetricRMSE, MetricME} {
		s := Summarize(Quantities(m, e), 1)
		prev := math.Inf(1)
		for _, n := range []int{7, 14, 30, 90} {
			b := s.Band(m, n)
			if !b.Usable() || b.N != n || b.K != 365 || b.KEff != s.KEff || b.Metric != m {
				t.Fatalf("%s n=%d: %+v", m, n, b)
			}
			if !(b.Lower < b.Expected && b.Expected < b.Upper && b.Upper < b.AlarmUpper) {
				t.Errorf("%s n=%d: bounds out of order: %+v", m, n, b)
			}
			if w := b.Upper - b.Lower; !(w < prev) {
				t.Errorf("%s n=%d: band width %v does not shrink with n", m, n, w)
			} else {
				prev = w
			}
			switch m {
			case MetricME:
				lo, _ := s.Bound(m, n, 0.001)
				hi, _ := s.Bound(m, n, 0.999)
				if b.AlarmLower != lo || b.AlarmUpper != hi {
					t.Errorf("ME n=%d: alarm band (%v, %v), want the p = 0.001, 0.999 bounds (%v, %v)", n, b.AlarmLower, b.AlarmUpper, lo, hi)
				}
				if !(b.AlarmLower < b.Lower) || !relClose(b.Upper-b.Expected, b.Expected-b.Lower, 1e-12) ||
					!relClose(b.AlarmUpper-b.Expected, b.Expected-b.AlarmLower, 1e-12) {
					t.Errorf("ME n=%d: not symmetric about c: %+v", n, b)
				}
			case MetricRMSE:
				mse, _ := s.Bound(MetricMAE, n, 0.995) // the same Gamma bound, not square-rooted
				if !math.IsInf(b.AlarmLower, -1) || !relClose(b.AlarmUpper, math.Sqrt(mse), 1e-15) || !relClose(b.Expected, math.Sqrt(s.Mean), 1e-15) {
					t.Errorf("RMSE n=%d: %+v, want √ of the MSE bounds", n, b)
				}
			case MetricMAE:
				hi, _ := s.Bound(m, n, 0.995)
				if !math.IsInf(b.AlarmLower, -1) || b.AlarmUpper != hi {
					t.Errorf("MAE n=%d: alarm (%v, %v), want (−Inf, the p = 0.995 bound %v)", n, b.AlarmLower, b.AlarmUpper, hi)
				}
			}
		}
	}
	// Bands gives the very bands Band and Bound give one by one.
	for _, m := range []Metric{MetricMAE, MetricRMSE, MetricME} {
		s := Summarize(Quantities(m, e), 1)
		ns := []int{7, 8, 13, 14, 30}
		for i, b := range s.Bands(m, ns...) {
			if one := s.Band(m, ns[i]); b != one {
				t.Errorf("%s n=%d: Bands %+v, Band %+v", m, ns[i], b, one)
			}
			if hi, _ := s.Bound(m, ns[i], 0.975); hi != b.Upper {
				t.Errorf("%s n=%d: Bound(0.975) = %v, band upper %v", m, ns[i], hi, b.Upper)
			}
		}
	}
	// At p = ½ the Gamma bound uses the limit of τ_p, so it is continuous.
	s := Summarize(Quantities(MetricMAE, e), 1)
	mid, err := s.Bound(MetricMAE, 30, 0.5)
	near, _ := s.Bound(MetricMAE, 30, 0.5+1e-9)
	if err != nil || !relClose(mid, near, 1e-8) {
		t.Errorf("MAE bound at p = ½: %v (%v), at ½+1e-9: %v", mid, err, near)
	}
}

func TestUsability(t *testing.T) {
	t.Parallel()
	cases := []struct {
		name   string
		e      []float64
		usable bool
		reason string
	}{
		{"iid K=365", normals(1, 365), true, ""},
		{"iid K=180", normals(2, 180), true, ""},
		{"iid K=179", normals(3, 179), false, "K=179 (need ≥ 180)"},
		{"AR(1) φ=0.97 K=200", ar1(4, 200, 0.97), false, "K=200 (need ≥ 180), K_eff="},
	}
	for _, c := range cases {
		s := Summarize(Quantities(MetricMAE, c.e), 1)
		v := Usability(s)
		if v.Usable != c.usable || !strings.Contains(v.Reason, c.reason) || v.K != len(c.e) || v.KEff != s.KEff {
			t.Errorf("%s: %+v (K_eff %v)", c.name, v, s.KEff)
		}
		if !c.usable && !strings.Contains(v.Reason, "K_eff=") {
			t.Errorf("%s: reason %q does not name K_eff", c.name, v.Reason)
		}
	}
}
