package scoring

import (
	"cmp"
	"fmt"
	"time"
)

// State is a drift state of method.md §5, of one lead or of a series.
type State string

// The drift states.
const (
	StateInsufficientData     State = "insufficient_data"     // fewer than n_min pairs in the window
	StateWithin               State = "within"                // the window behaves like the backtest
	StateDegraded             State = "degraded"              // MAE above its alarm limit or ME outside its alarm band
	StateImproved             State = "improved"              // MAE below the 95% band (informational)
	StateInsufficientBaseline State = "insufficient_baseline" // the baseline is unusable; set from outside
)

// The defaults of method.md §6 the detector uses.
const (
	DriftWindow       = 30 // live window n: the last 30 scored origins
	DriftMinPairs     = 7  // n_min: fewer pairs give insufficient_data
	DriftShortWindow  = 14 // windows of fewer pairs need DriftShortPersist calls
	DriftShortPersist = 3  // m for 7 ≤ n < 14 (m = 1 from 14 on)
	DriftHysteresis   = 3  // consecutive evaluations to leave degraded, and to enter or leave improved
)

// ChanceRunLength is the mean in-control run length of the series state
// at the defaults, in origins, for iid errors: a healthy series pages by
// chance about once per this many origins (docs/calibration.md, target 6:
// 1390.8 over 2000 runs, capped at 20 000; median 720.5). Autocorrelated
// errors page less often, so figures built on it err towards more pages.
const ChanceRunLength = 1391

// ChancePagesPerWeek is how many pages a healthy series whose origins come
// every interval is expected to raise by chance in a week (method.md §5);
// 0 for a non-positive interval.
func ChancePagesPerWeek(interval time.Duration) float64 {
	if interval <= 0 {
		return 0
	}
	return float64(7*24*time.Hour) / float64(interval) / ChanceRunLength
}

// Evaluation is one judgement of a live window: its size, its MAE and ME,
// and the bands for that very size (method.md §4: a filling window is
// judged against the band for its own n). The MAE band supplies the 95%
// band and the MAE alarm limit, the ME band its alarm band and its 95%
// band (used for leaving degraded).
type Evaluation struct {
	N       int
	MAE     float64
	ME      float64
	MAEBand Band
	MEBand  Band
}

// Transition is what one evaluation (or [Detector.SetBaseline]) did.
// Without a change, From = To and the other fields but N are zero. With
// one, Metric, Value and Limit say what caused it:
//   - to degraded: the metric out of bounds (MAE before ME when both are),
//     its window value and the alarm limit it crossed;
//   - to improved: MAE, the window MAE and the 95% band's lower bound;
//   - from degraded: the metric that caused the degradation, its value and
//     the 95% bound on the side it had crossed;
//   - from improved to within: MAE, its value and the lower 95% bound;
//   - to or from insufficient_data or insufficient_baseline, or from
//     insufficient_data to within: Metric is empty and Value, Limit are 0.
//
// Reason is set for insufficient_baseline.
type Transition struct {
	Changed bool    `json:"changed"`
	From    State   `json:"from"`
	To      State   `json:"to"`
	N       int     `json:"n"`
	Metric  Metric  `json:"metric,omitempty"`
	Value   float64 `json:"value"`
	Limit   float64 `json:"limit"`
	KEff    float64 `json:"k_eff"` // of the metric's band; 0 when no metric
	// Scale is the window's mean level scale (method.md §4a) that Value and
	// Limit were restated in the series' unit with; 0 when there was no
	// scaling (a scale of 1).
	Scale  float64 `json:"scale,omitempty"`
	Reason string  `json:"reason,omitempty"`
}

// inUnits restates a transition judged on scaled quantities (method.md
// §4a) in the series' unit for people: the window's plain value of the
// metric, and the limit times the window's mean scale. Without scaling it
// is unchanged.
func (t Transition) inUnits(v WindowValues) Transition {
	if v.Scale == 1 {
		return t
	}
	switch t.Metric {
	case MetricMAE:
		t.Value, t.Limit, t.Scale = v.MAE, t.Limit*v.Scale, v.Scale
	case MetricME:
		t.Value, t.Limit, t.Scale = v.ME, t.Limit*v.Scale, v.Scale
	}
	return t
}

// Detector is the drift state machine of method.md §5 for one lead (on the
// lead's windows and bands) or for a series (on the pooled decision-lead
// windows and their bands). Feed it one [Evaluation] per scored origin, in
// origin order, with [Detector.Observe].
//
// Rules, for an evaluation of a window of n pairs:
//   - n < 7 calls for insufficient_data, which is entered at once;
//   - otherwise the evaluation calls for degraded when the window MAE is
//     above the MAE alarm limit or the window ME outside the ME alarm band;
//     it is below when the window MAE is below the 95% band's lower bound;
//     it is inside when the MAE is at or below the 95% upper bound and the
//     ME within its 95% band;
//   - degraded is entered, from any other state, after m consecutive
//     evaluations call for it: m = 1 when n ≥ 14 and 3 when 7 ≤ n < 14
//     (m of the evaluation at hand);
//   - degraded is left after 3 consecutive evaluations inside, for improved
//     when the last 3 were also below, else for within;
//   - improved is entered from within after 3 consecutive evaluations below,
//     and left for within after 3 consecutive evaluations not below
//     (hysteresis both ways: no state flaps at the lower bound);
//   - insufficient_data is left after m consecutive evaluations with
//     n ≥ 7, for improved when the last 3 were below, else for within;
//   - insufficient_baseline is entered through [Detector.SetBaseline] with
//     an unusable verdict, or by an evaluation whose band is unusable, and
//     is left only through SetBaseline with a usable verdict (to
//     insufficient_data, so that the next evaluations decide).
//
// The zero value is a new detector in insufficient_data. All fields are
// exported and JSON-tagged so that a detector can be stored and resumed with
// identical results; treat them as opaque.
type Detector struct {
	State State `json:"state"`
	// Cause is the metric that made the state degraded, and CauseHigh
	// whether it had crossed its upper limit.
	Cause     Metric `json:"cause,omitempty"`
	CauseHigh bool   `json:"cause_high,omitempty"`
	// Consecutive evaluations up to the last one: calling for degraded;
	// below the 95% band; not below it; inside the 95% bands (counted while
	// degraded); with n ≥ n_min.
	Degrade int `json:"degrade,omitempty"`
	Below   int `json:"below,omitempty"`
	Above   int `json:"above,omitempty"`
	Inside  int `json:"inside,omitempty"`
	Ready   int `json:"ready,omitempty"`
	// Reason says why the baseline is unusable in insufficient_baseline.
	Reason string `json:"reason,omitempty"`
}

func (d *Detector) state() State {
	if d.State == "" {
		return StateInsufficientData
	}
	return d.State
}

// SetBaseline tells the detector whether the baseline behind its bands is
// usable (see [Usability]). An unusable verdict moves it to
// insufficient_baseline; a usable one moves it out of insufficient_baseline
// to insufficient_data, and otherwise changes nothing.
func (d *Detector) SetBaseline(v Verdict) Transition {
	from := d.state()
	if !v.Usable {
		*d = Detector{State: StateInsufficientBaseline, Reason: v.Reason}
		return Transition{Changed: from != StateInsufficientBaseline, From: from, To: StateInsufficientBaseline, Reason: v.Reason}
	}
	if from == StateInsufficientBaseline {
		*d = Detector{State: StateInsufficientData}
		return Transition{Changed: true, From: from, To: StateInsufficientData}
	}
	return Transition{From: from, To: from}
}

// breach is the alarm an evaluation raises, if any: the metric, its value
// and the limit it crossed.
type breach struct {
	metric Metric
	value  float64
	limit  float64
	keff   float64
	high   bool
}

func breachOf(ev Evaluation) (breach, bool) {
	a, e := ev.MAEBand, ev.MEBand
	switch {
	case ev.MAE > a.AlarmUpper:
		return breach{MetricMAE, ev.MAE, a.AlarmUpper, a.KEff, true}, true
	case ev.ME > e.AlarmUpper:
		return breach{MetricME, ev.ME, e.AlarmUpper, e.KEff, true}, true
	case ev.ME < e.AlarmLower:
		return breach{MetricME, ev.ME, e.AlarmLower, e.KEff, false}, true
	}
	return breach{}, false
}

// inside reports whether an evaluation is back inside the 95% bands.
func inside(ev Evaluation) bool {
	return ev.MAE <= ev.MAEBand.Upper && ev.ME >= ev.MEBand.Lower && ev.ME <= ev.MEBand.Upper
}

// persistence is m of method.md §5 for a window of n pairs (n ≥ 7).
func persistence(n int) int {
	if n >= DriftShortWindow {
		return 1
	}
	return DriftShortPersist
}

// count returns k+1 when cond holds, else 0.
func count(k int, cond bool) int {
	if cond {
		return k + 1
	}
	return 0
}

// Observe judges one evaluation and returns what it did to the state.
// Values that are NaN never cross a limit.
func (d *Detector) Observe(ev Evaluation) Transition {
	from := d.state()
	d.State = from
	stay := Transition{From: from, To: from, N: ev.N}
	if from == StateInsufficientBaseline {
		return stay
	}
	if !ev.MAEBand.Usable() || !ev.MEBand.Usable() {
		t := d.SetBaseline(Verdict{Reason: "band unusable: " + cmp.Or(ev.MAEBand.Unusable, ev.MEBand.Unusable)})
		t.N = ev.N
		return t
	}
	if ev.N < DriftMinPairs {
		*d = Detector{State: StateInsufficientData}
		if from == StateInsufficientData {
			return stay
		}
		return Transition{Changed: true, From: from, To: StateInsufficientData, N: ev.N}
	}
	b, alarm := breachOf(ev)
	below := ev.MAE < ev.MAEBand.Lower
	d.Degrade = count(d.Degrade, alarm)
	d.Below, d.Above = count(d.Below, below), count(d.Above, !below)
	d.Inside = count(d.Inside, from == StateDegraded && inside(ev))
	d.Ready++
	m := persistence(ev.N)
	mae := Transition{Changed: true, From: from, N: ev.N, Metric: MetricMAE, Value: ev.MAE, Limit: ev.MAEBand.Lower, KEff: ev.MAEBand.KEff}
	switch {
	case from != StateDegraded && d.Degrade >= m:
		d.State, d.Cause, d.CauseHigh = StateDegraded, b.metric, b.high
		return Transition{Changed: true, From: from, To: StateDegraded, N: ev.N, Metric: b.metric, Value: b.value, Limit: b.limit, KEff: b.keff}
	case from == StateDegraded && d.Inside >= DriftHysteresis:
		t := d.leaveDegraded(ev)
		d.State, d.Cause, d.CauseHigh = t.To, "", false
		return t
	case from == StateImproved && d.Above >= DriftHysteresis:
		d.State, mae.To = StateWithin, StateWithin
		return mae
	case from == StateWithin && d.Below >= DriftHysteresis:
		d.State, mae.To = StateImproved, StateImproved
		return mae
	case from == StateInsufficientData && d.Ready >= m:
		if d.Below >= DriftHysteresis {
			d.State, mae.To = StateImproved, StateImproved
			return mae
		}
		d.State = StateWithin
		return Transition{Changed: true, From: from, To: StateWithin, N: ev.N}
	}
	return stay
}

// leaveDegraded is the transition out of degraded: named after the metric
// that caused it, with its value and the 95% bound on the side it had
// crossed.
func (d *Detector) leaveDegraded(ev Evaluation) Transition {
	to := StateWithin
	if d.Below >= DriftHysteresis {
		to = StateImproved
	}
	t := Transition{Changed: true, From: StateDegraded, To: to, N: ev.N, Metric: d.Cause}
	if d.Cause == MetricME {
		t.Value, t.KEff, t.Limit = ev.ME, ev.MEBand.KEff, ev.MEBand.Lower
		if d.CauseHigh {
			t.Limit = ev.MEBand.Upper
		}
	} else {
		t.Value, t.KEff, t.Limit = ev.MAE, ev.MAEBand.KEff, ev.MAEBand.Upper
	}
	return t
}

// String describes a transition for logs and tests.
func (t Transition) String() string {
	s := fmt.Sprintf("%s→%s n=%d", t.From, t.To, t.N)
	if t.Metric != "" {
		s += fmt.Sprintf(" %s=%.6g limit=%.6g k_eff=%.4g", t.Metric, t.Value, t.Limit, t.KEff)
	}
	if t.Reason != "" {
		s += " (" + t.Reason + ")"
	}
	if !t.Changed {
		s += " (unchanged)"
	}
	return s
}
