// Package drift is aftercast's evaluator: it judges drift off the request
// path. A write that changes scored pairs leaves a mark in the store, in the
// transaction that stores its data; the evaluator drains the marks, replays
// the affected origins in origin order from the nearest checkpoint
// (scoring.Replay), and stores the states, checkpoints and events in one
// transaction that also removes the marks. Replicas share the work through
// the store's per-series claim locks. The evaluator owns the prepared
// baselines (the band cache); the store does the SQL and scoring the
// judging. It knows nothing of gRPC.
package drift

import (
	"cmp"
	"context"
	"fmt"
	"log/slog"
	"math"
	"sync"
	"sync/atomic"
	"time"

	"github.com/aftercast/aftercast/scoring"
	"github.com/aftercast/aftercast/server/store"
)

// Defaults of Config.
const (
	defaultWorkers     = 2
	defaultClaim       = 200 // series per claim: one transaction, a few round trips
	defaultPoll        = time.Second
	defaultQuiet       = 250 * time.Millisecond
	defaultMaxDelay    = 2 * time.Second
	defaultCacheSize   = 1024 // prepared baselines kept
	checkpointEvery    = scoring.DriftWindow
	checkpointsKept    = 24 // of the every-n ones, besides the newest
	evaluationDeadline = 2 * time.Minute
)

// Config configures an Evaluator. Zero values are the defaults.
type Config struct {
	Logger *slog.Logger
	// Workers is how many claims this process evaluates at once; 2.
	Workers int
	// Poll is how often idle workers look for marks written by other
	// replicas; 1 s.
	Poll time.Duration
	// Quiet is how long workers woken by local writes wait for the writes
	// to pause before judging, so that a burst of pushes is judged once
	// rather than after every message; 250 ms. MaxDelay bounds that wait
	// under a steady stream of writes; 2 s. A negative Quiet judges at once.
	Quiet, MaxDelay time.Duration
	// CacheSize bounds the prepared baselines kept; 1024.
	CacheSize int
	// OnEvents is called with the events of every committed evaluation.
	OnEvents func([]store.DriftEvent)
}

// Evaluator judges drift for the marks in the store.
type Evaluator struct {
	st    *store.Store
	cfg   Config
	refs  *refCache
	wake  chan struct{}
	stale atomic.Int64 // replays restarted from the beginning: a checkpoint no longer matched the data
	evals atomic.Int64 // detector evaluations made

	// startHook, when set, moves the replay start the evaluator computed:
	// tests use it to show that a wrong start is caught.
	startHook func(time.Time) time.Time
}

// New returns an evaluator over st.
func New(st *store.Store, cfg Config) *Evaluator {
	if cfg.Logger == nil {
		cfg.Logger = slog.New(slog.DiscardHandler)
	}
	if cfg.Workers <= 0 {
		cfg.Workers = defaultWorkers
	}
	if cfg.Poll <= 0 {
		cfg.Poll = defaultPoll
	}
	if cfg.Quiet == 0 {
		cfg.Quiet = defaultQuiet
	}
	if cfg.MaxDelay <= 0 {
		cfg.MaxDelay = defaultMaxDelay
	}
	if cfg.CacheSize <= 0 {
		cfg.CacheSize = defaultCacheSize
	}
	return &Evaluator{st: st, cfg: cfg, refs: newRefCache(cfg.CacheSize), wake: make(chan struct{}, 1)}
}

// Wake tells idle workers that new marks were written. It never blocks.
func (e *Evaluator) Wake() {
	select {
	case e.wake <- struct{}{}:
	default:
	}
}

// StaleCheckpoints counts replays that found a checkpoint no longer matching
// the stored data and started over from the beginning of the production
// period. Non-zero means a replay start was computed wrongly: a bug.
func (e *Evaluator) StaleCheckpoints() int64 { return e.stale.Load() }

// Evaluations counts the detector evaluations this evaluator made (one per
// lead, and one for the series, per origin replayed).
func (e *Evaluator) Evaluations() int64 { return e.evals.Load() }

// Run evaluates marks until ctx is done.
func (e *Evaluator) Run(ctx context.Context) {
	var wg sync.WaitGroup
	for range e.cfg.Workers {
		wg.Go(func() { e.work(ctx) })
	}
	wg.Wait()
}

func (e *Evaluator) work(ctx context.Context) {
	tick := time.NewTicker(e.cfg.Poll)
	defer tick.Stop()
	backoff := e.cfg.Poll
	for {
		n, err := e.evaluate(ctx)
		switch {
		case ctx.Err() != nil:
			return
		case err != nil:
			e.cfg.Logger.ErrorContext(ctx, "evaluating drift", "err", err)
			backoff = min(2*backoff, time.Minute)
			select {
			case <-ctx.Done():
				return
			case <-time.After(backoff):
			}
			continue
		case n > 0:
			backoff = e.cfg.Poll
			continue
		}
		select {
		case <-ctx.Done():
			return
		case <-e.wake:
			if !e.settle(ctx) {
				return
			}
		case <-tick.C:
		}
	}
}

// settle waits until local writes pause for Quiet, at most MaxDelay; false
// when ctx ends first.
func (e *Evaluator) settle(ctx context.Context) bool {
	if e.cfg.Quiet < 0 {
		return true
	}
	limit := time.NewTimer(e.cfg.MaxDelay)
	defer limit.Stop()
	quiet := time.NewTimer(e.cfg.Quiet)
	defer quiet.Stop()
	for {
		select {
		case <-ctx.Done():
			return false
		case <-limit.C:
			return true
		case <-quiet.C:
			return true
		case <-e.wake:
			quiet.Reset(e.cfg.Quiet)
		}
	}
}

// Drain evaluates until no mark is left, waiting for series that other
// evaluators hold; for tests, the demo and benchmarks.
func (e *Evaluator) Drain(ctx context.Context) error {
	for {
		n, err := e.evaluate(ctx)
		if err != nil {
			return err
		}
		if n > 0 {
			continue
		}
		pending, _, err := e.st.DriftBacklog(ctx)
		if err != nil || pending == 0 {
			return err
		}
		select {
		case <-ctx.Done():
			return ctx.Err()
		case <-time.After(20 * time.Millisecond):
		}
	}
}

// evaluate claims series with marks and judges them; it returns how many
// it judged (0: nothing claimable).
func (e *Evaluator) evaluate(ctx context.Context) (int, error) {
	ctx, cancel := context.WithTimeout(ctx, evaluationDeadline)
	defer cancel()
	c, err := e.st.ClaimDrift(ctx, defaultClaim)
	if err != nil || c == nil {
		return 0, err
	}
	defer c.Release(ctx)
	jobs, err := e.plan(ctx, c)
	if err != nil {
		return 0, err
	}
	now := time.Now().UTC()
	var w store.DriftWrite
	w.Now = now
	for _, j := range jobs {
		res, err := e.replay(ctx, c, j)
		if err != nil {
			if ctx.Err() != nil {
				return 0, err
			}
			// One series that cannot be judged must not hold up the others:
			// its marks stay, counted in the backlog the lag alert watches.
			e.cfg.Logger.ErrorContext(ctx, "judging drift failed; its marks stay for the next claim",
				"series", j.se.Key, "model", j.model, "err", err)
			c.Keep(j.se)
			continue
		}
		j.write(&w, res, now)
	}
	evs, err := c.Commit(ctx, w)
	if err != nil {
		return 0, err
	}
	if e.cfg.OnEvents != nil && len(evs) > 0 {
		e.cfg.OnEvents(evs)
	}
	return len(c.Series), nil
}

// job is the re-judgement of one (series, model).
type job struct {
	se        *store.Series
	model     string
	version   int
	prodStart time.Time // first origin of the production period
	from      time.Time // first origin whose pairs may have changed
	full      bool      // replay the whole production period
	rejudge   scoring.Cause
	before    map[int]scoring.Announced
	noticed   map[int]time.Time
	ref       *scoring.Reference
	cp        scoring.Checkpoint
	pairs     []scoring.Pair
}

// plan turns the claimed marks into jobs: one per (series, model) with an
// active baseline that a mark names. A mark for a model without a baseline
// needs no judging (a baseline import re-judges everything anyway).
func (e *Evaluator) plan(ctx context.Context, c *store.DriftClaim) ([]*job, error) {
	var jobs []*job
	for _, cs := range c.Series {
		for _, b := range cs.Baselines {
			j := newJob(cs, b)
			if j == nil {
				continue
			}
			if e.startHook != nil {
				j.from = e.startHook(j.from)
			}
			ref, err := e.reference(ctx, cs.Series, b.Model, b.Version)
			if err != nil {
				return nil, err
			}
			j.ref = ref
			jobs = append(jobs, j)
		}
	}
	var cqs []store.CheckpointQuery
	var resume []*job
	for _, j := range jobs {
		if !j.full {
			cqs = append(cqs, store.CheckpointQuery{Series: j.se, Model: j.model, Version: j.version, Before: j.from})
			resume = append(resume, j)
		}
	}
	cps, err := c.Checkpoints(ctx, cqs)
	if err != nil {
		return nil, err
	}
	for i, j := range resume {
		j.cp = cps[i]
	}
	pqs := make([]store.PairsQuery, len(jobs))
	for i, j := range jobs {
		pqs[i] = store.PairsQuery{Series: j.se, Model: j.model, From: j.pairsFrom()}
	}
	pairs, err := c.ScoredPairs(ctx, pqs)
	if err != nil {
		return nil, err
	}
	for i, j := range jobs {
		j.pairs = pairs[i]
	}
	return jobs, nil
}

func newJob(cs *store.ClaimedSeries, b store.ActiveBaseline) *job {
	j := &job{se: cs.Series, model: b.Model, version: b.Version, rejudge: scoring.CauseRevision,
		prodStart: b.LastOrigin.Add(time.Microsecond), before: map[int]scoring.Announced{}, noticed: map[int]time.Time{}}
	marked, whole := false, false
	for _, m := range cs.Marks {
		if m.Model != "" && m.Model != b.Model {
			continue
		}
		switch {
		case m.Baseline:
			j.rejudge, whole = scoring.CauseBaseline, true
		case m.From.IsZero():
			whole = true
		case j.from.IsZero() || m.From.Before(j.from):
			j.from = m.From
		}
		marked = true
	}
	if !marked {
		return nil
	}
	states := cs.States[b.Model]
	for _, st := range states {
		if st.BaselineVersion != b.Version {
			j.rejudge, whole = scoring.CauseBaseline, true
		}
		j.before[st.Lead] = scoring.Announced{State: st.State, Last: st.LastOrigin}
		j.noticed[st.Lead] = st.Noticed
	}
	if j.from.Before(j.prodStart) {
		j.from = j.prodStart
	}
	j.full = whole || len(states) == 0
	return j
}

// pairsFrom is the first origin whose pairs the replay needs: the
// checkpoint's windows and everything after it, within production.
func (j *job) pairsFrom() time.Time {
	if j.cp.Leads != nil && j.cp.WindowFrom.After(j.prodStart) {
		return j.cp.WindowFrom
	}
	return j.prodStart
}

// replay judges a job. A checkpoint that no longer matches the stored data
// (a replay start computed wrongly) is logged, counted and replaced by a
// replay of the whole production period.
func (e *Evaluator) replay(ctx context.Context, c *store.DriftClaim, j *job) (scoring.Replayed, error) {
	opt := scoring.ReplayOptions{CheckpointEvery: checkpointEvery}
	res, err := scoring.Replay(j.ref, j.cp, j.pairs, opt)
	e.evals.Add(int64(res.Evaluations))
	if err == nil || j.cp.Leads == nil {
		return res, err
	}
	e.stale.Add(1)
	e.cfg.Logger.ErrorContext(ctx, "drift checkpoint does not match the stored data; replaying the whole production period",
		"series", j.se.Key, "model", j.model, "checkpoint", j.cp.Origin, "from", j.from, "err", err)
	j.cp = scoring.Checkpoint{}
	pairs, err := c.ScoredPairs(ctx, []store.PairsQuery{{Series: j.se, Model: j.model, From: j.prodStart}})
	if err != nil {
		return res, err
	}
	j.pairs = pairs[0]
	res, err = scoring.Replay(j.ref, j.cp, j.pairs, opt)
	e.evals.Add(int64(res.Evaluations))
	return res, err
}

// write adds what a job's replay found to w: every lead's state, the
// checkpoints, and the events to announce.
func (j *job) write(w *store.DriftWrite, res scoring.Replayed, now time.Time) {
	events := scoring.Announce(j.before, res, j.rejudge)
	announced := map[int]bool{}
	for _, ev := range events {
		announced[ev.Lead] = true
		w.Events = append(w.Events, j.event(ev, now))
	}
	for _, st := range res.Status {
		noticed, ok := j.noticed[st.Lead]
		if !ok || announced[st.Lead] {
			noticed = now
		}
		w.States = append(w.States, store.DriftStatus{Series: j.se.Key, Model: j.model, Lead: st.Lead, BaselineVersion: j.version,
			State: st.State(), Onset: st.Onset, Noticed: noticed, LastOrigin: st.Last, Snapshot: snapshotOf(st)})
	}
	var cps []scoring.Checkpoint
	for _, cp := range res.Checkpoints {
		if !cp.Origin.IsZero() {
			cps = append(cps, cp)
		}
	}
	w.Checkpoints = append(w.Checkpoints, store.CheckpointWrite{Series: j.se, Model: j.model, Version: j.version,
		After: res.Start.Origin, New: cps, Every: checkpointEvery, Keep: checkpointsKept})
}

// event is an announced change as stored: with the band it was judged
// against beside its value (MAE's 95% band, or ME's alarm band).
func (j *job) event(ev scoring.Event, now time.Time) store.DriftEvent {
	nan := math.NaN()
	out := store.DriftEvent{Time: now, Series: j.se.Key, Model: j.model, Lead: ev.Lead, Origin: ev.Onset, Cause: ev.Cause,
		Metric: ev.Metric, Previous: ev.From, State: ev.To, Value: nan, Limit: nan, BandLower: nan, BandUpper: nan,
		WindowN: ev.N, KEff: nan, BaselineVersion: j.version}
	if ev.Metric == "" {
		return out
	}
	out.Value, out.Limit, out.KEff = ev.Value, ev.Limit, ev.KEff
	if l := j.ref.Lead(ev.Lead); l != nil && ev.N > 0 {
		b := l.Bands(ev.N).InUnits(scoring.WindowValues{N: ev.N, Scale: cmp.Or(ev.Scale, 1), ScaleRMSE: 1})
		if ev.Metric == scoring.MetricME {
			out.BandLower, out.BandUpper = b.ME.AlarmLower, b.ME.AlarmUpper
		} else {
			out.BandLower, out.BandUpper = b.MAE.Lower, b.MAE.Upper
		}
	}
	return out
}

// History replays the whole production period of (key, model) against its
// active baseline and returns every transition, with the baseline version.
func (e *Evaluator) History(ctx context.Context, key, model string) ([]scoring.Change, int, error) {
	res, version, err := e.replayAll(ctx, key, model, scoring.ReplayOptions{})
	return res.History, version, err
}

func (e *Evaluator) replayAll(ctx context.Context, key, model string, opt scoring.ReplayOptions) (scoring.Replayed, int, error) {
	se, b, err := e.st.ActiveBaseline(ctx, key, model)
	if err != nil {
		return scoring.Replayed{}, 0, err
	}
	ref, err := e.reference(ctx, se, model, b.Version)
	if err != nil {
		return scoring.Replayed{}, 0, err
	}
	pairs, err := e.st.ScoredPairs(ctx, []store.PairsQuery{{Series: se, Model: model, From: b.LastOrigin.Add(time.Microsecond)}})
	if err != nil {
		return scoring.Replayed{}, 0, err
	}
	res, err := scoring.Replay(ref, scoring.Checkpoint{}, pairs[0], opt)
	if err != nil {
		return res, 0, fmt.Errorf("replaying %s/%s: %w", key, model, err)
	}
	return res, b.Version, nil
}
