package scoring

import (
	"errors"
	"fmt"
	"math"
)

// Metric names a metric that has a backtest band and can cause a drift
// state (method.md §4–5). Its values are the one spelling every layer
// uses: API, events, /metrics labels and the status page.
type Metric string

// The metrics with a band. RMSE's band is built on the MSE and
// square-rooted; ME is the mean error (bias).
const (
	MetricMAE  Metric = "mae"
	MetricRMSE Metric = "rmse"
	MetricME   Metric = "me"
)

// Quantities maps errors e_t (in origin order) to the per-origin quantity q_t
// whose mean the metric is: |e_t| for MAE, e_t² for RMSE (the band is built
// on the MSE), e_t for ME. It panics on an unknown metric.
func Quantities(m Metric, e []float64) []float64 {
	q := make([]float64, len(e))
	for i, x := range e {
		switch m {
		case MetricMAE:
			q[i] = math.Abs(x)
		case MetricRMSE:
			q[i] = x * x
		case MetricME:
			q[i] = x
		default:
			panic(fmt.Sprintf("scoring: unknown band metric %q", m))
		}
	}
	return q
}

// The constants of method.md §4 step 2 (Politis & White 2004): the run of
// insignificant autocorrelations that ends the lag search and the critical
// value's multiplier.
const (
	pwRun  = 5
	pwCrit = 1.96
)

// Summary is what the band construction of method.md §4 keeps of a
// per-origin series q_t (steps 1–4): everything needed to compute the band
// for a live window of any size n. Build it with [Summarize].
//
// When no band can be built (fewer than two origins, a non-finite value, or
// all values equal so that there is no spread), Unusable says why, K is
// still set, and every other number is NaN (Rho is nil, lags are 0). Check
// Unusable before using the numbers; [Summary.Band] carries the reason on.
type Summary struct {
	Lead int // the lead h; it enters the lag window's upper bound
	K    int // number of origins

	Mean float64 // c = mean(q)
	Var  float64 // s², divisor K−1

	// Rho[k-1] = ρ̂_k for k = 1..min(MMax+4, K−1): sample autocorrelations,
	// autocovariances with divisor K.
	Rho []float64

	MMax int     // largest lag the lag window may use
	Crit float64 // 1.96·√(log₁₀K / K)
	MHat int     // m̂ of the flat-top lag-window rule
	M    int     // min(2m̂, MMax): the lag window's bandwidth

	FK   float64 // f_K, clamped to [0.2, K]
	Nu   float64 // ν = max(K/f_K − 1, 2)
	KEff float64 // K/f_K

	Unusable string // non-empty when no band can be built: why
}

// Summarize computes the summary of q (in origin order) for lead h:
// method.md §4 steps 1–4.
//
// Reading of step 2: ρ̂_k is computed for k = 1..MMax+4 (as far as the
// K−1 available lags allow), and m̂ is the first j in 1..MMax such that
// |ρ̂_j| … |ρ̂_{j+4}| are all below Crit; a run that would need a lag
// beyond K−1 does not count. When there is no such j, m̂ is the largest lag
// k in 1..MMax with |ρ̂_k| > Crit, or 1 when there is none. The lag sums of
// step 3 stop at K−1 when M exceeds it (possible only for tiny K).
func Summarize(q []float64, lead int) Summary {
	K := len(q)
	nan := math.NaN()
	s := Summary{Lead: lead, K: K, Mean: nan, Var: nan, Crit: nan, FK: nan, Nu: nan, KEff: nan}
	switch K {
	case 0:
		s.Unusable = "no backtest origins"
		return s
	case 1:
		s.Unusable = "a single backtest origin: no spread to build a band from"
		return s
	}
	var sm sum
	for i, x := range q {
		if math.IsNaN(x) || math.IsInf(x, 0) {
			s.Unusable = fmt.Sprintf("backtest value %d of %d is not finite (%v)", i+1, K, x)
			return s
		}
		sm.add(x)
	}
	c := sm.value() / float64(K)
	d := make([]float64, K)
	var ss sum
	for i, x := range q {
		d[i] = x - c
		ss.add(d[i] * d[i])
	}
	gamma0 := ss.value() / float64(K)
	if !(gamma0 > 0) {
		s.Mean = c
		s.Unusable = fmt.Sprintf("all %d backtest values equal %v: zero spread, no band", K, q[0])
		return s
	}
	s.Mean = c
	s.Var = ss.value() / float64(K-1)

	kf := float64(K)
	s.MMax = max(int(math.Ceil(math.Sqrt(kf)))+pwRun, min(2*lead, K/3))
	s.Crit = pwCrit * math.Sqrt(math.Log10(kf)/kf)
	L := min(s.MMax+pwRun-1, K-1)
	s.Rho = make([]float64, L)
	for k := 1; k <= L; k++ {
		var g float64
		for t := 0; t+k < K; t++ {
			g += d[t] * d[t+k]
		}
		s.Rho[k-1] = (g / kf) / gamma0
	}
	s.MHat = selectMHat(s.Rho, s.MMax, s.Crit)
	s.M = min(2*s.MHat, s.MMax)

	fk := 1.0
	for k := 1; k <= min(s.M, L); k++ {
		fk += 2 * flatTop(float64(k)/float64(s.M)) * s.Rho[k-1]
	}
	s.FK = clamp(fk, 0.2, kf)
	s.KEff = kf / s.FK
	s.Nu = max(s.KEff-1, 2)
	return s
}

// selectMHat is m̂ of method.md §4 step 2 for autocorrelations
// rho[k-1] = ρ̂_k: see [Summarize] for the reading of the rule.
func selectMHat(rho []float64, mmax int, crit float64) int {
	for j := 1; j <= mmax && j+pwRun-1 <= len(rho); j++ {
		run := true
		for k := j; k < j+pwRun; k++ {
			if !(math.Abs(rho[k-1]) < crit) {
				run = false
				break
			}
		}
		if run {
			return j
		}
	}
	for k := min(mmax, len(rho)); k >= 1; k-- {
		if math.Abs(rho[k-1]) > crit {
			return k
		}
	}
	return 1
}

// flatTop is the trapezoidal flat-top lag window λ of Politis & White.
func flatTop(x float64) float64 {
	x = math.Abs(x)
	switch {
	case x < 0.5:
		return 1
	case x <= 1:
		return 2 * (1 - x)
	default:
		return 0
	}
}

func clamp(x, lo, hi float64) float64 { return math.Min(math.Max(x, lo), hi) }

// FactorN is f_n of method.md §4 step 3, the variance factor of a live
// window of n origins, clamped to [0.2, n]. NaN when the summary is
// unusable or n < 1.
func (s *Summary) FactorN(n int) float64 {
	if s.Unusable != "" || n < 1 {
		return math.NaN()
	}
	f := 1.0
	nf := float64(n)
	for k := 1; k <= min(n-1, s.M, len(s.Rho)); k++ {
		f += 2 * flatTop(float64(k)/float64(s.M)) * (1 - float64(k)/nf) * s.Rho[k-1]
	}
	return clamp(f, 0.2, nf)
}

// Variance is V of method.md §4 step 4, the prediction variance of the mean
// of q over a live window of n origins:
// s²·(f_n/n + f_K/K) / (1 − min(f_K/K, ½)).
func (s *Summary) Variance(n int) float64 {
	if s.Unusable != "" || n < 1 {
		return math.NaN()
	}
	kf := float64(s.K)
	return s.Var * (s.FactorN(n)/float64(n) + s.FK/kf) / (1 - math.Min(s.FK/kf, 0.5))
}

// ErrBandLevel is returned by [Summary.Bound] for a level outside (0, 1).
var ErrBandLevel = errors.New("band level must lie strictly between 0 and 1")

// Bound is the level-p bound of method.md §4 step 5 for metric m over a
// live window of n origins, in the metric's units (for RMSE, the square root
// of the MSE bound). ME uses the shifted and scaled Student t; MAE and MSE
// use the Gamma with mean c and variance V·τ_p². At p = ½, where τ_p is
// 0/0, τ is its limit φ(0)/f_ν(0). Bound returns NaN (and an error saying
// why) when the summary is unusable, n < 1, p is outside (0, 1), or, for
// MAE and RMSE, the mean is not positive.
func (s *Summary) Bound(m Metric, n int, p float64) (float64, error) {
	if err := s.check(m, n); err != nil {
		return math.NaN(), err
	}
	if !(p > 0 && p < 1) {
		return math.NaN(), fmt.Errorf("%w: %v", ErrBandLevel, p)
	}
	return s.bound(m, n, p, studentTQuantile(s.Nu, math.Max(p, 1-p))), nil
}

// check says why no bound of metric m can be computed for windows of n.
func (s *Summary) check(m Metric, n int) error {
	switch {
	case s.Unusable != "":
		return errors.New(s.Unusable)
	case m != MetricME && m != MetricMAE && m != MetricRMSE:
		return fmt.Errorf("unknown band metric %q", m)
	case n < 1:
		return fmt.Errorf("live window of %d origins: need at least 1", n)
	case m != MetricME && !(s.Mean > 0):
		return fmt.Errorf("backtest mean of the %s quantity is %v: a Gamma band needs a positive mean", m, s.Mean)
	}
	return nil
}

// bound is Bound after the checks, given tq = t_ν⁻¹(max(p, 1−p)); the t
// quantile is by far the costliest step, so [Summary.Bands] computes it once
// per level.
func (s *Summary) bound(m Metric, n int, p, tq float64) float64 {
	V := s.Variance(n)
	pp := math.Max(p, 1-p)
	if m == MetricME {
		return s.Mean + sign(p-0.5)*tq*math.Sqrt(V)
	}
	var tau float64
	if pp == 0.5 {
		tau = (1 / math.Sqrt(2*math.Pi)) / studentTDensity0(s.Nu)
	} else {
		tau = tq / normalQuantile(pp)
	}
	vp := V * tau * tau
	b := gammaQuantile(s.Mean*s.Mean/vp, s.Mean/vp, p)
	if m == MetricRMSE {
		b = math.Sqrt(b)
	}
	return b
}

func sign(x float64) float64 {
	switch {
	case x > 0:
		return 1
	case x < 0:
		return -1
	}
	return 0
}

// The levels of method.md §4: the displayed central 95% band, and the
// alarm limits, which share one false-alarm budget: MAE (and RMSE)
// one-sided upper at p = 0.995, ME two-sided at p = 0.001 and 0.999.
const (
	bandLow     = 0.025
	bandHigh    = 0.975
	alarmUpper  = 0.995
	alarmMELow  = 0.001
	alarmMEHigh = 0.999
)

// Band is the backtest band of one metric for a live window of N origins
// (method.md §4).
//
// For MAE and RMSE the alarm is one-sided: AlarmUpper is the p = 0.995
// bound and AlarmLower is −Inf (no lower alarm). For ME, AlarmLower and
// AlarmUpper are the p = 0.001 and p = 0.999 bounds.
//
// When no band can be built, Unusable says why and Expected, the bounds and
// possibly KEff are NaN; compare nothing against such a band.
type Band struct {
	Metric   Metric
	N        int     // live window size the band is for
	Expected float64 // c (MAE, ME) or √c (RMSE): the backtest value of the metric
	Lower    float64 // central 95% band, p = 0.025
	Upper    float64 // central 95% band, p = 0.975

	AlarmLower float64 // ME: p = 0.001; MAE and RMSE: −Inf
	AlarmUpper float64 // MAE and RMSE: p = 0.995; ME: p = 0.999

	K    int
	KEff float64 // of this metric's quantity

	Unusable string
}

// Usable reports whether the band can be judged against.
func (b Band) Usable() bool { return b.Unusable == "" }

// Band returns the band of metric m for a live window of n origins. The
// summary must be of m's quantity (see [Quantities]).
func (s *Summary) Band(m Metric, n int) Band { return s.Bands(m, n)[0] }

// Bands returns the bands of metric m for each window size in ns, e.g. every
// size a filling window passes through. It is cheaper than calling
// [Summary.Band] for each, since the t quantiles depend on the level only.
func (s *Summary) Bands(m Metric, ns ...int) []Band {
	nan := math.NaN()
	alarm := alarmUpper
	if m == MetricME {
		alarm = alarmMEHigh
	}
	var t95, tAlarm float64
	out := make([]Band, len(ns))
	for i, n := range ns {
		b := Band{Metric: m, N: n, Expected: s.Mean, Lower: nan, Upper: nan, AlarmLower: nan, AlarmUpper: nan,
			K: s.K, KEff: s.KEff}
		if m == MetricRMSE {
			b.Expected = math.Sqrt(s.Mean)
		}
		if err := s.check(m, n); err != nil {
			b.Unusable = err.Error()
			out[i] = b
			continue
		}
		if t95 == 0 {
			t95, tAlarm = studentTQuantile(s.Nu, bandHigh), studentTQuantile(s.Nu, alarm)
		}
		b.Lower, b.Upper = s.bound(m, n, bandLow, t95), s.bound(m, n, bandHigh, t95)
		if m == MetricME {
			b.AlarmLower, b.AlarmUpper = s.bound(m, n, alarmMELow, tAlarm), s.bound(m, n, alarmMEHigh, tAlarm)
		} else {
			b.AlarmLower, b.AlarmUpper = math.Inf(-1), s.bound(m, n, alarmUpper, tAlarm)
		}
		out[i] = b
	}
	return out
}

// The usable-baseline rule of method.md §4.
const (
	MinBaselineK    = 180 // backtest origins of the lead
	MinBaselineKEff = 30  // effective origins of |e|
)

// Verdict says whether a lead's baseline is usable (method.md §4): K ≥ 180
// and K_eff(|e|) ≥ 30. When it is not, the lead's state is
// insufficient_baseline and Reason names K and K_eff.
type Verdict struct {
	Usable bool
	K      int
	KEff   float64 // NaN when undefined
	Reason string  // empty when usable
}

// Usability judges a baseline from the summary of its |e| series.
func Usability(abs Summary) Verdict {
	v := Verdict{K: abs.K, KEff: abs.KEff}
	switch {
	case abs.Unusable != "":
		v.Reason = fmt.Sprintf("insufficient baseline: K=%d, K_eff undefined: %s", abs.K, abs.Unusable)
	case abs.K < MinBaselineK || !(abs.KEff >= MinBaselineKEff):
		v.Reason = fmt.Sprintf("insufficient baseline: K=%d (need ≥ %d), K_eff=%.1f (need ≥ %d)",
			abs.K, MinBaselineK, abs.KEff, MinBaselineKEff)
	default:
		v.Usable = true
	}
	return v
}
