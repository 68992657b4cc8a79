package scoring

import (
	"fmt"
	"maps"
	"math"
	"slices"
	"time"
)

// LeadState is where one lead's (or, for lead 0, the series') detector
// stands after the evaluations of a replay so far.
type LeadState struct {
	Detector Detector `json:"detector"`
	// Onset is the origin at which the current state was entered (data
	// time); zero for the state a replay starts in. Entered is the
	// transition that entered it, with the values that caused it.
	Onset   time.Time  `json:"onset,omitzero"`
	Entered Transition `json:"entered,omitzero"`
	// Last is the origin of the last evaluation; zero before the first.
	Last time.Time `json:"last,omitzero"`
	// Evals counts the evaluations so far, OnsetEval the one that entered
	// the current state (0 for the starting state).
	Evals     int `json:"evals,omitempty"`
	OnsetEval int `json:"onset_eval,omitempty"`
	N         int `json:"n,omitempty"` // origins in the window after the last evaluation
	// Window fingerprints the window's origins and quantities at a
	// checkpoint, so that a replay resuming from it can tell whether the
	// pairs it was given rebuild the very same window.
	Window uint64 `json:"window,omitempty"`
}

// State is the lead's current state.
func (s LeadState) State() State { return s.Detector.state() }

// EvaluationsSinceOnset is how many evaluations were made after the one
// that entered the current state: 0 when the last evaluation entered it
// ("degraded since the 05:00 origin, 12 origins ago").
func (s LeadState) EvaluationsSinceOnset() int { return s.Evals - s.OnsetEval }

// Checkpoint is a point a replay can resume from: the state of every lead
// (1..H) and of the pooled quantity (0) after every evaluation at origins up
// to Origin. A replay from it needs the scored pairs from WindowFrom on, to
// rebuild the windows it ends with.
type Checkpoint struct {
	Origin     time.Time          `json:"origin,omitzero"`      // zero: before the first origin
	Seq        int                `json:"seq,omitempty"`        // origins evaluated so far
	WindowFrom time.Time          `json:"window_from,omitzero"` // oldest origin in any window
	Leads      map[int]*LeadState `json:"leads,omitempty"`      // nil: the initial checkpoint
}

func (c Checkpoint) clone() Checkpoint {
	out := c
	out.Leads = make(map[int]*LeadState, len(c.Leads))
	for h, s := range c.Leads {
		cp := *s
		out.Leads[h] = &cp
	}
	return out
}

// Change is one transition of a replayed state history: of lead Lead (0:
// the series state) at the evaluation of origin Origin.
type Change struct {
	Origin time.Time
	Lead   int
	Transition
}

// Judgement is one evaluation of a replay: the window judged at an origin
// and the bands it was judged against.
type Judgement struct {
	Origin time.Time
	Lead   int
	WindowValues
	Bands  BandSet // in the series' unit for this window (see BandSet.InUnits)
	Judged BandSet // of the scaled quantities, as judged
}

// Status is a lead's state at the end of a replay, with the window it was
// last judged on. Window and Bands are zero before the first evaluation;
// Reason says why the baseline is unusable in insufficient_baseline.
type Status struct {
	Lead int
	LeadState
	Window WindowValues
	Bands  BandSet // in the series' unit for the window (see BandSet.InUnits)
	Judged BandSet // of the scaled quantities, as judged
	Reason string
	// BacktestMAE is the reference's plain backtest MAE (NaN without one),
	// beside the level-adjusted expectation in Bands.
	BacktestMAE float64
}

// Replayed is what a replay found.
type Replayed struct {
	Start       Checkpoint   // the checkpoint it started from, initialised when it was the initial one
	History     []Change     // every transition, in origin order (leads ascending, 0 first, within an origin)
	Status      []Status     // every lead, 0 (the series) first, then 1..H
	Checkpoints []Checkpoint // at every CheckpointEvery-th origin evaluated, and the final state last (once)
	Judgements  []Judgement  // only with ReplayOptions.Judge
	Evaluations int          // evaluations made
}

// Final is the checkpoint after the last origin.
func (r Replayed) Final() Checkpoint { return r.Checkpoints[len(r.Checkpoints)-1] }

// ReplayOptions tune a replay.
type ReplayOptions struct {
	// CheckpointEvery emits a checkpoint after every k-th origin evaluated
	// (counted from the start of the production period, so the same
	// origins get checkpoints whatever the replay started from); 0: only
	// the final one.
	CheckpointEvery int
	// Judge keeps every evaluation of these leads (0: the series) in
	// Replayed.Judgements, for charts.
	Judge []int
}

// Replay feeds the drift detectors of method.md §5 one evaluation per
// scored origin, in origin order: the evaluation at origin t judges, per
// lead, the window of that lead's last n scored origins up to t, and for
// the series state the pooled decision-lead quantity of the last n origins
// where every decision lead has its pair.
//
// pairs are the scored pairs of the production period, sorted by origin and
// lead, from from.WindowFrom on (all of them for the initial checkpoint,
// the zero Checkpoint). Pairs at origins up to from.Origin only rebuild the
// windows; an error says when they do not rebuild the windows the
// checkpoint ended with, which means the data before from.Origin changed
// and the replay must start earlier.
func Replay(ref *Reference, from Checkpoint, pairs []Pair, opt ReplayOptions) (Replayed, error) {
	rp := replayer{ref: ref, opt: opt, windows: map[int]*Window{}}
	if err := rp.start(from); err != nil {
		return Replayed{}, err
	}
	for i, p := range pairs {
		if p.Lead < 1 || p.Lead > ref.Horizon {
			return Replayed{}, fmt.Errorf("replay: lead %d is outside 1..%d", p.Lead, ref.Horizon)
		}
		if i > 0 && comparePairs(pairs[i-1], p) >= 0 {
			return Replayed{}, fmt.Errorf("replay: pairs are not sorted by origin and lead, one per (origin, lead)")
		}
	}
	warm := true
	var err error
	eachOrigin(pairs, func(origin time.Time, group []Pair) {
		if err != nil {
			return
		}
		if warm && !origin.After(from.Origin) {
			rp.fill(origin, group)
			return
		}
		if warm {
			warm = false
			if err = rp.checkWindows(); err != nil {
				return
			}
		}
		rp.evaluate(origin, group)
	})
	if err == nil && warm {
		err = rp.checkWindows()
	}
	if err != nil {
		return Replayed{}, err
	}
	if cps := rp.out.Checkpoints; len(cps) == 0 || cps[len(cps)-1].Seq != rp.cp.Seq {
		rp.out.Checkpoints = append(rp.out.Checkpoints, rp.checkpoint())
	}
	rp.out.Status = rp.status()
	return rp.out, nil
}

type replayer struct {
	ref     *Reference
	opt     ReplayOptions
	cp      Checkpoint
	windows map[int]*Window
	out     Replayed
}

// noBacktest is the reason of a lead the backtest has no pairs for.
const noBacktest = "insufficient baseline: the backtest has no pairs for this lead"

// start sets up the leads from the checkpoint, or afresh: every detector
// told whether its baseline is usable before the first origin.
func (rp *replayer) start(from Checkpoint) error {
	if from.Leads == nil {
		from = Checkpoint{Leads: map[int]*LeadState{}}
		for h := 0; h <= rp.ref.Horizon; h++ {
			s := &LeadState{}
			if l := rp.ref.Lead(h); l != nil {
				s.Detector.SetBaseline(l.Verdict)
			} else {
				s.Detector.SetBaseline(Verdict{Reason: noBacktest})
			}
			from.Leads[h] = s
		}
	} else if len(from.Leads) != rp.ref.Horizon+1 {
		return fmt.Errorf("replay: checkpoint has %d leads, the series %d and the pooled quantity", len(from.Leads), rp.ref.Horizon)
	}
	rp.cp = from.clone()
	rp.out.Start = from.clone()
	for h, s := range rp.cp.Leads {
		rp.windows[h] = NewWindow(rp.ref.Window)
		s.Window = 0 // set on the checkpoints made
	}
	return nil
}

// fill rebuilds the windows from an origin before the checkpoint.
func (rp *replayer) fill(origin time.Time, group []Pair) {
	for _, p := range group {
		rp.windows[p.Lead].Push(origin, pairQuantity(p, rp.scale(p.Lead)))
	}
	if q, ok := poolOrigin(group, rp.ref.Decision, rp.scale(0)); ok {
		rp.windows[0].Push(origin, q)
	}
}

// scale is the level scale of lead h (0: the pooled quantity); none (b =
// 0) for a lead without a backtest, which is never judged.
func (rp *replayer) scale(h int) Scale {
	if l := rp.ref.Lead(h); l != nil {
		return l.Scale
	}
	return Scale{}
}

func (rp *replayer) checkWindows() error {
	for h, s := range rp.out.Start.Leads {
		if w := rp.windows[h]; w.Len() != s.N || w.fingerprint() != s.Window {
			return fmt.Errorf("replay: the pairs up to %s do not rebuild lead %d's window of the checkpoint (%d origins, now %d): the data changed before the checkpoint",
				rp.cp.Origin.Format(time.RFC3339), h, s.N, w.Len())
		}
	}
	return nil
}

// evaluate judges every lead scored at origin, then the series.
func (rp *replayer) evaluate(origin time.Time, group []Pair) {
	rp.cp.Seq++
	if q, ok := poolOrigin(group, rp.ref.Decision, rp.scale(0)); ok {
		rp.windows[0].Push(origin, q)
		rp.judge(0, origin)
	}
	for _, p := range group {
		rp.windows[p.Lead].Push(origin, pairQuantity(p, rp.scale(p.Lead)))
		rp.judge(p.Lead, origin)
	}
	rp.cp.Origin = origin
	if k := rp.opt.CheckpointEvery; k > 0 && rp.cp.Seq%k == 0 {
		rp.out.Checkpoints = append(rp.out.Checkpoints, rp.checkpoint())
	}
}

func (rp *replayer) judge(h int, origin time.Time) {
	s, w := rp.cp.Leads[h], rp.windows[h]
	v := w.Values()
	s.N, s.Last = v.N, origin
	s.Evals++
	rp.out.Evaluations++
	l := rp.ref.Lead(h)
	if l == nil {
		return // insufficient_baseline for good
	}
	b := l.Bands(v.N)
	if slices.Contains(rp.opt.Judge, h) {
		rp.out.Judgements = append(rp.out.Judgements, Judgement{Origin: origin, Lead: h, WindowValues: v, Bands: b.InUnits(v), Judged: b})
	}
	t := s.Detector.Observe(Evaluation{N: v.N, MAE: v.JudgedMAE, ME: v.JudgedME, MAEBand: b.MAE, MEBand: b.ME})
	if t.Changed {
		t = t.inUnits(v)
		s.Onset, s.Entered, s.OnsetEval = origin, t, s.Evals
		rp.out.History = append(rp.out.History, Change{Origin: origin, Lead: h, Transition: t})
	}
}

func (rp *replayer) checkpoint() Checkpoint {
	c := rp.cp.clone()
	c.WindowFrom = time.Time{}
	for h, w := range rp.windows {
		if o := w.Oldest(); !o.IsZero() && (c.WindowFrom.IsZero() || o.Before(c.WindowFrom)) {
			c.WindowFrom = o
		}
		c.Leads[h].Window = w.fingerprint()
	}
	return c
}

func (rp *replayer) status() []Status {
	leads := slices.Sorted(maps.Keys(rp.cp.Leads))
	out := make([]Status, 0, len(leads))
	for _, h := range leads {
		s := rp.cp.Leads[h]
		st := Status{Lead: h, LeadState: *s, Reason: s.Detector.Reason, BacktestMAE: math.NaN()}
		if l := rp.ref.Lead(h); l != nil {
			st.BacktestMAE = l.BacktestMAE
		}
		if s.N > 0 {
			st.Window = rp.windows[h].Values()
			if l := rp.ref.Lead(h); l != nil {
				st.Judged = l.Bands(s.N)
				st.Bands = st.Judged.InUnits(st.Window)
			}
		}
		out = append(out, st)
	}
	return out
}

// Cause says why an event was announced (method.md §5).
type Cause string

// The causes of events.
const (
	CauseData     Cause = "data"     // origins judged for the first time
	CauseRevision Cause = "revision" // origins judged before, re-judged on revised or filled-in data
	CauseBaseline Cause = "baseline" // the production period re-judged against a new baseline
)

// Event is a change of a current state, as announced: of lead Lead (0:
// the series state), entered at origin Onset (data time), with the values
// that caused it. Transition.From is the state announced before.
type Event struct {
	Lead  int
	Onset time.Time
	Cause Cause
	Transition
}

// Announced is what was last announced of a lead: its current state and
// the last origin it judged (zero: none).
type Announced struct {
	State State
	Last  time.Time
}

// Announce turns a replay into the events to announce, given what was
// announced before it (leads missing from before had announced nothing:
// insufficient_data). Origins past a lead's last judged origin are new:
// every transition the replay finds among them is announced, in origin
// order, with cause data. Origins up to it were judged before: only the
// difference between the state announced and the state the replay reached
// at that origin is announced, with cause rejudge (revision or baseline),
// and nothing when the state is the same. Re-judgements come first.
func Announce(before map[int]Announced, r Replayed, rejudge Cause) []Event {
	var out, data []Event
	for _, st := range r.Status {
		h := st.Lead
		prior, ok := before[h]
		if !ok {
			prior = Announced{State: StateInsufficientData}
		}
		s := r.Start.Leads[h]
		state, onset, entered := s.State(), s.Onset, s.Entered
		for _, c := range r.History {
			if c.Lead != h {
				continue
			}
			if !c.Origin.After(prior.Last) {
				state, onset, entered = c.To, c.Origin, c.Transition
				continue
			}
			data = append(data, Event{Lead: h, Onset: c.Origin, Cause: CauseData, Transition: c.Transition})
		}
		if state != prior.State {
			t := entered
			t.Changed, t.From, t.To = true, prior.State, state
			if state == StateInsufficientBaseline && t.Reason == "" {
				t.Reason = st.Reason
			}
			out = append(out, Event{Lead: h, Onset: onset, Cause: rejudge, Transition: t})
		}
	}
	slices.SortStableFunc(data, func(a, b Event) int { return a.Onset.Compare(b.Onset) })
	return append(out, data...)
}
