package store

import (
	"context"
	"encoding/json"
	"fmt"
	"math"
	"slices"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgtype"
	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/aftercast/aftercast/scoring"
)

// The drift records: current states, announced events, the marks of what
// must be re-judged and the checkpoints replays resume from. Judging lives
// in scoring and server/drift; this file is SQL.

// Snapshot is a drift state's last evaluation: the window's values, the
// bands and limits they were judged against, and what entered the state.
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
	// LevelScale is the window's mean s(ŷ) (method.md §4a) the expectations
	// and bands above were multiplied by: absent (1) without scaling.
	// BacktestMAE is the plain MAE over the backtest pairs, beside the
	// level-adjusted expectation.
	LevelScale  *float64 `json:"level_scale,omitempty"`
	BacktestMAE *float64 `json:"backtest_mae,omitempty"`
	// Breached lists the metrics beyond their alarm limits at the last
	// evaluation.
	Breached []scoring.Metric `json:"breached,omitempty"`
	Reason   string           `json:"reason,omitempty"` // why the baseline is unusable
	// Entered is what entered the current state: the metric, its window
	// value and the limit it crossed (empty for a change without a metric).
	EnteredMetric scoring.Metric `json:"entered_metric,omitempty"`
	EnteredValue  *float64       `json:"entered_value,omitempty"`
	EnteredLimit  *float64       `json:"entered_limit,omitempty"`
	// OriginsSinceOnset counts the evaluations after the one that entered
	// the state (0 when the last one did, and for the state the period
	// started in).
	OriginsSinceOnset int `json:"origins_since_onset,omitempty"`
}

// DriftStatus is the current drift state of one lead (Lead > 0) or of the
// series (Lead 0) for a model.
type DriftStatus struct {
	Series          string
	Model           string
	Lead            int
	BaselineVersion int
	State           scoring.State
	Onset           time.Time // origin at which the state was entered; zero for the state the period started in
	Noticed         time.Time // when aftercast announced the state (wall clock)
	LastOrigin      time.Time // last origin judged; zero: none
	Snapshot        Snapshot
}

// DriftEvent is one announced change of a drift state.
type DriftEvent struct {
	Seq             int64
	Time            time.Time // when it was recorded
	Series          string
	Model           string
	Lead            int       // 0: the series-level state
	Origin          time.Time // onset: the origin at which the new state was entered
	Cause           scoring.Cause
	Metric          scoring.Metric
	Previous, State scoring.State
	Value, Limit    float64 // NaN when the change had no metric
	BandLower       float64
	BandUpper       float64
	WindowN         int
	KEff            float64
	BaselineVersion int
}

// DriftMark says, from the write that made it necessary, that a series'
// drift must be re-judged from an origin on.
type DriftMark struct {
	ID       int64
	Model    string    // "": every model of the series
	From     time.Time // zero: the whole production period
	Baseline bool      // a new baseline version: the period is re-judged against it
	Created  time.Time
}

// ActiveBaseline is the active baseline version of a (series, model).
type ActiveBaseline struct {
	Model      string
	Version    int
	LastOrigin time.Time // last backtest origin: production starts after it
}

// ClaimedSeries is one series of a [DriftClaim]: its marks, its active
// baselines and its stored states.
type ClaimedSeries struct {
	Series    *Series
	Marks     []DriftMark
	Baselines []ActiveBaseline         // by model
	States    map[string][]DriftStatus // by model
}

// DriftClaim holds series claimed for evaluation. Each claimed series'
// evaluation lock is held by the claim's connection until Commit or
// Release, so that replicas never judge one series at the same time; pushes
// take other locks and are never held up by it. Everything the claim reads
// comes from one snapshot taken after the locks: the marks it claims and
// the data they were written with are seen together, and data committed
// later is left, with its marks, to the next claim.
type DriftClaim struct {
	conn   *pgxpool.Conn
	tx     pgx.Tx
	locked []int64
	Series []*ClaimedSeries
	ids    map[string]int64 // series key → id
	kept   map[int64]bool   // series whose marks Commit leaves
}

// lockClassDrift is the first key of the per-series evaluation locks
// (pg_try_advisory_lock(class, series id)); "afdr".
const lockClassDrift = 0x61666472

// ClaimDrift claims up to limit series with marks that no other evaluator
// holds, oldest marks first, and reads their marks, baselines and states.
// It returns nil when there is nothing to claim.
func (s *Store) ClaimDrift(ctx context.Context, limit int) (*DriftClaim, error) {
	conn, err := s.pool.Acquire(ctx)
	if err != nil {
		return nil, fmt.Errorf("acquiring a connection: %w", err)
	}
	c := &DriftClaim{conn: conn, ids: map[string]int64{}}
	ok := false
	defer func() {
		if !ok {
			c.Release(ctx)
		}
	}()
	// Session locks, taken before the transaction: its snapshot then
	// includes whatever the previous holder of a lock committed.
	rows, err := conn.Query(ctx, `WITH c AS MATERIALIZED (
			SELECT series_id, min(id) AS first FROM drift_marks GROUP BY series_id ORDER BY first LIMIT $1),
		l AS MATERIALIZED (SELECT series_id, first, pg_try_advisory_lock($2, series_id::int) AS got FROM c)
		SELECT series_id FROM l WHERE got ORDER BY first`, limit, lockClassDrift)
	if err != nil {
		return nil, fmt.Errorf("claiming drift marks: %w", err)
	}
	if c.locked, err = pgx.CollectRows(rows, pgx.RowTo[int64]); err != nil {
		return nil, fmt.Errorf("claiming drift marks: %w", err)
	}
	if len(c.locked) == 0 {
		return nil, nil
	}
	if c.tx, err = conn.BeginTx(ctx, pgx.TxOptions{IsoLevel: pgx.RepeatableRead}); err != nil {
		return nil, fmt.Errorf("starting transaction: %w", err)
	}
	byID := map[int64]*ClaimedSeries{}
	// The series are read in the snapshot, not from the cache: their error
	// scale and decision leads are judged with, and another replica may
	// have changed them (with a mark this claim holds).
	rows, err = c.tx.Query(ctx, "SELECT "+seriesColumns+" FROM series WHERE id = ANY($1)", c.locked)
	if err != nil {
		return nil, fmt.Errorf("claiming drift marks: %w", err)
	}
	byKey := map[int64]*Series{}
	for rows.Next() {
		se, err := scanSeries(rows)
		if err != nil {
			rows.Close()
			return nil, fmt.Errorf("claiming drift marks: %w", err)
		}
		byKey[se.ID] = se
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("claiming drift marks: %w", err)
	}
	for _, id := range c.locked {
		se := byKey[id]
		if se == nil {
			continue // deleted meanwhile: nothing to judge
		}
		cs := &ClaimedSeries{Series: se, States: map[string][]DriftStatus{}}
		c.Series = append(c.Series, cs)
		byID[se.ID], c.ids[se.Key] = cs, se.ID
	}
	if err := c.readClaimed(ctx, c.locked, byID); err != nil {
		return nil, err
	}
	ok = true
	return c, nil
}

// readClaimed reads the marks, active baselines and states of the claimed
// series in one round trip.
func (c *DriftClaim) readClaimed(ctx context.Context, ids []int64, byID map[int64]*ClaimedSeries) error {
	b := &pgx.Batch{}
	b.Queue(`SELECT id, series_id, coalesce(model, ''), from_origin, cause = 'baseline', created_at FROM drift_marks
		WHERE series_id = ANY($1) ORDER BY id`, ids).Query(func(rows pgx.Rows) error {
		var m DriftMark
		var id int64
		var from pgtype.Timestamptz
		_, err := pgx.ForEachRow(rows, []any{&m.ID, &id, &m.Model, &from, &m.Baseline, &m.Created}, func() error {
			m.From = from.Time
			byID[id].Marks = append(byID[id].Marks, m)
			return nil
		})
		return err
	})
	b.Queue(`SELECT DISTINCT ON (series_id, model) series_id, model, version, last_origin FROM baselines
		WHERE series_id = ANY($1) ORDER BY series_id, model, version DESC`, ids).Query(func(rows pgx.Rows) error {
		var a ActiveBaseline
		var id int64
		_, err := pgx.ForEachRow(rows, []any{&id, &a.Model, &a.Version, &a.LastOrigin}, func() error {
			byID[id].Baselines = append(byID[id].Baselines, a)
			return nil
		})
		return err
	})
	b.Queue(statesQuery+` WHERE d.series_id = ANY($1) ORDER BY d.series_id, d.model, d.lead`, ids).Query(func(rows pgx.Rows) error {
		return scanStates(rows, func(id int64, st DriftStatus) {
			byID[id].States[st.Model] = append(byID[id].States[st.Model], st)
		})
	})
	if err := c.tx.SendBatch(ctx, b).Close(); err != nil {
		return fmt.Errorf("reading claimed drift marks: %w", err)
	}
	return nil
}

// Keep leaves a claimed series' marks in place when the claim commits: its
// judgement failed and must be tried again.
func (c *DriftClaim) Keep(se *Series) {
	if c.kept == nil {
		c.kept = map[int64]bool{}
	}
	c.kept[se.ID] = true
}

// Release gives the claim up: uncommitted, its marks stay for the next
// evaluation. It is safe to call more than once.
func (c *DriftClaim) Release(ctx context.Context) {
	if c.conn == nil {
		return
	}
	ctx = context.WithoutCancel(ctx)
	if c.tx != nil {
		_ = c.tx.Rollback(ctx)
	}
	if len(c.locked) > 0 {
		if _, err := c.conn.Exec(ctx, `SELECT pg_advisory_unlock($1, id::int) FROM unnest($2::bigint[]) AS id`, lockClassDrift, c.locked); err != nil {
			// A session that cannot unlock is closed: that releases its locks.
			_ = c.conn.Conn().Close(ctx)
		}
	}
	c.conn.Release()
	c.conn = nil
}

// CheckpointQuery asks for the newest checkpoint of a (series, model) and
// baseline version at an origin before Before.
type CheckpointQuery struct {
	Series  *Series
	Model   string
	Version int
	Before  time.Time
}

// Checkpoints answers the queries in order; a checkpoint with nil Leads
// means none is stored (start from the beginning). A checkpoint is a cache
// of a replay: one that cannot be decoded (written by another version, say)
// counts as none, and the replay starts from the beginning.
func (c *DriftClaim) Checkpoints(ctx context.Context, qs []CheckpointQuery) ([]scoring.Checkpoint, error) {
	out := make([]scoring.Checkpoint, len(qs))
	if len(qs) == 0 {
		return out, nil
	}
	idx, ids, models, versions, before := make([]int, len(qs)), make([]int64, len(qs)), make([]string, len(qs)), make([]int, len(qs)), make([]time.Time, len(qs))
	for i, q := range qs {
		idx[i], ids[i], models[i], versions[i], before[i] = i, q.Series.ID, q.Model, q.Version, q.Before
	}
	rows, err := c.tx.Query(ctx, `SELECT r.i, k.checkpoint FROM unnest($1::int[], $2::bigint[], $3::text[], $4::int[], $5::timestamptz[])
			AS r(i, series_id, model, version, before)
		JOIN LATERAL (SELECT checkpoint FROM drift_checkpoints k WHERE k.series_id = r.series_id AND k.model = r.model
			AND k.baseline_version = r.version AND k.origin < r.before ORDER BY k.origin DESC LIMIT 1) k ON true`,
		idx, ids, models, versions, before)
	if err != nil {
		return nil, fmt.Errorf("reading drift checkpoints: %w", err)
	}
	var i int
	var raw []byte
	_, err = pgx.ForEachRow(rows, []any{&i, &raw}, func() error {
		if json.Unmarshal(raw, &out[i]) != nil {
			out[i] = scoring.Checkpoint{}
		}
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("reading drift checkpoints: %w", err)
	}
	return out, nil
}

// PairsQuery asks for the scored pairs of a (series, model) at origins
// from From on.
type PairsQuery struct {
	Series *Series
	Model  string
	From   time.Time
}

// ScoredPairs answers the queries in order: the scored pairs (late values
// left out) sorted by origin and lead, read through the primary keys in
// two round trips for all queries.
func (c *DriftClaim) ScoredPairs(ctx context.Context, qs []PairsQuery) ([][]scoring.Pair, error) {
	return scoredPairs(ctx, c.tx, qs)
}

// ScoredPairs is [DriftClaim.ScoredPairs] outside a claim, for reads.
func (s *Store) ScoredPairs(ctx context.Context, qs []PairsQuery) ([][]scoring.Pair, error) {
	return scoredPairs(ctx, s.pool, qs)
}

func scoredPairs(ctx context.Context, q querier, qs []PairsQuery) ([][]scoring.Pair, error) {
	out := make([][]scoring.Pair, len(qs))
	if len(qs) == 0 {
		return out, nil
	}
	idx, ids, models, from := make([]int, len(qs)), make([]int64, len(qs)), make([]string, len(qs)), make([]time.Time, len(qs))
	for i, p := range qs {
		idx[i], ids[i], models[i], from[i] = i, p.Series.ID, p.Model, orMin(p.From)
	}
	// OFFSET 0 keeps each lateral subquery a range probe of the primary
	// key (see completedQuery).
	rows, err := q.Query(ctx, `SELECT r.i, f.origin, f.vals, f.late
		FROM unnest($1::int[], $2::bigint[], $3::text[], $4::timestamptz[]) AS r(i, series_id, model, lo)
		JOIN LATERAL (SELECT origin, vals, late FROM forecasts f
			WHERE f.series_id = r.series_id AND f.model = r.model AND f.origin >= r.lo OFFSET 0) f ON true`, idx, ids, models, from)
	if err != nil {
		return nil, fmt.Errorf("reading forecasts: %w", err)
	}
	vecs := make([][]storedForecast, len(qs))
	var i int
	var f storedForecast
	var vals []pgtype.Float8
	if _, err := pgx.ForEachRow(rows, []any{&i, &f.origin, &vals, &f.late}, func() error {
		f.origin, f.vals = f.origin.UTC(), fromFloat8(vals)
		vecs[i] = append(vecs[i], f)
		f = storedForecast{}
		return nil
	}); err != nil {
		return nil, fmt.Errorf("reading forecasts: %w", err)
	}
	acts, err := actualsFor(ctx, q, qs, vecs)
	if err != nil {
		return nil, err
	}
	for i, p := range qs {
		slices.SortFunc(vecs[i], func(a, b storedForecast) int { return a.origin.Compare(b.origin) })
		out[i] = pairUp(p.Series, vecs[i], acts[p.Series.ID])
	}
	return out, nil
}

// actualsFor reads, per series, the actuals the vectors' targets can meet.
func actualsFor(ctx context.Context, q querier, qs []PairsQuery, vecs [][]storedForecast) (map[int64]map[int64]float64, error) {
	type span struct{ lo, hi time.Time }
	spans := map[int64]*span{}
	for i, p := range qs {
		if len(vecs[i]) == 0 {
			continue
		}
		lo, hi := vecs[i][0].origin, vecs[i][0].origin
		for _, f := range vecs[i] {
			lo, hi = minTimeOf(lo, f.origin), maxTimeOf(hi, f.origin)
		}
		hi = p.Series.step.Add(hi, p.Series.Horizon)
		if sp := spans[p.Series.ID]; sp == nil {
			spans[p.Series.ID] = &span{lo, hi}
		} else {
			sp.lo, sp.hi = minTimeOf(sp.lo, lo), maxTimeOf(sp.hi, hi)
		}
	}
	out := map[int64]map[int64]float64{}
	if len(spans) == 0 {
		return out, nil
	}
	ids, los, his := make([]int64, 0, len(spans)), make([]time.Time, 0, len(spans)), make([]time.Time, 0, len(spans))
	for id, sp := range spans {
		ids, los, his = append(ids, id), append(los, sp.lo), append(his, sp.hi)
		out[id] = map[int64]float64{}
	}
	rows, err := q.Query(ctx, `SELECT a.series_id, a.time, a.value FROM unnest($1::bigint[], $2::timestamptz[], $3::timestamptz[]) AS r(series_id, lo, hi)
		JOIN LATERAL (SELECT series_id, time, value FROM actuals a
			WHERE a.series_id = r.series_id AND a.time > r.lo AND a.time <= r.hi OFFSET 0) a ON true`, ids, los, his)
	if err != nil {
		return nil, fmt.Errorf("reading actuals: %w", err)
	}
	var id int64
	var t time.Time
	var v float64
	if _, err := pgx.ForEachRow(rows, []any{&id, &t, &v}, func() error {
		out[id][t.UnixNano()] = v
		return nil
	}); err != nil {
		return nil, fmt.Errorf("reading actuals: %w", err)
	}
	return out, nil
}

// pairUp matches vectors (in origin order) with actuals: the scored pairs
// of method.md §3, late values left out.
func pairUp(se *Series, vecs []storedForecast, acts map[int64]float64) []scoring.Pair {
	var out []scoring.Pair
	for _, f := range vecs {
		for i, x := range f.vals {
			if math.IsNaN(x) || i < len(f.late) && f.late[i] {
				continue
			}
			y, ok := acts[se.step.Add(f.origin, i+1).UnixNano()]
			if !ok {
				continue
			}
			out = append(out, scoring.Pair{Origin: f.origin, Lead: i + 1, Forecast: x, Actual: y})
		}
	}
	return out
}

func minTimeOf(a, b time.Time) time.Time {
	if b.Before(a) {
		return b
	}
	return a
}

func maxTimeOf(a, b time.Time) time.Time {
	if b.After(a) {
		return b
	}
	return a
}

// CheckpointWrite replaces a (series, model)'s checkpoints after After
// (and every one of another baseline version) by New, then keeps the
// newest and, of those whose Seq is a multiple of Every, the newest Keep.
type CheckpointWrite struct {
	Series  *Series
	Model   string
	Version int
	After   time.Time // zero: replace all
	New     []scoring.Checkpoint
	Every   int
	Keep    int
}

// DriftWrite is what an evaluation of claimed series stores.
type DriftWrite struct {
	States      []DriftStatus
	Checkpoints []CheckpointWrite
	Events      []DriftEvent // Seq is set on commit
	Now         time.Time    // updated_at of the states
}

// Commit stores w, removes the claimed marks (but those of series kept)
// and commits, all in one transaction. It returns the events with their sequence numbers.
func (c *DriftClaim) Commit(ctx context.Context, w DriftWrite) ([]DriftEvent, error) {
	defer c.Release(ctx)
	b := &pgx.Batch{}
	if err := c.queueStates(b, w.States, w.Now); err != nil {
		return nil, err
	}
	if err := c.queueCheckpoints(b, w.Checkpoints); err != nil {
		return nil, err
	}
	events := slices.Clone(w.Events)
	if len(events) > 0 {
		// Held to commit, this lock makes event sequence numbers become
		// visible in order, so a watcher reading "everything after seq s"
		// can never skip one committed later.
		b.Queue("SELECT pg_advisory_xact_lock($1, $2)", lockClass, lockEvents)
		for i := range events {
			c.queueEvent(b, &events[i])
		}
	}
	var done []int64
	for _, cs := range c.Series {
		if !c.kept[cs.Series.ID] {
			for _, m := range cs.Marks {
				done = append(done, m.ID)
			}
		}
	}
	b.Queue(`DELETE FROM drift_marks WHERE id = ANY($1)`, done)
	if err := c.tx.SendBatch(ctx, b).Close(); err != nil {
		return nil, fmt.Errorf("storing drift evaluation: %w", err)
	}
	if err := c.tx.Commit(ctx); err != nil {
		return nil, fmt.Errorf("committing drift evaluation: %w", err)
	}
	return events, nil
}

func (c *DriftClaim) queueStates(b *pgx.Batch, sts []DriftStatus, now time.Time) error {
	if len(sts) == 0 {
		return nil
	}
	n := len(sts)
	ids, models, leads, versions, states := make([]int64, n), make([]string, n), make([]int, n), make([]int, n), make([]string, n)
	noticed, onsets, lasts, snaps := make([]time.Time, n), make([]pgtype.Timestamptz, n), make([]pgtype.Timestamptz, n), make([][]byte, n)
	for i, st := range sts {
		snap, err := json.Marshal(st.Snapshot)
		if err != nil {
			return err
		}
		ids[i], models[i], leads[i], versions[i], states[i] = c.ids[st.Series], st.Model, st.Lead, st.BaselineVersion, string(st.State)
		noticed[i], snaps[i] = st.Noticed, snap
		onsets[i] = pgtype.Timestamptz{Time: st.Onset, Valid: !st.Onset.IsZero()}
		lasts[i] = pgtype.Timestamptz{Time: st.LastOrigin, Valid: !st.LastOrigin.IsZero()}
	}
	b.Queue(`INSERT INTO drift_states (series_id, model, lead, baseline_version, state, noticed_at, onset_origin, last_origin, snapshot, updated_at)
		SELECT u.series_id, u.model, u.lead, u.version, u.state, u.noticed, u.onset, u.last_origin, u.snap, $10
		FROM unnest($1::bigint[], $2::text[], $3::int[], $4::int[], $5::text[], $6::timestamptz[], $7::timestamptz[], $8::timestamptz[], $9::jsonb[])
			AS u(series_id, model, lead, version, state, noticed, onset, last_origin, snap)
		ON CONFLICT (series_id, model, lead) DO UPDATE SET baseline_version = excluded.baseline_version, state = excluded.state,
			noticed_at = excluded.noticed_at, onset_origin = excluded.onset_origin, last_origin = excluded.last_origin,
			snapshot = excluded.snapshot, updated_at = excluded.updated_at`,
		ids, models, leads, versions, states, noticed, onsets, lasts, snaps, now)
	return nil
}

func (c *DriftClaim) queueCheckpoints(b *pgx.Batch, ws []CheckpointWrite) error {
	if len(ws) == 0 {
		return nil
	}
	var (
		ids, newIDs           []int64
		models, newModels     []string
		afters, origins       []time.Time
		versions, newVersions []int
		seqs                  []int
		raws                  [][]byte
		every, keep           = max(ws[0].Every, 1), ws[0].Keep
	)
	for _, w := range ws {
		ids, models, afters, versions = append(ids, w.Series.ID), append(models, w.Model), append(afters, orMin(w.After)), append(versions, w.Version)
		for _, cp := range w.New {
			raw, err := json.Marshal(cp)
			if err != nil {
				return err
			}
			newIDs, newModels, newVersions = append(newIDs, w.Series.ID), append(newModels, w.Model), append(newVersions, w.Version)
			origins, seqs, raws = append(origins, cp.Origin), append(seqs, cp.Seq), append(raws, raw)
		}
	}
	b.Queue(`DELETE FROM drift_checkpoints d USING unnest($1::bigint[], $2::text[], $3::timestamptz[], $4::int[]) AS k(series_id, model, after, version)
		WHERE d.series_id = k.series_id AND d.model = k.model AND (d.origin > k.after OR d.baseline_version <> k.version)`,
		ids, models, afters, versions)
	if len(raws) > 0 {
		b.Queue(`INSERT INTO drift_checkpoints (series_id, model, origin, baseline_version, seq, checkpoint)
			SELECT * FROM unnest($1::bigint[], $2::text[], $3::timestamptz[], $4::int[], $5::int[], $6::jsonb[])
			ON CONFLICT (series_id, model, origin) DO UPDATE SET baseline_version = excluded.baseline_version,
				seq = excluded.seq, checkpoint = excluded.checkpoint`,
			newIDs, newModels, origins, newVersions, seqs, raws)
	}
	// Keep the newest checkpoint and the newest keep of those whose seq is
	// a multiple of every.
	b.Queue(`DELETE FROM drift_checkpoints d USING (
			SELECT series_id, model, origin FROM (
				SELECT c.series_id, c.model, c.origin, c.seq % $3 = 0 AS grid,
					row_number() OVER (PARTITION BY c.series_id, c.model ORDER BY c.origin DESC) AS newest,
					row_number() OVER (PARTITION BY c.series_id, c.model, c.seq % $3 = 0 ORDER BY c.origin DESC) AS rank
				FROM drift_checkpoints c JOIN unnest($1::bigint[], $2::text[]) AS k(series_id, model) USING (series_id, model)) x
			WHERE newest > 1 AND (NOT grid OR rank > $4)) z
		WHERE d.series_id = z.series_id AND d.model = z.model AND d.origin = z.origin`, ids, models, every, keep)
	return nil
}

func (c *DriftClaim) queueEvent(b *pgx.Batch, ev *DriftEvent) {
	var lead any
	if ev.Lead > 0 {
		lead = ev.Lead
	}
	b.Queue(`INSERT INTO drift_events (series_id, model, lead, event_time, origin_time, cause, metric, previous, state,
			value, limit_value, band_lower, band_upper, window_n, k_eff, baseline_version)
		VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9, $10, $11, $12, $13, $14, $15, $16) RETURNING seq`,
		c.ids[ev.Series], ev.Model, lead, ev.Time, ev.Origin, string(ev.Cause), string(ev.Metric), string(ev.Previous), string(ev.State),
		nullable(ev.Value), nullable(ev.Limit), nullable(ev.BandLower), nullable(ev.BandUpper), ev.WindowN, nullable(ev.KEff),
		ev.BaselineVersion).QueryRow(func(row pgx.Row) error { return row.Scan(&ev.Seq) })
}

func nullable(x float64) any {
	if math.IsNaN(x) || math.IsInf(x, 0) {
		return nil
	}
	return x
}

const statesQuery = `SELECT d.series_id, s.key, d.model, d.lead, d.baseline_version, d.state, d.noticed_at, d.onset_origin, d.last_origin, d.snapshot
	FROM drift_states d JOIN series s ON s.id = d.series_id`

func scanStates(rows pgx.Rows, each func(id int64, st DriftStatus)) error {
	var st DriftStatus
	var id int64
	var state string
	var onset, last pgtype.Timestamptz
	var snap []byte
	_, err := pgx.ForEachRow(rows, []any{&id, &st.Series, &st.Model, &st.Lead, &st.BaselineVersion, &state, &st.Noticed, &onset, &last, &snap}, func() error {
		st.State, st.Onset, st.LastOrigin, st.Snapshot = scoring.State(state), onset.Time, last.Time, Snapshot{}
		if err := json.Unmarshal(snap, &st.Snapshot); err != nil {
			return fmt.Errorf("drift snapshot: %w", err)
		}
		each(id, st)
		return nil
	})
	if err != nil {
		return fmt.Errorf("reading drift states: %w", err)
	}
	return nil
}

// DriftStates lists the current states, optionally of one series and/or
// model ("" = all), ordered by series key, model, lead (series-level 0
// first).
func (s *Store) DriftStates(ctx context.Context, seriesKey, model string) ([]DriftStatus, error) {
	rows, err := s.pool.Query(ctx, statesQuery+` WHERE ($1 = '' OR s.key = $1) AND ($2 = '' OR d.model = $2)
		ORDER BY s.key, d.model, d.lead`, seriesKey, model)
	if err != nil {
		return nil, fmt.Errorf("reading drift states: %w", err)
	}
	var out []DriftStatus
	err = scanStates(rows, func(_ int64, st DriftStatus) { out = append(out, st) })
	return out, err
}

// EventFilter selects drift events: after sequence number After (0: from
// the start), of one series and model ("" = all), recorded at or after
// Since, with onset origins in [OriginFrom, OriginTo) (zero: open), at
// most Limit (0 or more than 10 000: 10 000).
type EventFilter struct {
	Series, Model        string
	Since                time.Time
	OriginFrom, OriginTo time.Time
	After                int64
	Limit                int
}

// DriftEvents lists the selected events, oldest first (commit order).
func (s *Store) DriftEvents(ctx context.Context, f EventFilter) ([]DriftEvent, error) {
	if f.Limit <= 0 || f.Limit > 10000 {
		f.Limit = 10000
	}
	rows, err := s.pool.Query(ctx, `SELECT e.seq, e.event_time, s.key, e.model, coalesce(e.lead, 0), e.origin_time, e.cause, e.metric,
			e.previous, e.state, e.value, e.limit_value, e.band_lower, e.band_upper, e.window_n, e.k_eff, e.baseline_version
		FROM drift_events e JOIN series s ON s.id = e.series_id
		WHERE e.seq > $1 AND ($2 = '' OR s.key = $2) AND ($3 = '' OR e.model = $3) AND e.event_time >= $4
			AND e.origin_time >= $5 AND e.origin_time < $6
		ORDER BY e.seq LIMIT $7`, f.After, f.Series, f.Model, orMin(f.Since), orMin(f.OriginFrom), orMax(f.OriginTo), f.Limit)
	if err != nil {
		return nil, fmt.Errorf("reading drift events: %w", err)
	}
	var out []DriftEvent
	var ev DriftEvent
	var cause, metric, prev, state string
	var value, limit, lo, hi, keff *float64
	_, err = pgx.ForEachRow(rows, []any{&ev.Seq, &ev.Time, &ev.Series, &ev.Model, &ev.Lead, &ev.Origin, &cause, &metric, &prev, &state,
		&value, &limit, &lo, &hi, &ev.WindowN, &keff, &ev.BaselineVersion}, func() error {
		ev.Cause, ev.Metric, ev.Previous, ev.State = scoring.Cause(cause), scoring.Metric(metric), scoring.State(prev), scoring.State(state)
		ev.Value, ev.Limit, ev.BandLower, ev.BandUpper, ev.KEff = orNaN(value), orNaN(limit), orNaN(lo), orNaN(hi), orNaN(keff)
		out = append(out, ev)
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("reading drift events: %w", err)
	}
	return out, nil
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

// DriftBacklog is how many marks wait for evaluation and how long the
// oldest has waited, by the database's clock, which wrote the marks (0
// when none waits).
func (s *Store) DriftBacklog(ctx context.Context) (pending int64, oldest time.Duration, err error) {
	return s.backlog(ctx, `SELECT count(*), coalesce(extract(epoch FROM now() - min(created_at)), 0) FROM drift_marks`)
}

// SeriesBacklog is DriftBacklog of one series.
func (s *Store) SeriesBacklog(ctx context.Context, key string) (pending int64, oldest time.Duration, err error) {
	return s.backlog(ctx, `SELECT count(*), coalesce(extract(epoch FROM now() - min(m.created_at)), 0)
		FROM drift_marks m JOIN series s ON s.id = m.series_id WHERE s.key = $1`, key)
}

func (s *Store) backlog(ctx context.Context, sql string, args ...any) (int64, time.Duration, error) {
	var pending int64
	var age float64
	if err := s.pool.QueryRow(ctx, sql, args...).Scan(&pending, &age); err != nil {
		return 0, 0, fmt.Errorf("reading drift marks: %w", err)
	}
	return pending, time.Duration(max(age, 0) * float64(time.Second)), nil
}

// markSQL inserts one data mark per series: $1 ids, $2 the first origin
// whose pairs the write may have changed.
const markSQL = `INSERT INTO drift_marks (series_id, from_origin, cause) SELECT u.id, u.t, 'data'
	FROM unnest($1::bigint[], $2::timestamptz[]) AS u(id, t)`

// markArgs are markSQL's arguments for actuals written at the given times
// per series: an actual at time T is the target of origins T − H..T − 1
// steps, so the first origin it can change is its series' horizon before
// the earliest time.
func markArgs(byID map[int64]*Series, times map[int64][]time.Time) []any {
	ids, froms := make([]int64, 0, len(times)), make([]time.Time, 0, len(times))
	for id, ts := range times {
		if len(ts) == 0 {
			continue
		}
		first := slices.MinFunc(ts, time.Time.Compare)
		se := byID[id]
		ids, froms = append(ids, id), append(froms, se.step.Add(first, -se.Horizon))
	}
	return []any{ids, froms}
}

// ModelOf is a (series, model) pair that has forecasts or a baseline, with
// its active baseline version (0: none).
type ModelOf struct {
	Series, Model   string
	BaselineVersion int
}

// Models lists the (series, model) pairs with forecasts or a baseline,
// optionally of one series and/or model ("" = all), by series key and
// model.
func (s *Store) Models(ctx context.Context, seriesKey, model string) ([]ModelOf, error) {
	rows, err := s.pool.Query(ctx, `SELECT s.key, m.model, coalesce((SELECT max(version) FROM baselines b
			WHERE b.series_id = m.series_id AND b.model = m.model), 0)
		FROM (SELECT series_id, model FROM series_models UNION SELECT series_id, model FROM baselines) m
		JOIN series s ON s.id = m.series_id
		WHERE ($1 = '' OR s.key = $1) AND ($2 = '' OR m.model = $2)
		ORDER BY s.key, m.model`, seriesKey, model)
	if err != nil {
		return nil, fmt.Errorf("reading models: %w", err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (ModelOf, error) {
		var m ModelOf
		return m, r.Scan(&m.Series, &m.Model, &m.BaselineVersion)
	})
	if err != nil {
		return nil, fmt.Errorf("reading models: %w", err)
	}
	return out, nil
}
