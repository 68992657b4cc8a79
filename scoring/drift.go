package scoring

import "fmt"

// State is a drift state of method.md §5, of one lead or of a series.
type State string

// The drift states.
const (
	StateInsufficientData     State = "insufficient_data"     // fewer than n_min pairs in the window
	StateWithin               State = "within"                // the window behaves like the backtest
	StateDegraded             State = "degraded"              // MAE above its 99% limit or ME outside its 99% band
	StateImproved             State = "improved"              // MAE below the 95% band (informational)
	StateInsufficientBaseline State = "insufficient_baseline" // the baseline is unusable; set from outside
)

// The defaults of method.md §6 the detector uses.
const (
	DriftMinPairs     = 7  // n_min: fewer pairs give insufficient_data
	DriftShortWindow  = 14 // windows of fewer pairs need DriftShortPersist calls
	DriftShortPersist = 3  // m for 7 ≤ n < 14 (m = 1 from 14 on)
	DriftExitInside   = 3  // consecutive evaluations back inside the 95% band to leave degraded
)

// Evaluation is one judgement of a live window: its size, its MAE and ME,
// and the bands for that very size (method.md §4: a filling window is
// judged against the band for its own n). The MAE band supplies the 95%
// band and the 99% upper limit, the ME band its 99% two-sided band and its
// 95% band (used for leaving degraded).
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
//   - to degraded: the metric out of bounds ("mae" before "me" when both
//     are), its window value and the 99% limit it crossed;
//   - to improved: "mae", the window MAE and the 95% band's lower bound;
//   - from degraded: the metric that caused the degradation, its value and
//     the 95% bound on the side it had crossed;
//   - from improved to within: "mae", its value and the lower 95% bound;
//   - to or from insufficient_data or insufficient_baseline, or from
//     insufficient_data to within: Metric is empty and Value, Limit are 0.
//
// Reason is set for insufficient_baseline.
type Transition struct {
	Changed bool    `json:"changed"`
	From    State   `json:"from"`
	To      State   `json:"to"`
	N       int     `json:"n"`
	Metric  string  `json:"metric,omitempty"`
	Value   float64 `json:"value"`
	Limit   float64 `json:"limit"`
	KEff    float64 `json:"k_eff"` // of the metric's band; 0 when no metric
	Reason  string  `json:"reason,omitempty"`
}

// Detector is the drift state machine of method.md §5 for one lead (on the
// lead's windows and bands) or for a series (on the pooled decision-lead
// windows and their bands). Feed it one [Evaluation] per newly scored
// origin with [Detector.Observe].
//
// Rules:
//   - an evaluation with n < 7 calls for insufficient_data, which is
//     entered at once;
//   - otherwise it calls for degraded (window MAE above the MAE band's 99%
//     upper limit, or window ME outside the ME band's 99% band), else
//     improved (MAE below the 95% band's lower bound), else within;
//   - a state other than the current one is entered after m consecutive
//     evaluations call for it, m = 1 when n ≥ 14 and 3 when 7 ≤ n < 14 (m
//     of the evaluation at hand); this holds for within too, so a new
//     detector leaves insufficient_data at the third evaluation with n ≥ 7
//     (or at the first with n ≥ 14);
//   - degraded is left only after 3 consecutive evaluations back inside the
//     95% band: window MAE at or below the MAE band's upper 95% bound and
//     window ME within the ME band's 95% band. A MAE below the band counts
//     as back inside (it is not a degradation). The state then entered is
//     improved if the last m evaluations all called for it, else within;
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
	// Cause is the metric ("mae" or "me") that made the state degraded, and
	// CauseHigh whether it had crossed its upper limit.
	Cause     string `json:"cause,omitempty"`
	CauseHigh bool   `json:"cause_high,omitempty"`
	// Call is the state the last evaluations called for and Run how many
	// consecutive evaluations did.
	Call State `json:"call,omitempty"`
	Run  int   `json:"run,omitempty"`
	// Inside counts consecutive evaluations back inside the 95% band while
	// degraded.
	Inside int `json:"inside,omitempty"`
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

// call is what one evaluation calls for, with the metric, value and limit
// behind it.
type call struct {
	state  State
	metric string
	value  float64
	limit  float64
	keff   float64
	high   bool
}

func judge(ev Evaluation) call {
	if ev.N < DriftMinPairs {
		return call{state: StateInsufficientData}
	}
	a, e := ev.MAEBand, ev.MEBand
	switch {
	case ev.MAE > a.AlarmUpper:
		return call{StateDegraded, string(BandMAE), ev.MAE, a.AlarmUpper, a.KEff, true}
	case ev.ME > e.AlarmUpper:
		return call{StateDegraded, string(BandME), ev.ME, e.AlarmUpper, e.KEff, true}
	case ev.ME < e.AlarmLower:
		return call{StateDegraded, string(BandME), ev.ME, e.AlarmLower, e.KEff, false}
	case ev.MAE < a.Lower:
		return call{StateImproved, string(BandMAE), ev.MAE, a.Lower, a.KEff, false}
	}
	return call{state: StateWithin, metric: string(BandMAE), value: ev.MAE, limit: a.Lower, keff: a.KEff}
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
		reason := ev.MAEBand.Unusable
		if reason == "" {
			reason = ev.MEBand.Unusable
		}
		t := d.SetBaseline(Verdict{Reason: "band unusable: " + reason})
		t.N = ev.N
		return t
	}
	c := judge(ev)
	if c.state == StateInsufficientData {
		d.Call, d.Run, d.Inside = "", 0, 0
		if from == StateInsufficientData {
			return stay
		}
		d.State, d.Cause, d.CauseHigh = StateInsufficientData, "", false
		return Transition{Changed: true, From: from, To: StateInsufficientData, N: ev.N}
	}
	if c.state == d.Call {
		d.Run++
	} else {
		d.Call, d.Run = c.state, 1
	}
	m := persistence(ev.N)

	if from == StateDegraded {
		if inside(ev) {
			d.Inside++
		} else {
			d.Inside = 0
		}
		if d.Inside < DriftExitInside {
			return stay
		}
		to := StateWithin
		if c.state == StateImproved && d.Run >= m {
			to = StateImproved
		}
		t := Transition{Changed: true, From: from, To: to, N: ev.N, Metric: d.Cause}
		if d.Cause == string(BandME) {
			t.Value, t.KEff, t.Limit = ev.ME, ev.MEBand.KEff, ev.MEBand.Lower
			if d.CauseHigh {
				t.Limit = ev.MEBand.Upper
			}
		} else {
			t.Value, t.KEff, t.Limit = ev.MAE, ev.MAEBand.KEff, ev.MAEBand.Upper
		}
		d.State, d.Cause, d.CauseHigh, d.Inside = to, "", false, 0
		return t
	}

	if c.state == from || d.Run < m {
		return stay
	}
	t := Transition{Changed: true, From: from, To: c.state, N: ev.N,
		Metric: c.metric, Value: c.value, Limit: c.limit, KEff: c.keff}
	switch {
	case c.state == StateWithin && from != StateImproved:
		t.Metric, t.Value, t.Limit, t.KEff = "", 0, 0, 0
	case c.state == StateDegraded:
		d.Cause, d.CauseHigh, d.Inside = c.metric, c.high, 0
	}
	d.State = c.state
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
