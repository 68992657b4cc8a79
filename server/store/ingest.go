package store

import (
	"context"
	"fmt"
	"math"
	"slices"
	"time"

	"github.com/aftercast/aftercast/scoring"
	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgtype"
)

// ForecastVector is one issued forecast: the values for leads 1..k from
// one origin.
type ForecastVector struct {
	Series   string
	Model    string
	Origin   time.Time
	IssuedAt time.Time // zero: the producer gave none, the receive time stands in
	// Values[i] is the forecast for lead i+1; NaN marks a lead the producer
	// did not send (sparse input). Infinite values are rejected.
	Values    []float64
	Quantiles []Quantile
	// Set by a caller that found the wire form of a time invalid (a
	// timestamp whose nanoseconds are out of range, say): the vector is
	// rejected with this reason rather than stored at a normalised time.
	OriginInvalid, IssueInvalid string
	// Set by a caller that converted the vector from another form:
	// Refused counts the points it rejected already (so a vector left
	// with none is not also "no forecast values"), and Problem, when set,
	// rejects the whole vector (quantile values that do not match the
	// points as sent, say).
	Refused int
	Problem *FieldViolation
}

// Quantile is a forecast quantile at one level for the same leads as the
// vector's Values. Stored, not scored yet.
type Quantile struct {
	Level  float64
	Values []float64
}

// Actual is one observed value of a series.
type Actual struct {
	Series string
	Time   time.Time
	Value  float64
	// TimeInvalid is set by a caller that found the wire form of Time
	// invalid: the actual is rejected with this reason.
	TimeInvalid string
}

// Rejection says why one item, or one lead of it, was not stored.
type Rejection struct {
	Index int // position of the item in the whole push, from 0
	Lead  int // the lead of a rejected point; 0 when Whole
	// Field is what is to blame: a whole vector's field, or for a point
	// "values" (its value) or "lead" (the lead itself: beyond the horizon,
	// a target out of range).
	Field  string
	Reason string
	Whole  bool // the whole item (vector) was rejected
}

// Ack is what a write did, counted in points (one forecast value for one
// lead, or one actual). Forecasts: Accepted (stored and scorable),
// Duplicate (the same value was already stored), Late (arrived after the
// actual of its target was known: stored but never scored, or — for a
// re-issue — not applied), Rejected. Actuals: Accepted (new), Revised (a
// changed value replaced the stored one), Duplicate, Rejected.
type Ack struct {
	Accepted, Duplicate, Late, Revised, Rejected int64
	Rejections                                   []Rejection
	// Scored counts the pairs that accepted actuals completed: forecast
	// values (not late) for their targets. Forecasts never complete a pair:
	// one that arrives after its actual is late.
	Scored int64
	// Replayed marks the receipt of an earlier write with the same request
	// id (see Once): nothing was applied this time.
	Replayed bool `json:"-"`
}

// Add folds another acknowledgement into a.
func (a *Ack) Add(b Ack) {
	a.Accepted += b.Accepted
	a.Duplicate += b.Duplicate
	a.Late += b.Late
	a.Revised += b.Revised
	a.Rejected += b.Rejected
	a.Rejections = append(a.Rejections, b.Rejections...)
	a.Scored += b.Scored
}

var modelPattern = keyPattern

func countPoints(vals []float64) int64 {
	var n int64
	for _, v := range vals {
		if !math.IsNaN(v) {
			n++
		}
	}
	return n
}

type forecastKey struct {
	series int64
	model  string
	origin int64 // unix nanoseconds
}

// forecastRow is a forecast vector as stored, being merged.
type forecastRow struct {
	se        *Series
	model     string
	origin    time.Time
	vals      []float64 // NaN = no value
	late      []bool
	lateVals  []float64 // late re-issues beside scored values; NaN = none
	qLevels   []float64
	qVals     [][]float64
	issuedAt  time.Time
	firstRecv time.Time
	exists    bool
	changed   bool
}

// WriteForecasts stores a batch of forecast vectors under the rules of
// method.md §3 and returns what it did. firstIndex is the position of the
// batch's first vector in the whole push, for rejections. Invalid vectors or
// leads are rejected and the rest stored; the batch is committed before
// WriteForecasts returns, so an acknowledged point is never lost.
func (s *Store) WriteForecasts(ctx context.Context, vs []ForecastVector, firstIndex int) (Ack, error) {
	return s.WriteForecastsOnce(ctx, Once{}, vs, firstIndex)
}

// WriteForecastsOnce is WriteForecasts for a request that carried an id:
// a retry of it returns the first write's receipt (see Once).
func (s *Store) WriteForecastsOnce(ctx context.Context, once Once, vs []ForecastVector, firstIndex int) (Ack, error) {
	if len(vs) > s.limits.MaxBatch {
		return Ack{}, invalid("vectors", "a batch holds at most %d vectors, got %d", s.limits.MaxBatch, len(vs))
	}
	if ack, ok, err := s.replay(ctx, once); err != nil || ok {
		return ack, err
	}
	ack, err := s.writeForecasts(ctx, once, vs, firstIndex)
	return s.afterWrite(ctx, once, ack, err)
}

func (s *Store) writeForecasts(ctx context.Context, once Once, vs []ForecastVector, firstIndex int) (Ack, error) {
	var ack Ack
	keys := make([]string, 0, len(vs))
	for _, v := range vs {
		keys = append(keys, v.Series)
	}
	series, err := s.seriesByKeys(ctx, keys)
	if err != nil {
		return ack, err
	}
	items := checkForecasts(vs, series, firstIndex, &ack)
	if len(items) == 0 {
		return ack, nil
	}
	now := time.Now().UTC()
	fkeys := items2keys(items, func(it forecastItem) (*Series, string, time.Time) { return it.se, it.v.Model, it.v.Origin })
	spans := items2spans(items, func(it forecastItem) (*Series, time.Time, int) { return it.se, it.v.Origin, len(it.v.Values) })
	// merge applies the batch to the stored rows (none: every vector new)
	// and returns the rows to write with the batch's acknowledgement.
	merge := func(stored map[forecastKey]*forecastRow, known map[int64]map[int64]bool) (map[forecastKey]*forecastRow, Ack) {
		return mergeItems(items, stored, known, now, ack)
	}
	var newModels []modelKey
	var done Ack
	write := func(tx pgx.Tx) error {
		ids := make([]int64, 0, len(items))
		for _, it := range items {
			ids = append(ids, it.se.ID)
		}
		// Optimistically every vector is new, the usual case for a
		// forecasting job: lock, read the actuals the hindsight guard needs
		// and set a savepoint in one round trip, then COPY without reading
		// stored vectors. A unique violation means some vector is stored
		// already: roll back to the savepoint and merge with what is stored.
		// After such a batch the next one reads first (see WriteActuals).
		optimistic := !s.forecastsConflict.Load()
		known, err := lockAndReadKnown(ctx, tx, ids, spans, optimistic)
		if err != nil {
			return err
		}
		var rows map[forecastKey]*forecastRow
		if optimistic {
			rows, done = merge(nil, known)
			err := storeForecasts(ctx, tx, rows, now)
			switch {
			case err == nil:
				newModels, err = s.recordModels(ctx, tx, rows)
				return err
			case !isUniqueViolation(err):
				return err
			}
			if _, err := tx.Exec(ctx, "ROLLBACK TO SAVEPOINT "+newForecastsSavepoint); err != nil {
				return fmt.Errorf("storing forecasts: %w", err)
			}
			s.forecastsConflict.Store(true)
		}
		stored, err := loadForecasts(ctx, tx, fkeys)
		if err != nil {
			return err
		}
		if len(stored) == 0 {
			s.forecastsConflict.Store(false)
		}
		rows, done = merge(stored, known)
		if err := storeForecasts(ctx, tx, rows, now); err != nil {
			return err
		}
		newModels, err = s.recordModels(ctx, tx, rows)
		return err
	}
	err = s.inTx(ctx, func(tx pgx.Tx) error {
		if err := write(tx); err != nil {
			return err
		}
		return saveReceipt(ctx, tx, once, done)
	})
	if err != nil {
		return Ack{Rejected: ack.Rejected, Rejections: ack.Rejections}, err
	}
	s.mu.Lock()
	for _, mk := range newModels {
		s.models[mk] = true
	}
	s.mu.Unlock()
	return done, nil
}

// forecastItem is a vector of a batch with points to store.
type forecastItem struct {
	i  int
	v  *ForecastVector
	se *Series
}

// checkForecasts validates a batch: every vector or lead that cannot be
// stored is rejected into ack (a rejected lead is set to NaN), and the
// vectors left with points are returned.
func checkForecasts(vs []ForecastVector, series map[string]*Series, firstIndex int, ack *Ack) []forecastItem {
	reject := func(i, lead int, field, format string, args ...any) {
		ack.Rejections = append(ack.Rejections, Rejection{firstIndex + i, lead, field, fmt.Sprintf(format, args...), lead == 0})
	}
	var items []forecastItem
	for i := range vs {
		v := &vs[i]
		se := series[v.Series]
		n := countPoints(v.Values)
		switch {
		case se == nil:
			reject(i, 0, "series", "unknown series %q: create it first", v.Series)
		case !modelPattern.MatchString(v.Model):
			reject(i, 0, "model", "want 1–200 characters of A-Z a-z 0-9 _ . : / -")
		case v.OriginInvalid != "":
			reject(i, 0, "origin_time", "%s", v.OriginInvalid)
		case v.IssueInvalid != "":
			reject(i, 0, "issue_time", "%s", v.IssueInvalid)
		case gridProblem(se, v.Origin) != "":
			reject(i, 0, "origin_time", "%s", gridProblem(se, v.Origin))
		case !v.IssuedAt.IsZero() && timeProblem(v.IssuedAt) != "":
			reject(i, 0, "issue_time", "%s", timeProblem(v.IssuedAt))
		case v.Problem != nil:
			reject(i, 0, v.Problem.Field, "%s", v.Problem.Reason)
		case n == 0 && v.Refused == 0:
			reject(i, 0, "values", "no forecast values")
		case n == 0:
			// Every lead was rejected already (by the caller's conversion).
			continue
		case quantileProblem(v) != nil:
			q := quantileProblem(v)
			reject(i, 0, q.Field, "%s", q.Reason)
		default:
			checkLeads(se, v, func(h int, field, format string, args ...any) {
				reject(i, h, field, format, args...)
				ack.Rejected++
			})
			if countPoints(v.Values) > 0 {
				items = append(items, forecastItem{i, v, se})
			}
			continue
		}
		// A vector rejected whole counts its points (those the caller
		// refused are counted already), and one when it had none.
		ack.Rejected += n
		if n+int64(v.Refused) == 0 {
			ack.Rejected++
		}
	}
	return items
}

// checkLeads rejects, one by one, the leads of v beyond the horizon of se,
// with a target at or after MaxTime or with an infinite value, and sets
// them to NaN. The field blamed is "lead" for the first two, "values" for
// the last.
func checkLeads(se *Series, v *ForecastVector, reject func(lead int, field, format string, args ...any)) {
	for h := 1; h <= len(v.Values); h++ {
		x := v.Values[h-1]
		switch {
		case math.IsNaN(x):
			continue
		case h > se.Horizon:
			reject(h, "lead", "lead %d is beyond the series horizon %d", h, se.Horizon)
		case !se.step.Add(v.Origin, h).Before(MaxTime):
			reject(h, "lead", "the target of lead %d, %s, is at or after %s", h,
				se.step.Add(v.Origin, h).UTC().Format(time.RFC3339), MaxTime.Format(time.RFC3339))
		case math.IsInf(x, 0):
			reject(h, "values", "not a finite number")
		default:
			continue
		}
		v.Values[h-1] = math.NaN()
	}
}

// mergeItems applies a batch's vectors to the stored rows (nil: every
// vector new), with the actuals known for their targets, and returns the
// rows to write with the batch's acknowledgement: ack and what merging
// counted.
func mergeItems(items []forecastItem, stored map[forecastKey]*forecastRow, known map[int64]map[int64]bool, now time.Time, ack Ack) (map[forecastKey]*forecastRow, Ack) {
	rows := stored
	if rows == nil {
		rows = make(map[forecastKey]*forecastRow, len(items))
	}
	for _, it := range items {
		k := forecastKey{it.se.ID, it.v.Model, it.v.Origin.UnixNano()}
		r := rows[k]
		if r == nil {
			r = &forecastRow{model: it.v.Model, origin: it.v.Origin, firstRecv: now}
			rows[k] = r
		}
		r.se = it.se
		mergeForecast(r, it.v, known[it.se.ID], now, &ack)
	}
	return rows, ack
}

// quantileProblem says which quantile of a vector cannot be stored and
// why; nil when all can. Values are per lead, as the vector's Values.
func quantileProblem(v *ForecastVector) *FieldViolation {
	seen := map[float64]bool{}
	for k, q := range v.Quantiles {
		switch {
		case !(q.Level > 0 && q.Level < 1):
			return &FieldViolation{fmt.Sprintf("quantiles[%d].level", k), fmt.Sprintf("%v must lie strictly between 0 and 1", q.Level)}
		case seen[q.Level]:
			return &FieldViolation{fmt.Sprintf("quantiles[%d].level", k), fmt.Sprintf("level %v appears twice in the vector", q.Level)}
		case len(q.Values) != len(v.Values):
			return &FieldViolation{fmt.Sprintf("quantiles[%d].values", k), fmt.Sprintf("%d values for %d leads", len(q.Values), len(v.Values))}
		}
		seen[q.Level] = true
	}
	return nil
}

func items2keys[T any](items []T, f func(T) (*Series, string, time.Time)) []forecastKey {
	out := make([]forecastKey, 0, len(items))
	for _, it := range items {
		se, model, origin := f(it)
		out = append(out, forecastKey{se.ID, model, origin.UnixNano()})
	}
	return out
}

// targetSpan is the range of target times one series' forecasts in a
// batch can reach.
type targetSpan struct{ lo, hi time.Time }

func items2spans[T any](items []T, f func(T) (*Series, time.Time, int)) map[int64]targetSpan {
	out := map[int64]targetSpan{}
	for _, it := range items {
		se, origin, k := f(it)
		lo, hi := se.step.Add(origin, 1), se.step.Add(origin, max(k, 1))
		sp, ok := out[se.ID]
		if !ok || lo.Before(sp.lo) {
			sp.lo = lo
		}
		if !ok || hi.After(sp.hi) {
			sp.hi = hi
		}
		out[se.ID] = sp
	}
	return out
}

// mergeForecast applies one pushed vector to the stored row (method.md
// §3): an identical value is a duplicate; a value for a target whose actual
// is already known is late — stored and flagged when the lead had no value,
// stored beside the scored value when it had one (a re-issue replaces only
// values whose actual has not arrived); anything else is stored.
func mergeForecast(r *forecastRow, v *ForecastVector, known map[int64]bool, now time.Time, ack *Ack) {
	r.grow(len(v.Values))
	step := r.se.step
	inUse := false // a value in use changed: the vector's issue time and quantiles follow this push
	for i, x := range v.Values {
		if math.IsNaN(x) {
			continue
		}
		old := r.vals[i]
		known := known[step.Add(r.origin, i+1).UnixNano()]
		switch {
		case old == x, known && r.lateVals[i] == x:
			ack.Duplicate++
		case known:
			// Late (method.md §3): stored, flagged and never scored — as
			// the lead's value when it had none, else beside the scored
			// value, which stays.
			ack.Late++
			if math.IsNaN(old) {
				r.vals[i] = x
				if r.late == nil {
					r.late = make([]bool, len(r.vals))
				}
				r.late[i] = true
				inUse = true
			} else {
				r.lateVals[i] = x
			}
			r.changed = true
		default:
			ack.Accepted++
			r.vals[i] = x
			if r.late != nil {
				r.late[i] = false
			}
			r.changed, inUse = true, true
		}
	}
	if len(v.Quantiles) > 0 && inUse {
		r.qLevels = r.qLevels[:0]
		r.qVals = r.qVals[:0]
		for _, q := range v.Quantiles {
			r.qLevels = append(r.qLevels, q.Level)
			r.qVals = append(r.qVals, padTo(q.Values, len(r.vals)))
		}
	}
	if inUse || r.changed && r.issuedAt.IsZero() {
		r.issuedAt = v.IssuedAt
		if r.issuedAt.IsZero() {
			r.issuedAt = now
		}
	}
}

// grow makes room in r for n leads, the new ones without values.
func (r *forecastRow) grow(n int) {
	if n > len(r.vals) {
		grown := make([]float64, n)
		copy(grown, r.vals)
		for i := len(r.vals); i < n; i++ {
			grown[i] = math.NaN()
		}
		r.vals = grown
		if r.late != nil {
			r.late = append(r.late, make([]bool, n-len(r.late))...)
		}
	}
	for len(r.lateVals) < len(r.vals) {
		r.lateVals = append(r.lateVals, math.NaN())
	}
}

func padTo(xs []float64, n int) []float64 {
	out := make([]float64, n)
	copy(out, xs)
	for i := len(xs); i < n; i++ {
		out[i] = math.NaN()
	}
	return out
}

// lockSeries takes the per-series transaction locks that serialise writes
// to a series across replicas, in id order so that two batches over the
// same series cannot deadlock. Reads take no lock.
func lockSeries(ctx context.Context, tx pgx.Tx, ids []int64) error {
	if _, err := tx.Exec(ctx, lockSQL, lockIDs(ids)); err != nil {
		return fmt.Errorf("locking series: %w", err)
	}
	return nil
}

// lockSQL takes the series locks of lockIDs in one round trip: unnest
// yields the sorted ids in array order, so the locks are still taken in id
// order.
const lockSQL = "SELECT pg_advisory_xact_lock(id) FROM unnest($1::bigint[]) AS id"

// lockIDs sorts and de-duplicates ids: taking locks in one order everywhere
// rules out deadlocks between writers.
func lockIDs(ids []int64) []int64 {
	ids = slices.Clone(ids)
	slices.Sort(ids)
	return slices.Compact(ids)
}

func loadForecasts(ctx context.Context, tx pgx.Tx, keys []forecastKey) (map[forecastKey]*forecastRow, error) {
	ids, models, origins := make([]int64, len(keys)), make([]string, len(keys)), make([]time.Time, len(keys))
	for i, k := range keys {
		ids[i], models[i], origins[i] = k.series, k.model, time.Unix(0, k.origin)
	}
	rows, err := tx.Query(ctx, `SELECT f.series_id, f.model, f.origin, f.vals, f.late, f.late_vals, f.quantile_levels, f.quantile_vals, f.issued_at, f.first_received_at
		FROM forecasts f JOIN (SELECT DISTINCT * FROM unnest($1::bigint[], $2::text[], $3::timestamptz[])) AS k(series_id, model, origin)
		USING (series_id, model, origin)`, ids, models, origins)
	if err != nil {
		return nil, fmt.Errorf("reading stored forecasts: %w", err)
	}
	defer rows.Close()
	out := make(map[forecastKey]*forecastRow, len(keys))
	for rows.Next() {
		var (
			id     int64
			r      = &forecastRow{exists: true}
			vals   []pgtype.Float8
			lateV  []pgtype.Float8
			qVals  [][]pgtype.Float8
			issued pgtype.Timestamptz
		)
		if err := rows.Scan(&id, &r.model, &r.origin, &vals, &r.late, &lateV, &r.qLevels, &qVals, &issued, &r.firstRecv); err != nil {
			return nil, fmt.Errorf("reading stored forecasts: %w", err)
		}
		r.vals, r.lateVals = fromFloat8(vals), fromFloat8(lateV)
		for _, q := range qVals {
			r.qVals = append(r.qVals, fromFloat8(q))
		}
		r.issuedAt = issued.Time
		out[forecastKey{id, r.model, r.origin.UnixNano()}] = r
	}
	return out, rows.Err()
}

// newForecastsSavepoint names the savepoint of the optimistic COPY.
const newForecastsSavepoint = "new_forecasts"

// lockAndReadKnown takes the series locks and returns, per series, the
// times of actuals already stored in the span the batch's targets cover;
// with savepoint set it also sets newForecastsSavepoint. One round trip.
func lockAndReadKnown(ctx context.Context, tx pgx.Tx, lockIDsOf []int64, spans map[int64]targetSpan, savepoint bool) (map[int64]map[int64]bool, error) {
	ids, los, his := make([]int64, 0, len(spans)), make([]time.Time, 0, len(spans)), make([]time.Time, 0, len(spans))
	for id, sp := range spans {
		ids, los, his = append(ids, id), append(los, sp.lo), append(his, sp.hi)
	}
	b := &pgx.Batch{}
	b.Queue(lockSQL, lockIDs(lockIDsOf))
	// OFFSET 0 keeps the lateral subquery from being flattened into a
	// join, so each series is one primary-key range probe, whatever the
	// planner guesses of the ranges (see completedQuery).
	b.Queue(`SELECT a.series_id, a.time FROM unnest($1::bigint[], $2::timestamptz[], $3::timestamptz[]) AS r(series_id, lo, hi)
		JOIN LATERAL (SELECT series_id, time FROM actuals a
			WHERE a.series_id = r.series_id AND a.time BETWEEN r.lo AND r.hi OFFSET 0) a ON true`, ids, los, his)
	if savepoint {
		b.Queue("SAVEPOINT " + newForecastsSavepoint)
	}
	br := tx.SendBatch(ctx, b)
	defer br.Close()
	if _, err := br.Exec(); err != nil {
		return nil, fmt.Errorf("locking series: %w", err)
	}
	rows, err := br.Query()
	if err != nil {
		return nil, fmt.Errorf("reading known actuals: %w", err)
	}
	out := make(map[int64]map[int64]bool, len(spans))
	var id int64
	var t time.Time
	if _, err := pgx.ForEachRow(rows, []any{&id, &t}, func() error {
		if out[id] == nil {
			out[id] = map[int64]bool{}
		}
		out[id][t.UnixNano()] = true
		return nil
	}); err != nil {
		return nil, fmt.Errorf("reading known actuals: %w", err)
	}
	if savepoint {
		if _, err := br.Exec(); err != nil {
			return nil, fmt.Errorf("storing forecasts: %w", err)
		}
	}
	return out, br.Close()
}

func toFloat8(xs []float64) []pgtype.Float8 {
	out := make([]pgtype.Float8, len(xs))
	for i, x := range xs {
		out[i] = pgtype.Float8{Float64: x, Valid: !math.IsNaN(x)}
	}
	return out
}

func fromFloat8(xs []pgtype.Float8) []float64 {
	out := make([]float64, len(xs))
	for i, x := range xs {
		if x.Valid {
			out[i] = x.Float64
		} else {
			out[i] = math.NaN()
		}
	}
	return out
}

var stageColumns = []string{"series_id", "model", "origin", "vals", "late", "quantile_levels", "quantile_vals", "issued_at", "first_received_at", "received_at", "late_vals"}

// storeForecasts writes the changed rows: COPY into a session-local staging
// table, then one upsert. COPY is the fastest way in; the upsert keeps the
// write idempotent and first_received_at untouched.
func storeForecasts(ctx context.Context, tx pgx.Tx, rows map[forecastKey]*forecastRow, now time.Time) error {
	var fresh, src [][]any
	for _, r := range rows {
		if !r.changed {
			continue
		}
		var late any
		if slices.Contains(r.late, true) {
			late = r.late
		}
		var qLevels, qVals any
		if len(r.qLevels) > 0 {
			qLevels = r.qLevels
			q := make([][]pgtype.Float8, len(r.qVals))
			for i, v := range r.qVals {
				q[i] = toFloat8(padTo(v, len(r.vals)))
			}
			qVals = q
		}
		var lateVals any
		if countPoints(r.lateVals) > 0 {
			lateVals = toFloat8(padTo(r.lateVals, len(r.vals)))
		}
		row := []any{r.se.ID, r.model, r.origin, toFloat8(r.vals), late, qLevels, qVals, r.issuedAt, r.firstRecv, now, lateVals}
		if r.exists {
			src = append(src, row)
		} else {
			fresh = append(fresh, row)
		}
	}
	// A vector not stored yet goes straight in: no other writer can insert
	// it while this transaction holds its series' lock.
	if len(fresh) > 0 {
		if _, err := tx.CopyFrom(ctx, pgx.Identifier{"forecasts"}, stageColumns, pgx.CopyFromRows(fresh)); err != nil {
			return fmt.Errorf("copying forecasts: %w", err)
		}
	}
	if len(src) == 0 {
		return nil
	}
	if _, err := tx.Exec(ctx, `CREATE TEMP TABLE IF NOT EXISTS forecast_stage (LIKE forecasts) ON COMMIT DELETE ROWS`); err != nil {
		return fmt.Errorf("creating staging table: %w", err)
	}
	if _, err := tx.CopyFrom(ctx, pgx.Identifier{"forecast_stage"}, stageColumns, pgx.CopyFromRows(src)); err != nil {
		return fmt.Errorf("copying forecasts: %w", err)
	}
	_, err := tx.Exec(ctx, `INSERT INTO forecasts SELECT * FROM forecast_stage
		ON CONFLICT (series_id, model, origin) DO UPDATE SET vals = excluded.vals, late = excluded.late, late_vals = excluded.late_vals,
			quantile_levels = excluded.quantile_levels, quantile_vals = excluded.quantile_vals,
			issued_at = excluded.issued_at, received_at = excluded.received_at`)
	if err != nil {
		return fmt.Errorf("storing forecasts: %w", err)
	}
	return nil
}

// recordModels stores the (series, model) pairs a batch wrote that this
// process has not seen stored yet — rare, so the write path almost never
// pays for it — and returns them, to be cached once the transaction commits.
func (s *Store) recordModels(ctx context.Context, tx pgx.Tx, rows map[forecastKey]*forecastRow) ([]modelKey, error) {
	var ids []int64
	var models []string
	var out []modelKey
	s.mu.RLock()
	for k := range rows {
		mk := modelKey{k.series, k.model}
		if !s.models[mk] && !slices.Contains(out, mk) {
			ids, models, out = append(ids, k.series), append(models, k.model), append(out, mk)
		}
	}
	s.mu.RUnlock()
	if len(out) == 0 {
		return nil, nil
	}
	if _, err := tx.Exec(ctx, `INSERT INTO series_models (series_id, model) SELECT * FROM unnest($1::bigint[], $2::text[])
		ON CONFLICT DO NOTHING`, ids, models); err != nil {
		return nil, fmt.Errorf("recording models: %w", err)
	}
	return out, nil
}

// WriteActuals stores a batch of actuals: a new time is accepted, a changed
// value revises the stored one (first_received_at stays), an identical
// value is a duplicate. Items are counted as if pushed one by one in batch
// order, so the last value for a time wins.
func (s *Store) WriteActuals(ctx context.Context, as []Actual, firstIndex int) (Ack, error) {
	return s.WriteActualsOnce(ctx, Once{}, as, firstIndex)
}

// WriteActualsOnce is WriteActuals for a request that carried an id: a
// retry of it returns the first write's receipt (see Once).
func (s *Store) WriteActualsOnce(ctx context.Context, once Once, as []Actual, firstIndex int) (Ack, error) {
	if len(as) > s.limits.MaxBatch {
		return Ack{}, invalid("actuals", "a batch holds at most %d actuals, got %d", s.limits.MaxBatch, len(as))
	}
	if ack, ok, err := s.replay(ctx, once); err != nil || ok {
		return ack, err
	}
	ack, err := s.writeActuals(ctx, once, as, firstIndex)
	return s.afterWrite(ctx, once, ack, err)
}

func (s *Store) writeActuals(ctx context.Context, once Once, as []Actual, firstIndex int) (Ack, error) {
	var ack Ack
	keys := make([]string, 0, len(as))
	for _, a := range as {
		keys = append(keys, a.Series)
	}
	series, err := s.seriesByKeys(ctx, keys)
	if err != nil {
		return ack, err
	}
	bt := checkActuals(as, series, firstIndex, &ack)
	if len(bt.order) == 0 {
		return ack, nil
	}
	ids, times := bt.ids, bt.times
	byID := make(map[int64]*Series, len(series))
	for _, se := range series {
		byID[se.ID] = se
	}
	var st settledActuals
	write := func(tx pgx.Tx) error {
		now := time.Now().UTC()
		// Optimistically every time is new, the usual case for a meter feed:
		// lock, insert them all under a savepoint and count the pairs they
		// complete, in one round trip and without reading stored values.
		// A unique violation means some time is stored already: roll back
		// to the savepoint and settle against what is stored. After such a
		// batch the next one reads first, so a re-push of a whole file does
		// not pay for a failed insert per batch.
		if !s.actualsConflict.Load() {
			st = bt.settle(nil)
			ok, err := tryNewActuals(ctx, tx, ids, &st, now, byID)
			if err != nil || ok {
				return err
			}
			s.actualsConflict.Store(true)
		} else if err := lockSeries(ctx, tx, ids); err != nil {
			return err
		}
		stored, err := storedActuals(ctx, tx, ids, times)
		if err != nil {
			return err
		}
		st = bt.settle(stored)
		if len(stored) == 0 {
			s.actualsConflict.Store(false)
		}
		b := &pgx.Batch{}
		// The series locks keep any other writer from inserting these
		// times meanwhile, so this insert cannot conflict.
		if len(st.ins.ids) > 0 {
			b.Queue(insertActuals, st.ins.ids, st.ins.times, st.ins.vals, st.ins.revs, now)
		}
		if len(st.upd.ids) > 0 {
			// Revisions update the stored row; first_received_at stays.
			b.Queue(insertActuals+` ON CONFLICT (series_id, time) DO UPDATE
				SET value = excluded.value, received_at = excluded.received_at, revisions = actuals.revisions + excluded.revisions`,
				st.upd.ids, st.upd.times, st.upd.vals, st.upd.revs, now)
		}
		if b.Len() > 0 {
			// What re-scores pairs must be re-judged: a mark per series,
			// committed with the data.
			b.Queue(markSQL, markArgs(byID, st.changed())...)
		}
		if b.Len() > 0 {
			if err := tx.SendBatch(ctx, b).Close(); err != nil {
				return fmt.Errorf("storing actuals: %w", err)
			}
		}
		n, err := countCompleted(ctx, tx, byID, st.fresh)
		st.ack.Scored = n
		return err
	}
	err = s.inTx(ctx, func(tx pgx.Tx) error {
		if err := write(tx); err != nil {
			return err
		}
		st.ack.Rejected, st.ack.Rejections = ack.Rejected, ack.Rejections
		return saveReceipt(ctx, tx, once, st.ack)
	})
	if err != nil {
		return Ack{Rejected: ack.Rejected, Rejections: ack.Rejections}, err
	}
	st.ack.Rejected, st.ack.Rejections = ack.Rejected, ack.Rejections
	return st.ack, nil
}

type actualKey struct {
	id int64
	t  int64
}

// actualsBatch is the valid actuals of a batch: the values pushed for each
// (series, time), in batch order, and those keys in the order first pushed,
// also as columns of ids and times.
type actualsBatch struct {
	chains map[actualKey][]float64
	order  []actualKey
	ids    []int64
	times  []time.Time
}

// checkActuals validates a batch: every actual that cannot be stored is
// rejected into ack, and the others are returned.
func checkActuals(as []Actual, series map[string]*Series, firstIndex int, ack *Ack) *actualsBatch {
	bt := &actualsBatch{chains: map[actualKey][]float64{}}
	for i, a := range as {
		se := series[a.Series]
		var field, reason string
		switch {
		case se == nil:
			field, reason = "series", fmt.Sprintf("unknown series %q: create it first", a.Series)
		case a.TimeInvalid != "":
			field, reason = "time", a.TimeInvalid
		case gridProblem(se, a.Time) != "":
			field, reason = "time", gridProblem(se, a.Time)
		case math.IsNaN(a.Value) || math.IsInf(a.Value, 0):
			field, reason = "value", "not a finite number"
		}
		if field != "" {
			ack.Rejected++
			ack.Rejections = append(ack.Rejections, Rejection{firstIndex + i, 0, field, reason, true})
			continue
		}
		k := actualKey{se.ID, a.Time.UnixNano()}
		if _, ok := bt.chains[k]; !ok {
			bt.order = append(bt.order, k)
		}
		bt.chains[k] = append(bt.chains[k], a.Value)
	}
	bt.ids, bt.times = make([]int64, len(bt.order)), make([]time.Time, len(bt.order))
	for i, k := range bt.order {
		bt.ids[i], bt.times[i] = k.id, time.Unix(0, k.t)
	}
	return bt
}

// settle counts the batch against the values stored before it and says
// what to write: rows for new times, changed values for stored ones.
func (bt *actualsBatch) settle(stored map[actualKey]float64) settledActuals {
	var st settledActuals
	st.fresh = map[int64][]time.Time{}
	for i, k := range bt.order {
		prev, exists := stored[k]
		var revs int32
		for _, v := range bt.chains[k] {
			switch {
			case !exists:
				st.ack.Accepted++
			case v == prev:
				// The stored value stays, bit for bit: −0 does not replace 0.
				st.ack.Duplicate++
				continue
			default:
				st.ack.Revised++
				revs++
			}
			prev, exists = v, true
		}
		// A revision that a later one in the batch undid is still counted
		// and recorded: the row's revisions and receive time say so.
		switch _, had := stored[k]; {
		case !had:
			st.fresh[k.id] = append(st.fresh[k.id], bt.times[i])
			st.ins.add(bt.ids[i], bt.times[i], prev, revs)
		case revs > 0:
			st.upd.add(bt.ids[i], bt.times[i], prev, revs)
		}
	}
	return st
}

// actualRows are columns of actuals to write: series id, time, value and
// the revisions the batch made.
type actualRows struct {
	ids   []int64
	times []time.Time
	vals  []float64
	revs  []int32
}

// settledActuals is a batch of actuals counted against the stored values:
// its acknowledgement, the rows new times insert, the rows revisions
// update, and the new times by series (the pairs they complete are counted
// into ack.Scored).
type settledActuals struct {
	ack      Ack
	ins, upd actualRows
	fresh    map[int64][]time.Time
}

// changed is the times the batch inserts or revises, by series.
func (st *settledActuals) changed() map[int64][]time.Time {
	out := map[int64][]time.Time{}
	for _, r := range []actualRows{st.ins, st.upd} {
		for i, id := range r.ids {
			out[id] = append(out[id], r.times[i])
		}
	}
	return out
}

func (r *actualRows) add(id int64, t time.Time, v float64, revs int32) {
	r.ids, r.times, r.vals, r.revs = append(r.ids, id), append(r.times, t), append(r.vals, v), append(r.revs, revs)
}

// insertActuals inserts columns $1..$4 of actualRows, received at $5.
const insertActuals = `INSERT INTO actuals (series_id, time, value, first_received_at, received_at, revisions)
	SELECT series_id, time, value, $5, $5, revs
	FROM unnest($1::bigint[], $2::timestamptz[], $3::float8[], $4::int[]) AS u(series_id, time, value, revs)`

// newActualsSavepoint names the savepoint of the optimistic insert.
const newActualsSavepoint = "new_actuals"

// tryNewActuals locks the series and inserts st's new rows under a
// savepoint, then counts the pairs they complete into st.ack.Scored, all in
// one round trip. It reports false, with the savepoint rolled back and the
// locks still held, when some time was stored already.
func tryNewActuals(ctx context.Context, tx pgx.Tx, ids []int64, st *settledActuals, now time.Time, byID map[int64]*Series) (bool, error) {
	b := &pgx.Batch{}
	b.Queue(lockSQL, lockIDs(ids))
	b.Queue("SAVEPOINT " + newActualsSavepoint)
	b.Queue(insertActuals, st.ins.ids, st.ins.times, st.ins.vals, st.ins.revs, now)
	b.Queue("RELEASE SAVEPOINT " + newActualsSavepoint)
	b.Queue(markSQL, markArgs(byID, st.fresh)...)
	q, args, count := completedQuery(byID, st.fresh)
	b.Queue(q, args...)
	br := tx.SendBatch(ctx, b)
	if _, err := br.Exec(); err != nil {
		br.Close()
		return false, fmt.Errorf("locking series: %w", err)
	}
	_, err := br.Exec() // savepoint
	if err == nil {
		_, err = br.Exec() // insert
		if isUniqueViolation(err) {
			// The rest of the batch was skipped by the server.
			if err := br.Close(); err != nil && !isUniqueViolation(err) {
				return false, fmt.Errorf("storing actuals: %w", err)
			}
			if _, err := tx.Exec(ctx, "ROLLBACK TO SAVEPOINT "+newActualsSavepoint); err != nil {
				return false, fmt.Errorf("storing actuals: %w", err)
			}
			return false, nil
		}
	}
	if err == nil {
		_, err = br.Exec() // release
	}
	if err == nil {
		_, err = br.Exec() // drift marks
	}
	if err != nil {
		br.Close()
		return false, fmt.Errorf("storing actuals: %w", err)
	}
	rows, err := br.Query()
	if err == nil {
		st.ack.Scored, err = count(rows)
	}
	if err != nil {
		br.Close()
		return false, fmt.Errorf("counting scored pairs: %w", err)
	}
	if err := br.Close(); err != nil {
		return false, fmt.Errorf("counting scored pairs: %w", err)
	}
	return true, nil
}

// storedActuals reads the stored values of the given (series, time) keys.
func storedActuals(ctx context.Context, tx pgx.Tx, ids []int64, times []time.Time) (map[actualKey]float64, error) {
	rows, err := tx.Query(ctx, `SELECT a.series_id, a.time, a.value FROM actuals a
		JOIN unnest($1::bigint[], $2::timestamptz[]) AS k(series_id, time) USING (series_id, time)`, ids, times)
	if err != nil {
		return nil, fmt.Errorf("reading stored actuals: %w", err)
	}
	stored := map[actualKey]float64{}
	for rows.Next() {
		var id int64
		var t time.Time
		var v float64
		if err := rows.Scan(&id, &t, &v); err != nil {
			return nil, fmt.Errorf("reading stored actuals: %w", err)
		}
		stored[actualKey{id, t.UnixNano()}] = v
	}
	if err := rows.Err(); err != nil {
		return nil, fmt.Errorf("reading stored actuals: %w", err)
	}
	return stored, nil
}

// countCompleted counts the pairs that new actuals complete; see
// completedQuery.
func countCompleted(ctx context.Context, tx pgx.Tx, byID map[int64]*Series, fresh map[int64][]time.Time) (int64, error) {
	if len(fresh) == 0 {
		return 0, nil
	}
	q, args, count := completedQuery(byID, fresh)
	rows, err := tx.Query(ctx, q, args...)
	if err == nil {
		var n int64
		if n, err = count(rows); err == nil {
			return n, nil
		}
	}
	return 0, fmt.Errorf("counting scored pairs: %w", err)
}

// completedQuery returns a query, its arguments and the function that
// counts its rows into the forecast values (not late) whose targets are new
// actuals — fresh maps series id to their times: the pairs these actuals
// complete. The query reads, per (series, model) seen in series_models, the
// vectors whose origins can reach those times, through the primary key.
func completedQuery(byID map[int64]*Series, fresh map[int64][]time.Time) (string, []any, func(pgx.Rows) (int64, error)) {
	ids := make([]int64, 0, len(fresh))
	los, his := make([]time.Time, 0, len(fresh)), make([]time.Time, 0, len(fresh))
	sets := make(map[int64]map[int64]bool, len(fresh))
	for id, ts := range fresh {
		se := byID[id]
		lo, hi := ts[0], ts[0]
		set := make(map[int64]bool, len(ts))
		for _, t := range ts {
			set[t.UnixNano()] = true
			if t.Before(lo) {
				lo = t
			}
			if t.After(hi) {
				hi = t
			}
		}
		sets[id] = set
		ids, los, his = append(ids, id), append(los, se.step.Add(lo, -se.Horizon)), append(his, hi)
	}
	// OFFSET 0 keeps the lateral subquery from being flattened into a
	// join: flattened, the planner cannot tell how narrow the origin ranges
	// are and may hash-join a sequential scan of all forecasts (measured: a
	// batch of 1,000 series on 102,000 vectors took 63 ms that way even
	// after ANALYZE, 230 ms before it, 18 ms as probes of the primary key).
	const q = `SELECT f.series_id, f.origin, f.vals, f.late
		FROM unnest($1::bigint[], $2::timestamptz[], $3::timestamptz[]) AS r(series_id, lo, hi)
		JOIN series_models ff ON ff.series_id = r.series_id
		JOIN LATERAL (SELECT series_id, origin, vals, late FROM forecasts f
			WHERE f.series_id = r.series_id AND f.model = ff.model AND f.origin >= r.lo AND f.origin < r.hi OFFSET 0) f ON true`
	count := func(rows pgx.Rows) (int64, error) { return countCompletedRows(rows, byID, sets) }
	return q, []any{ids, los, his}, count
}

// countCompletedRows counts, in the vectors of completedQuery's rows, the
// values (not late) whose targets are in sets (by series id: the new
// actuals' times in Unix nanoseconds). It closes rows.
func countCompletedRows(rows pgx.Rows, byID map[int64]*Series, sets map[int64]map[int64]bool) (int64, error) {
	defer rows.Close()
	// Calendar steps make target arithmetic costly, and a feed's series
	// share steps and origins: remember each target.
	type target struct {
		step   scoring.Step
		origin int64
		lead   int
	}
	targets := map[target]int64{}
	var n int64
	for rows.Next() {
		var id int64
		var o time.Time
		var vals []pgtype.Float8
		var late []bool
		if err := rows.Scan(&id, &o, &vals, &late); err != nil {
			return 0, err
		}
		se, set := byID[id], sets[id]
		for i, v := range vals {
			if !v.Valid || (i < len(late) && late[i]) {
				continue
			}
			k := target{se.step, o.UnixNano(), i + 1}
			t, ok := targets[k]
			if !ok {
				t = se.step.Add(o, i+1).UnixNano()
				targets[k] = t
			}
			if set[t] {
				n++
			}
		}
	}
	return n, rows.Err()
}

// subMicro is the reason for refusing a time PostgreSQL cannot store
// exactly: two such times would silently become one row.
const subMicro = "times are stored to the microsecond: this one has a finer part"

func wholeMicros(t time.Time) bool { return t.Nanosecond()%1000 == 0 }

// The range every stored time must lie in (method.md §3): wide enough for
// any forecast, narrow enough that no arithmetic on it can wrap (Go's
// nanosecond times span 1677–2262).
var (
	MinTime = time.Date(1900, 1, 1, 0, 0, 0, 0, time.UTC)
	MaxTime = time.Date(2200, 1, 1, 0, 0, 0, 0, time.UTC) // exclusive
)

// timeProblem says why a time cannot be stored, "" when it can: missing,
// outside [MinTime, MaxTime), or finer than a microsecond.
func timeProblem(t time.Time) string {
	switch {
	case t.IsZero():
		return "missing"
	case t.Before(MinTime) || !t.Before(MaxTime):
		return fmt.Sprintf("%s is outside the accepted range [%s, %s)", t.UTC().Format(time.RFC3339Nano),
			MinTime.Format(time.RFC3339), MaxTime.Format(time.RFC3339))
	case !wholeMicros(t):
		return subMicro
	}
	return ""
}

// gridProblem is timeProblem, then whether t lies on the series' grid.
func gridProblem(se *Series, t time.Time) string {
	if reason := timeProblem(t); reason != "" {
		return reason
	}
	if !se.step.OnGrid(t) {
		before, after := se.step.GridNear(t)
		return fmt.Sprintf("%s is not on the series' grid (%s steps from %s): the nearest are %s and %s",
			t.In(se.step.Location()).Format(time.RFC3339), se.Step, se.GridAnchor.In(se.step.Location()).Format(time.RFC3339),
			before.In(se.step.Location()).Format(time.RFC3339), after.In(se.step.Location()).Format(time.RFC3339))
	}
	return ""
}
