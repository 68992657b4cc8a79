package store

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"sync"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgtype"

	"github.com/aftercast/aftercast/scoring"
)

// WindowN is the live window of method.md §6: the last 30 origins.
const WindowN = 30

// leadBaseline is what one lead's (or the pooled series quantity's)
// backtest contributes to drift: band summaries and the usability verdict.
type leadBaseline struct {
	abs, sq, bias scoring.Summary
	verdict       scoring.Verdict
	expected      scoring.Metrics // every metric over the backtest pairs (zero for the pooled entry)
	hasRMSE       bool

	mu    sync.Mutex
	bands map[int][3]scoring.Band // by window n: MAE, RMSE, ME
}

// band returns the MAE, RMSE and ME bands for window n, cached: the t
// quantiles behind them are the costly part.
func (l *leadBaseline) band(n int) (mae, rmse, me scoring.Band) {
	l.mu.Lock()
	defer l.mu.Unlock()
	if b, ok := l.bands[n]; ok {
		return b[0], b[1], b[2]
	}
	b := [3]scoring.Band{l.abs.Band(scoring.BandMAE, n), {}, l.bias.Band(scoring.BandME, n)}
	if l.hasRMSE {
		b[1] = l.sq.Band(scoring.BandRMSE, n)
	}
	if l.bands == nil {
		l.bands = map[int][3]scoring.Band{}
	}
	l.bands[n] = b
	return b[0], b[1], b[2]
}

// baselineModel is a baseline version prepared for judging: per lead and
// pooled over the decision leads (lead 0).
type baselineModel struct {
	version int
	scale   float64
	leads   map[int]*leadBaseline
	pooled  *leadBaseline // nil when no backtest origin has every decision lead
}

type baselineKey struct {
	series  int64
	model   string
	version int
}

// newBaselineModel builds the band summaries of a baseline (method.md §4).
func newBaselineModel(se *Series, b Baseline) *baselineModel {
	m := &baselineModel{version: b.Version, scale: b.MASEScale, leads: map[int]*leadBaseline{}}
	for _, l := range b.Leads {
		e := make([]float64, len(l.Origins))
		var acc scoring.Accumulator
		for i := range e {
			e[i] = l.Actuals[i] - l.Forecasts[i]
			acc.Add(l.Actuals[i], l.Forecasts[i])
		}
		lb := &leadBaseline{hasRMSE: true, expected: acc.Metrics(b.MASEScale),
			abs:  scoring.Summarize(scoring.Quantities(scoring.BandMAE, e), l.Lead),
			sq:   scoring.Summarize(scoring.Quantities(scoring.BandRMSE, e), l.Lead),
			bias: scoring.Summarize(scoring.Quantities(scoring.BandME, e), l.Lead)}
		lb.verdict = scoring.Usability(lb.abs)
		m.leads[l.Lead] = lb
	}
	// Pooled decision-lead quantity: per backtest origin, the errors of
	// every decision lead.
	dec := se.Decision()
	byOrigin := map[int64]map[int]float64{}
	for _, l := range b.Leads {
		if !slices.Contains(dec, l.Lead) {
			continue
		}
		for i, o := range l.Origins {
			k := o.UnixNano()
			if byOrigin[k] == nil {
				byOrigin[k] = map[int]float64{}
			}
			byOrigin[k][l.Lead] = l.Actuals[i] - l.Forecasts[i]
		}
	}
	origins := make([]int64, 0, len(byOrigin))
	for k := range byOrigin {
		origins = append(origins, k)
	}
	slices.Sort(origins)
	errs := make([]map[int]float64, len(origins))
	for i, k := range origins {
		errs[i] = byOrigin[k]
	}
	if p, err := scoring.PoolDecisionLeads(errs, dec); err == nil && len(p.Abs) > 0 {
		h := slices.Max(dec)
		m.pooled = &leadBaseline{abs: scoring.Summarize(p.Abs, h), bias: scoring.Summarize(p.Bias, h)}
		m.pooled.verdict = scoring.Usability(m.pooled.abs)
	}
	return m
}

// LeadUsability judges a lead's backtest as the drift detector will, for
// import warnings: "" when usable, else the reason.
func LeadUsability(l BaselineLead) string {
	e := make([]float64, len(l.Origins))
	for i := range e {
		e[i] = l.Actuals[i] - l.Forecasts[i]
	}
	v := scoring.Usability(scoring.Summarize(scoring.Quantities(scoring.BandMAE, e), l.Lead))
	return v.Reason
}

// activeBaseline returns the prepared active baseline of (series, model),
// nil when there is none. Versions are immutable, so the cache needs no
// invalidation; a new version is a new key.
func (s *Store) activeBaseline(ctx context.Context, q querier, se *Series, model string) (*baselineModel, error) {
	var version int
	err := q.QueryRow(ctx, `SELECT coalesce(max(version), 0) FROM baselines WHERE series_id = $1 AND model = $2`, se.ID, model).Scan(&version)
	if err != nil {
		return nil, fmt.Errorf("reading baselines: %w", err)
	}
	if version == 0 {
		return nil, nil
	}
	if m := s.cachedBaseline(baselineKey{se.ID, model, version}); m != nil {
		return m, nil
	}
	b, err := s.baseline(ctx, q, se, model, version)
	if err != nil {
		return nil, err
	}
	return s.prepare(se, b), nil
}

func (s *Store) cachedBaseline(k baselineKey) *baselineModel {
	s.bmu.Lock()
	defer s.bmu.Unlock()
	return s.baselines[k]
}

// prepare returns the prepared form of a baseline version, from the cache
// when another request built it first.
func (s *Store) prepare(se *Series, b Baseline) *baselineModel {
	k := baselineKey{se.ID, b.Model, b.Version}
	if m := s.cachedBaseline(k); m != nil {
		return m
	}
	m := newBaselineModel(se, b)
	s.bmu.Lock()
	defer s.bmu.Unlock()
	if prev := s.baselines[k]; prev != nil {
		return prev
	}
	s.baselines[k] = m
	return m
}

// Snapshot is the last evaluation of a drift state: the window's values
// and the bands and limits they were judged against.
type Snapshot struct {
	WindowN        int      `json:"window_n"`
	MAE            *float64 `json:"mae,omitempty"`
	MAEExpected    *float64 `json:"mae_expected,omitempty"`
	MAEBandLower   *float64 `json:"mae_band_lower,omitempty"`
	MAEBandUpper   *float64 `json:"mae_band_upper,omitempty"`
	MAEAlarmLimit  *float64 `json:"mae_alarm_limit,omitempty"`
	RMSE           *float64 `json:"rmse,omitempty"`
	RMSEExpected   *float64 `json:"rmse_expected,omitempty"`
	RMSEBandLower  *float64 `json:"rmse_band_lower,omitempty"`
	RMSEBandUpper  *float64 `json:"rmse_band_upper,omitempty"`
	RMSEAlarmLimit *float64 `json:"rmse_alarm_limit,omitempty"`
	ME             *float64 `json:"me,omitempty"`
	MEExpected     *float64 `json:"me_expected,omitempty"`
	MEBandLower    *float64 `json:"me_band_lower,omitempty"`
	MEBandUpper    *float64 `json:"me_band_upper,omitempty"`
	MEAlarmLower   *float64 `json:"me_alarm_lower,omitempty"`
	MEAlarmUpper   *float64 `json:"me_alarm_upper,omitempty"`
	KEff           *float64 `json:"k_eff,omitempty"`
	Breached       []string `json:"breached,omitempty"` // metrics beyond their alarm limits at the last evaluation
	Reason         string   `json:"reason,omitempty"`   // why the baseline is unusable
}

func fin(x float64) *float64 {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return &x
}

// DriftStatus is the current drift state of one lead (Lead > 0) or of the
// series (Lead 0) for a model.
type DriftStatus struct {
	Series          string
	Model           string
	Lead            int
	BaselineVersion int
	State           scoring.State
	Since           time.Time
	LastOrigin      time.Time
	Snapshot        Snapshot
}

// DriftEvent is one stored change of drift state.
type DriftEvent struct {
	Seq             int64
	Time            time.Time
	Series          string
	Model           string
	Lead            int // 0: the series-level state
	Origin          time.Time
	Metric          string
	Previous, State scoring.State
	Value, Limit    float64 // NaN when the change had no metric
	BandLower       float64
	BandUpper       float64
	WindowN         int
	KEff            float64
	BaselineVersion int
}

type driftRow struct {
	lead       int
	det        scoring.Detector
	since      time.Time
	lastOrigin time.Time
	snap       Snapshot
	version    int
	dirty      bool
}

// livePair is a scored production pair, for windows.
type livePair struct {
	origin time.Time
	e      float64
}

// EvaluateDrift re-evaluates the drift states of every model with an
// active baseline on the given series, feeding each state machine one
// evaluation per origin newly scored since its last one, in origin order
// (method.md §5). It is idempotent: with nothing new scored it changes
// nothing, so it can run after any write and catch up after a crash.
func (s *Store) EvaluateDrift(ctx context.Context, seriesKeys []string) ([]DriftEvent, error) {
	series, err := s.seriesByKeys(ctx, seriesKeys)
	if err != nil {
		return nil, err
	}
	ids := make([]int64, 0, len(series))
	for _, se := range series {
		ids = append(ids, se.ID)
	}
	// One query for the models with a baseline: a feed's batch touches many
	// series, most of which may have none.
	rows, err := s.pool.Query(ctx, `SELECT DISTINCT series_id, model FROM baselines WHERE series_id = ANY($1)`, ids)
	if err != nil {
		return nil, fmt.Errorf("reading baselines: %w", err)
	}
	withBaseline := map[int64][]string{}
	var id int64
	var model string
	if _, err := pgx.ForEachRow(rows, []any{&id, &model}, func() error {
		withBaseline[id] = append(withBaseline[id], model)
		return nil
	}); err != nil {
		return nil, fmt.Errorf("reading baselines: %w", err)
	}
	var events []DriftEvent
	for _, key := range sortedKeys(series) {
		se := series[key]
		models := withBaseline[se.ID]
		slices.Sort(models)
		for _, model := range models {
			err := s.inTx(ctx, func(tx pgx.Tx) error {
				if err := lockSeries(ctx, tx, []int64{se.ID}); err != nil {
					return err
				}
				evs, err := s.evaluate(ctx, tx, se, model)
				events = append(events, evs...)
				return err
			})
			if err != nil {
				return events, err
			}
		}
	}
	return events, nil
}

func (s *Store) evaluate(ctx context.Context, tx pgx.Tx, se *Series, model string) ([]DriftEvent, error) {
	bm, err := s.activeBaseline(ctx, tx, se, model)
	if err != nil || bm == nil {
		return nil, err
	}
	states, err := loadDriftRows(ctx, tx, se, model)
	if err != nil {
		return nil, err
	}
	now := time.Now().UTC()
	get := func(lead int) *driftRow {
		r := states[lead]
		if r == nil || r.version != bm.version {
			// A new baseline version starts its detectors afresh.
			r = &driftRow{lead: lead, version: bm.version, since: now, dirty: true}
			states[lead] = r
		}
		return r
	}
	var events []DriftEvent
	emit := func(r *driftRow, origin time.Time, t scoring.Transition, n int) {
		if !t.Changed {
			return
		}
		ev := DriftEvent{Time: now, Series: se.Key, Model: model, Lead: r.lead, Origin: origin, Metric: t.Metric,
			Previous: t.From, State: t.To, Value: math.NaN(), Limit: math.NaN(), BandLower: math.NaN(), BandUpper: math.NaN(),
			WindowN: n, KEff: math.NaN(), BaselineVersion: bm.version}
		// The band beside the value: the MAE's 95% band, or the ME's 99%
		// band it was judged against; none for a change without a metric.
		switch {
		case t.Metric == "me" && r.snap.MEAlarmLower != nil:
			ev.BandLower, ev.BandUpper = *r.snap.MEAlarmLower, *r.snap.MEAlarmUpper
		case t.Metric == "mae" && r.snap.MAEBandLower != nil:
			ev.BandLower, ev.BandUpper = *r.snap.MAEBandLower, *r.snap.MAEBandUpper
		}
		if t.Metric != "" {
			ev.Value, ev.Limit, ev.KEff = t.Value, t.Limit, t.KEff
		}
		r.since = now
		events = append(events, ev)
	}

	// Which leads to judge, and how far back the windows must reach.
	leads := make([]int, 0, se.Horizon)
	for h := 1; h <= se.Horizon; h++ {
		leads = append(leads, h)
	}
	dec := se.Decision()
	need := map[int]time.Time{} // lead → last evaluated origin (zero: never)
	for _, h := range append([]int{0}, leads...) {
		need[h] = get(h).lastOrigin
	}
	byLead, pooled, err := s.recentPairs(ctx, tx, se, model, need, dec)
	if err != nil {
		return nil, err
	}

	judge := func(r *driftRow, lb *leadBaseline, series []livePair, abs, bias, sq []float64) {
		if lb == nil {
			r.det.SetBaseline(scoring.Verdict{Reason: "no backtest pairs for this lead"})
			r.snap = Snapshot{Reason: "no backtest pairs for this lead"}
			r.dirty = true
			return
		}
		if t := r.det.SetBaseline(lb.verdict); t.Changed {
			emit(r, r.lastOrigin, t, 0)
			r.snap.Reason = lb.verdict.Reason
			r.dirty = true
		}
		if !lb.verdict.Usable {
			return
		}
		for i, p := range series {
			if !p.origin.After(r.lastOrigin) {
				continue
			}
			lo := max(0, i-WindowN+1)
			var sa, sb, ss float64
			for j := lo; j <= i; j++ {
				sa += abs[j]
				sb += bias[j]
				if sq != nil {
					ss += sq[j]
				}
			}
			n := i - lo + 1
			mae, me, rmse := sa/float64(n), sb/float64(n), math.NaN()
			if sq != nil {
				rmse = math.Sqrt(ss / float64(n))
			}
			bMAE, bRMSE, bME := lb.band(n)
			r.snap = snapshotOf(n, mae, me, rmse, bMAE, bRMSE, bME)
			t := r.det.Observe(scoring.Evaluation{N: n, MAE: mae, ME: me, MAEBand: bMAE, MEBand: bME})
			emit(r, p.origin, t, n)
			r.lastOrigin, r.dirty = p.origin, true
		}
	}
	for _, h := range leads {
		ps := byLead[h]
		abs, bias, sq := make([]float64, len(ps)), make([]float64, len(ps)), make([]float64, len(ps))
		for i, p := range ps {
			abs[i], bias[i], sq[i] = math.Abs(p.e), p.e, p.e*p.e
		}
		judge(get(h), bm.leads[h], ps, abs, bias, sq)
	}
	abs, bias := make([]float64, len(pooled)), make([]float64, len(pooled))
	ps := make([]livePair, len(pooled))
	for i, p := range pooled {
		ps[i], abs[i], bias[i] = livePair{origin: p.origin}, p.abs, p.bias
	}
	judge(get(0), bm.pooled, ps, abs, bias, nil)

	if err := saveDriftRows(ctx, tx, se, model, states, now); err != nil {
		return nil, err
	}
	if len(events) > 0 {
		if err := insertEvents(ctx, tx, se, events); err != nil {
			return nil, err
		}
	}
	return events, nil
}

func snapshotOf(n int, mae, me, rmse float64, bMAE, bRMSE, bME scoring.Band) Snapshot {
	snap := Snapshot{WindowN: n, MAE: fin(mae), ME: fin(me), MAEExpected: fin(bMAE.Expected), MAEBandLower: fin(bMAE.Lower),
		MAEBandUpper: fin(bMAE.Upper), MAEAlarmLimit: fin(bMAE.AlarmUpper), MEExpected: fin(bME.Expected),
		MEBandLower: fin(bME.Lower), MEBandUpper: fin(bME.Upper),
		MEAlarmLower: fin(bME.AlarmLower), MEAlarmUpper: fin(bME.AlarmUpper), KEff: fin(bMAE.KEff)}
	if bRMSE.Metric != "" {
		snap.RMSE, snap.RMSEExpected, snap.RMSEBandLower = fin(rmse), fin(bRMSE.Expected), fin(bRMSE.Lower)
		snap.RMSEBandUpper, snap.RMSEAlarmLimit = fin(bRMSE.Upper), fin(bRMSE.AlarmUpper)
	}
	if mae > bMAE.AlarmUpper {
		snap.Breached = append(snap.Breached, "mae")
	}
	if me < bME.AlarmLower || me > bME.AlarmUpper {
		snap.Breached = append(snap.Breached, "me")
	}
	return snap
}

type pooledPoint struct {
	origin    time.Time
	abs, bias float64
}

// recentPairs reads the scored (non-late) pairs of (series, model) per
// lead, newest first until every lead has WindowN pairs at or before its
// last evaluated origin (so that every new origin's window is complete), and
// the pooled decision-lead points likewise. Results are in origin order.
func (s *Store) recentPairs(ctx context.Context, q querier, se *Series, model string, last map[int]time.Time, dec []int) (map[int][]livePair, []pooledPoint, error) {
	byLead := map[int][]livePair{}
	var pooled []pooledPoint
	older := map[int]int{} // lead → pairs found at or before its last origin
	// A lead never evaluated replays at most the first chunk of history,
	// so that a lead production never sends does not make every
	// evaluation read all of it.
	firstChunk, fresh := true, false
	for _, t := range last {
		fresh = fresh || t.IsZero()
	}
	done := func() bool {
		if firstChunk && fresh {
			return false
		}
		for h, t := range last {
			if !t.IsZero() && older[h] < WindowN {
				return false
			}
		}
		return true
	}
	hi := time.Time{}
	for {
		fs, err := readForecastsQ(ctx, q, se.ID, model, time.Time{}, hi, true)
		if err != nil {
			return nil, nil, err
		}
		if len(fs) == 0 {
			break
		}
		tlo, thi := fs[len(fs)-1].origin, fs[0].origin
		thi = se.step.Add(thi, se.Horizon)
		acts, err := readActualsQ(ctx, q, se.ID, tlo, thi)
		if err != nil {
			return nil, nil, err
		}
		stop := false
		for _, f := range fs {
			errs := map[int]float64{}
			for i, x := range f.vals {
				h := i + 1
				if math.IsNaN(x) || (f.late != nil && i < len(f.late) && f.late[i]) {
					continue
				}
				a, ok := acts[se.step.Add(f.origin, h).UnixNano()]
				if !ok {
					continue
				}
				e := a.value - x
				errs[h] = e
				byLead[h] = append(byLead[h], livePair{f.origin, e})
				if lt, ok := last[h]; ok && !lt.IsZero() && !f.origin.After(lt) {
					older[h]++
				}
			}
			complete := true
			var sa, sb float64
			for _, h := range dec {
				e, ok := errs[h]
				if !ok {
					complete = false
					break
				}
				sa += math.Abs(e)
				sb += e
			}
			if complete {
				n := float64(len(dec))
				pooled = append(pooled, pooledPoint{f.origin, sa / n, sb / n})
				if lt := last[0]; !lt.IsZero() && !f.origin.After(lt) {
					older[0]++
				}
			}
			if done() {
				stop = true
				break
			}
		}
		firstChunk = false
		if stop || done() || len(fs) < chunkOrigins {
			break
		}
		hi = fs[len(fs)-1].origin
	}
	for h := range byLead {
		slices.Reverse(byLead[h])
	}
	slices.Reverse(pooled)
	return byLead, pooled, nil
}

func loadDriftRows(ctx context.Context, q querier, se *Series, model string) (map[int]*driftRow, error) {
	rows, err := q.Query(ctx, `SELECT lead, baseline_version, machine, snapshot, state_since, last_origin
		FROM drift_states WHERE series_id = $1 AND model = $2`, se.ID, model)
	if err != nil {
		return nil, fmt.Errorf("reading drift states: %w", err)
	}
	defer rows.Close()
	out := map[int]*driftRow{}
	for rows.Next() {
		r := &driftRow{}
		var machine, snap []byte
		var last pgtype.Timestamptz
		if err := rows.Scan(&r.lead, &r.version, &machine, &snap, &r.since, &last); err != nil {
			return nil, fmt.Errorf("reading drift states: %w", err)
		}
		if err := json.Unmarshal(machine, &r.det); err != nil {
			return nil, fmt.Errorf("drift state machine: %w", err)
		}
		if err := json.Unmarshal(snap, &r.snap); err != nil {
			return nil, fmt.Errorf("drift snapshot: %w", err)
		}
		r.lastOrigin = last.Time
		out[r.lead] = r
	}
	return out, rows.Err()
}

func saveDriftRows(ctx context.Context, tx pgx.Tx, se *Series, model string, states map[int]*driftRow, now time.Time) error {
	var leads, versions []int
	var stateNames []string
	var machines, snaps [][]byte
	var since []time.Time
	var lasts []pgtype.Timestamptz
	for _, r := range states {
		if !r.dirty {
			continue
		}
		m, err := json.Marshal(r.det)
		if err != nil {
			return err
		}
		sn, err := json.Marshal(r.snap)
		if err != nil {
			return err
		}
		state := r.det.State
		if state == "" {
			state = scoring.StateInsufficientData
		}
		leads, versions, stateNames = append(leads, r.lead), append(versions, r.version), append(stateNames, string(state))
		machines, snaps, since = append(machines, m), append(snaps, sn), append(since, r.since)
		lasts = append(lasts, pgtype.Timestamptz{Time: r.lastOrigin, Valid: !r.lastOrigin.IsZero()})
	}
	if len(leads) == 0 {
		return nil
	}
	_, err := tx.Exec(ctx, `INSERT INTO drift_states (series_id, model, lead, baseline_version, state, state_since, machine, snapshot, last_origin, updated_at)
		SELECT $1, $2, u.lead, u.version, u.state, u.since, u.machine, u.snap, u.last_origin, $10
		FROM unnest($3::int[], $4::int[], $5::text[], $6::timestamptz[], $7::jsonb[], $8::jsonb[], $9::timestamptz[])
			AS u(lead, version, state, since, machine, snap, last_origin)
		ON CONFLICT (series_id, model, lead) DO UPDATE SET baseline_version = excluded.baseline_version, state = excluded.state,
			state_since = excluded.state_since, machine = excluded.machine, snapshot = excluded.snapshot,
			last_origin = excluded.last_origin, updated_at = excluded.updated_at`,
		se.ID, model, leads, versions, stateNames, since, machines, snaps, lasts, now)
	if err != nil {
		return fmt.Errorf("storing drift states: %w", err)
	}
	return nil
}

func nullable(x float64) any {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return x
}

func insertEvents(ctx context.Context, tx pgx.Tx, se *Series, events []DriftEvent) error {
	// Held to commit, this lock makes event sequence numbers become visible
	// in order, so a watcher reading "everything after seq s" can never skip
	// one committed later.
	if _, err := tx.Exec(ctx, "SELECT pg_advisory_xact_lock($1, $2)", lockClass, lockEvents); err != nil {
		return fmt.Errorf("taking the events lock: %w", err)
	}
	for i := range events {
		ev := &events[i]
		var lead any
		if ev.Lead > 0 {
			lead = ev.Lead
		}
		err := tx.QueryRow(ctx, `INSERT INTO drift_events (series_id, model, lead, event_time, origin_time, metric, previous, state,
				value, limit_value, band_lower, band_upper, window_n, k_eff, baseline_version)
			VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15) RETURNING seq`,
			se.ID, ev.Model, lead, ev.Time, ev.Origin, ev.Metric, string(ev.Previous), string(ev.State),
			nullable(ev.Value), nullable(ev.Limit), nullable(ev.BandLower), nullable(ev.BandUpper), ev.WindowN, nullable(ev.KEff), ev.BaselineVersion).Scan(&ev.Seq)
		if err != nil {
			return fmt.Errorf("storing drift event: %w", err)
		}
	}
	return nil
}

// DriftStates lists the current states, optionally of one series and/or
// model ("" = all), ordered by series key, model, lead (series-level 0
// first).
func (s *Store) DriftStates(ctx context.Context, seriesKey, model string) ([]DriftStatus, error) {
	rows, err := s.pool.Query(ctx, `SELECT s.key, d.model, d.lead, d.baseline_version, d.state, d.state_since, d.last_origin, d.snapshot
		FROM drift_states d JOIN series s ON s.id = d.series_id
		WHERE ($1 = '' OR s.key = $1) AND ($2 = '' OR d.model = $2)
		ORDER BY s.key, d.model, d.lead`, seriesKey, model)
	if err != nil {
		return nil, fmt.Errorf("reading drift states: %w", err)
	}
	defer rows.Close()
	var out []DriftStatus
	for rows.Next() {
		var st DriftStatus
		var state string
		var last pgtype.Timestamptz
		var snap []byte
		if err := rows.Scan(&st.Series, &st.Model, &st.Lead, &st.BaselineVersion, &state, &st.Since, &last, &snap); err != nil {
			return nil, fmt.Errorf("reading drift states: %w", err)
		}
		st.State, st.LastOrigin = scoring.State(state), last.Time
		if err := json.Unmarshal(snap, &st.Snapshot); err != nil {
			return nil, err
		}
		out = append(out, st)
	}
	return out, rows.Err()
}

// DriftEvents lists events after sequence number after (0: from the
// start), optionally filtered, oldest first, at most limit.
func (s *Store) DriftEvents(ctx context.Context, seriesKey, model string, since time.Time, after int64, limit int) ([]DriftEvent, error) {
	if limit <= 0 || limit > 10000 {
		limit = 10000
	}
	rows, err := s.pool.Query(ctx, `SELECT e.seq, e.event_time, s.key, e.model, coalesce(e.lead, 0), e.origin_time, e.metric, e.previous, e.state,
			e.value, e.limit_value, e.band_lower, e.band_upper, e.window_n, e.k_eff, e.baseline_version
		FROM drift_events e JOIN series s ON s.id = e.series_id
		WHERE e.seq > $1 AND ($2 = '' OR s.key = $2) AND ($3 = '' OR e.model = $3) AND e.event_time >= $4
		ORDER BY e.seq LIMIT $5`, after, seriesKey, model, orMin(since), limit)
	if err != nil {
		return nil, fmt.Errorf("reading drift events: %w", err)
	}
	defer rows.Close()
	var out []DriftEvent
	for rows.Next() {
		var ev DriftEvent
		var prev, state string
		var value, limit, lo, hi, keff *float64
		if err := rows.Scan(&ev.Seq, &ev.Time, &ev.Series, &ev.Model, &ev.Lead, &ev.Origin, &ev.Metric, &prev, &state,
			&value, &limit, &lo, &hi, &ev.WindowN, &keff, &ev.BaselineVersion); err != nil {
			return nil, fmt.Errorf("reading drift events: %w", err)
		}
		ev.Previous, ev.State = scoring.State(prev), scoring.State(state)
		ev.Value, ev.Limit, ev.BandLower, ev.BandUpper, ev.KEff = orNaN(value), orNaN(limit), orNaN(lo), orNaN(hi), orNaN(keff)
		out = append(out, ev)
	}
	return out, rows.Err()
}

// LastEventSeq is the sequence number of the newest committed event (0
// when there is none): where a watch without a resume token starts.
func (s *Store) LastEventSeq(ctx context.Context) (int64, error) {
	var seq int64
	if err := s.pool.QueryRow(ctx, `SELECT coalesce(max(seq), 0) FROM drift_events`).Scan(&seq); err != nil {
		return 0, fmt.Errorf("reading drift events: %w", err)
	}
	return seq, nil
}

func orNaN(p *float64) float64 {
	if p == nil {
		return math.NaN()
	}
	return *p
}

// LeadView is what a baseline expects of one lead (Lead 0: the pooled
// decision-lead quantity) for a live window of N origins.
type LeadView struct {
	Lead          int
	K             int
	KEff          float64
	Expected      scoring.Metrics // every metric over the backtest pairs; zero for the pooled entry
	MAE, RMSE, ME scoring.Band    // RMSE is zero for the pooled entry
	Usable        bool
	Reason        string
}

func (lb *leadBaseline) view(lead, n int) LeadView {
	mae, rmse, me := lb.band(n)
	return LeadView{Lead: lead, K: lb.abs.K, KEff: lb.abs.KEff, Expected: lb.expected, MAE: mae, RMSE: rmse, ME: me,
		Usable: lb.verdict.Usable, Reason: lb.verdict.Reason}
}

// BaselineView returns a baseline version's per-lead expectations, bands
// and limits for a window of n origins, and the pooled entry (nil when no
// backtest origin has every decision lead). version 0 is the active one.
func (s *Store) BaselineView(ctx context.Context, key, model string, version, n int) (BaselineVersion, []LeadView, *LeadView, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return BaselineVersion{}, nil, nil, err
	}
	if n < 1 || n > s.limits.MaxWindow {
		return BaselineVersion{}, nil, nil, invalid("window_n", "want 1 to %d origins", s.limits.MaxWindow)
	}
	b, err := s.baseline(ctx, s.pool, se, model, version)
	if err != nil {
		return BaselineVersion{}, nil, nil, err
	}
	if err := refreshShapeWarnings(ctx, s.pool, se, &b.BaselineVersion); err != nil {
		return BaselineVersion{}, nil, nil, err
	}
	m := s.prepare(se, b)
	var leads []LeadView
	for _, l := range b.Leads {
		leads = append(leads, m.leads[l.Lead].view(l.Lead, n))
	}
	var pooled *LeadView
	if m.pooled != nil {
		v := m.pooled.view(0, n)
		pooled = &v
	}
	return b.BaselineVersion, leads, pooled, nil
}

// ActiveLeadViews is BaselineView of the active baseline keyed by lead,
// for decorating live accuracy; nil when there is no baseline.
func (s *Store) ActiveLeadViews(ctx context.Context, key, model string, ns map[int]int) (int, map[int]LeadView, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return 0, nil, err
	}
	m, err := s.activeBaseline(ctx, s.pool, se, model)
	if err != nil || m == nil {
		return 0, nil, err
	}
	out := map[int]LeadView{}
	for h, n := range ns {
		if lb := m.leads[h]; lb != nil && n >= 1 {
			out[h] = lb.view(h, n)
		}
	}
	return m.version, out, nil
}

// ForecastFreshness is the newest production origin received for a
// (series, model).
type ForecastFreshness struct {
	Series, Model string
	LastOrigin    time.Time
	ReceivedAt    time.Time
	// OriginInterval is the usual gap between origins: the step times the
	// active baseline's origin cadence, or the step when there is none.
	OriginInterval time.Duration
}

// ActualFreshness is the newest actual received for a series.
type ActualFreshness struct {
	Series     string
	LastTime   time.Time
	ReceivedAt time.Time
}

// Freshness lists the newest origin per (series, model) and the newest
// actual per series, ordered by series key (and model).
func (s *Store) Freshness(ctx context.Context) ([]ForecastFreshness, []ActualFreshness, error) {
	// The newest row per (series, model) and per series is one backward
	// probe of the primary key each.
	rows, err := s.pool.Query(ctx, `SELECT s.key, m.model, f.origin, f.received_at,
			coalesce((SELECT b.origin_cadence_steps FROM baselines b WHERE b.series_id = m.series_id AND b.model = m.model
				ORDER BY b.version DESC LIMIT 1), 1)
		FROM series_models m JOIN series s ON s.id = m.series_id
		CROSS JOIN LATERAL (SELECT origin, received_at FROM forecasts f WHERE f.series_id = m.series_id AND f.model = m.model
			ORDER BY origin DESC LIMIT 1) f
		ORDER BY s.key, m.model`)
	if err != nil {
		return nil, nil, fmt.Errorf("reading freshness: %w", err)
	}
	var fs []ForecastFreshness
	for rows.Next() {
		var f ForecastFreshness
		var cadence int
		if err := rows.Scan(&f.Series, &f.Model, &f.LastOrigin, &f.ReceivedAt, &cadence); err != nil {
			rows.Close()
			return nil, nil, fmt.Errorf("reading freshness: %w", err)
		}
		if se, err := s.seriesByKey(ctx, f.Series); err == nil {
			f.OriginInterval = se.step.Add(f.LastOrigin, max(cadence, 1)).Sub(f.LastOrigin)
		}
		fs = append(fs, f)
	}
	rows.Close()
	if err := rows.Err(); err != nil {
		return nil, nil, err
	}
	rows, err = s.pool.Query(ctx, `SELECT s.key, a.time, a.received_at FROM series s
		CROSS JOIN LATERAL (SELECT time, received_at FROM actuals a WHERE a.series_id = s.id ORDER BY time DESC LIMIT 1) a
		ORDER BY s.key`)
	if err != nil {
		return nil, nil, fmt.Errorf("reading freshness: %w", err)
	}
	defer rows.Close()
	var as []ActualFreshness
	for rows.Next() {
		var a ActualFreshness
		if err := rows.Scan(&a.Series, &a.LastTime, &a.ReceivedAt); err != nil {
			return nil, nil, fmt.Errorf("reading freshness: %w", err)
		}
		as = append(as, a)
	}
	return fs, as, rows.Err()
}
