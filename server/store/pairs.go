package store

import (
	"cmp"
	"context"
	"encoding/base64"
	"encoding/binary"
	"errors"
	"fmt"
	"hash/fnv"
	"math"
	"slices"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgtype"

	"github.com/aftercast/aftercast/scoring"
)

// Selection chooses pairs of one (series, model). Zero times leave a range
// open; ranges are inclusive–exclusive. Window > 0 keeps, per lead, only
// the pairs of the last Window origins that have a scored pair for that
// lead (method.md §5), within the ranges.
type Selection struct {
	OriginFrom, OriginTo time.Time
	TargetFrom, TargetTo time.Time
	Leads                []int // empty = all
	Window               int
}

// Pair is one (origin, lead) with both its forecast and its actual.
type Pair struct {
	Origin, Target      time.Time
	Lead                int
	Forecast, Actual    float64
	ForecastReceivedAt  time.Time
	ActualFirstReceived time.Time
	Late                bool // excluded from scoring by the hindsight guard
	// Reissue marks a late re-issue: a value that arrived after the actual
	// and is stored beside the scored value of the same origin and lead,
	// which it did not replace. It is late too, and listed after it.
	Reissue bool
}

func (s *Store) checkSelection(se *Series, sel *Selection) error {
	if sel.Window < 0 || sel.Window > s.limits.MaxWindow {
		return invalid("selection.window", "want 0 (none) to %d origins, got %d", s.limits.MaxWindow, sel.Window)
	}
	for _, h := range sel.Leads {
		if h < 1 || h > se.Horizon {
			return invalid("selection.leads", "lead %d is outside 1..%d", h, se.Horizon)
		}
	}
	if !sel.OriginTo.IsZero() && !sel.OriginFrom.IsZero() && !sel.OriginFrom.Before(sel.OriginTo) {
		return invalid("selection.origin_range", "from must be before to")
	}
	if !sel.TargetTo.IsZero() && !sel.TargetFrom.IsZero() && !sel.TargetFrom.Before(sel.TargetTo) {
		return invalid("selection.target_range", "from must be before to")
	}
	return nil
}

// originBounds turns the selection into the origin range to read: a target
// range reaches back by the horizon.
func originBounds(se *Series, sel *Selection) (lo, hi time.Time) {
	lo, hi = sel.OriginFrom, sel.OriginTo
	if !sel.TargetFrom.IsZero() {
		if t := se.step.Add(sel.TargetFrom, -se.Horizon); lo.IsZero() || t.After(lo) {
			lo = t
		}
	}
	if !sel.TargetTo.IsZero() && (hi.IsZero() || sel.TargetTo.Before(hi)) {
		hi = sel.TargetTo
	}
	return lo, hi
}

// chunkOrigins is how many forecast vectors are read per query while
// walking a selection; each chunk costs one forecast and one actual query.
const chunkOrigins = 2000

type storedForecast struct {
	origin   time.Time
	vals     []float64
	late     []bool
	lateVals []float64 // late re-issues beside scored values (method.md §3)
	received time.Time
}

type storedActual struct {
	value     float64
	firstRecv time.Time
}

// walk calls fn with every pair of (se, model) in the selection's ranges
// and lead set, in origin order (descending when desc), leads ascending
// within an origin. fn returns false to stop.
func (s *Store) walk(ctx context.Context, se *Series, model string, sel *Selection, desc bool, from time.Time, fn func(Pair) bool) error {
	lo, hi := walkBounds(se, sel, desc, from)
	// Read only the part of each vector that holds the selected leads.
	leads := leadSpan{1, 0}
	if len(sel.Leads) > 0 {
		leads = leadSpan{slices.Min(sel.Leads), slices.Max(sel.Leads)}
	}
	// A window needs about Window origins: read that many, then grow.
	chunk := chunkOrigins
	if sel.Window > 0 {
		chunk = min(chunkOrigins, sel.Window+sel.Window/2+4)
	}
	for {
		fs, err := readForecastSpan(ctx, s.pool, se.ID, model, lo, hi, desc, leads, chunk)
		if err != nil {
			return err
		}
		if len(fs) == 0 {
			return nil
		}
		tlo, thi := targetBounds(se, fs, leads)
		acts, err := s.readActuals(ctx, se.ID, tlo, thi)
		if err != nil {
			return err
		}
		for _, f := range fs {
			if !walkVector(se, sel, leads, f, acts, fn) {
				return nil
			}
		}
		if len(fs) < chunk {
			return nil
		}
		chunk = min(chunkOrigins, 4*chunk)
		last := fs[len(fs)-1].origin
		if desc {
			hi = last
		} else {
			lo = last.Add(time.Nanosecond)
		}
	}
}

// walkBounds is the origin range walk reads first: the selection's,
// narrowed to start at from (when not zero) in the walk's direction.
func walkBounds(se *Series, sel *Selection, desc bool, from time.Time) (lo, hi time.Time) {
	lo, hi = originBounds(se, sel)
	switch {
	case from.IsZero():
	case desc:
		hi = from.Add(time.Nanosecond)
		if !sel.OriginTo.IsZero() && sel.OriginTo.Before(hi) {
			hi = sel.OriginTo
		}
	case lo.IsZero() || from.After(lo):
		lo = from
	}
	return lo, hi
}

// targetBounds returns the range (lo, hi] of the targets of vectors fs,
// read for leads.
func targetBounds(se *Series, fs []storedForecast, leads leadSpan) (lo, hi time.Time) {
	lo, hi = fs[0].origin, fs[0].origin
	for _, f := range fs {
		if f.origin.Before(lo) {
			lo = f.origin
		}
		if t := se.step.Add(f.origin, leads.first-1+len(f.vals)); t.After(hi) {
			hi = t
		}
	}
	return lo, hi
}

// walkVector calls fn with the pairs of vector f (read for leads) that the
// selection keeps and acts completes, leads ascending. It returns false
// when fn stopped the walk.
func walkVector(se *Series, sel *Selection, leads leadSpan, f storedForecast, acts map[int64]storedActual, fn func(Pair) bool) bool {
	for i, x := range f.vals {
		h := leads.first + i
		if math.IsNaN(x) || len(sel.Leads) > 0 && !slices.Contains(sel.Leads, h) {
			continue
		}
		t := se.step.Add(f.origin, h)
		if !inRange(t, sel.TargetFrom, sel.TargetTo) {
			continue
		}
		a, ok := acts[t.UnixNano()]
		if !ok {
			continue
		}
		p := Pair{Origin: f.origin, Target: t, Lead: h, Forecast: x, Actual: a.value,
			ForecastReceivedAt: f.received, ActualFirstReceived: a.firstRecv, Late: f.late != nil && i < len(f.late) && f.late[i]}
		if !fn(p) {
			return false
		}
		// A late re-issue follows the value it did not replace.
		if i < len(f.lateVals) && !math.IsNaN(f.lateVals[i]) {
			p.Forecast, p.Late, p.Reissue = f.lateVals[i], true, true
			if !fn(p) {
				return false
			}
		}
	}
	return true
}

func inRange(t, from, to time.Time) bool {
	return (from.IsZero() || !t.Before(from)) && (to.IsZero() || t.Before(to))
}

var (
	minTime = time.Date(1, 1, 1, 0, 0, 0, 0, time.UTC)
	maxTime = time.Date(9999, 1, 1, 0, 0, 0, 0, time.UTC)
)

func orMin(t time.Time) time.Time {
	if t.IsZero() {
		return minTime
	}
	return t
}

func orMax(t time.Time) time.Time {
	if t.IsZero() {
		return maxTime
	}
	return t
}

// leadSpan is the leads first..last of a vector to read; last 0 means to
// the end.
type leadSpan struct{ first, last int }

// readForecastSpan reads up to limit vectors, only their leads in span:
// element i of vals and late is lead span.first+i.
func readForecastSpan(ctx context.Context, q querier, seriesID int64, model string, lo, hi time.Time, desc bool, span leadSpan, limit int) ([]storedForecast, error) {
	order := "ASC"
	if desc {
		order = "DESC"
	}
	cols, args := "vals, late, late_vals", []any{seriesID, model, orMin(lo), orMax(hi), limit}
	if span.first > 1 || span.last > 0 {
		cols, args = "vals[$6:$7], late[$6:$7], late_vals[$6:$7]", append(args, span.first, cmp.Or(span.last, math.MaxInt32))
	}
	rows, err := q.Query(ctx, `SELECT origin, `+cols+`, received_at FROM forecasts
		WHERE series_id = $1 AND model = $2 AND origin >= $3 AND origin < $4
		ORDER BY origin `+order+` LIMIT $5`, args...)
	if err != nil {
		return nil, fmt.Errorf("reading forecasts: %w", err)
	}
	defer rows.Close()
	var out []storedForecast
	for rows.Next() {
		var f storedForecast
		var vals, lateVals []pgtype.Float8
		if err := rows.Scan(&f.origin, &vals, &f.late, &lateVals, &f.received); err != nil {
			return nil, fmt.Errorf("reading forecasts: %w", err)
		}
		f.vals, f.lateVals = fromFloat8(vals), fromFloat8(lateVals)
		out = append(out, f)
	}
	return out, rows.Err()
}

func (s *Store) readActuals(ctx context.Context, seriesID int64, lo, hi time.Time) (map[int64]storedActual, error) {
	return readActualsQ(ctx, s.pool, seriesID, lo, hi)
}

func readActualsQ(ctx context.Context, q querier, seriesID int64, lo, hi time.Time) (map[int64]storedActual, error) {
	rows, err := q.Query(ctx, `SELECT time, value, first_received_at FROM actuals
		WHERE series_id = $1 AND time > $2 AND time <= $3`, seriesID, lo, hi)
	if err != nil {
		return nil, fmt.Errorf("reading actuals: %w", err)
	}
	defer rows.Close()
	out := map[int64]storedActual{}
	for rows.Next() {
		var t time.Time
		var a storedActual
		if err := rows.Scan(&t, &a.value, &a.firstRecv); err != nil {
			return nil, fmt.Errorf("reading actuals: %w", err)
		}
		out[t.UnixNano()] = a
	}
	return out, rows.Err()
}

// selectPairs returns the selected pairs, late ones included (flagged), in
// origin then lead order. With a window it walks back from the newest
// origin until every selected lead has Window scored pairs.
func (s *Store) selectPairs(ctx context.Context, se *Series, model string, sel *Selection, fn func(Pair) bool) error {
	if sel.Window == 0 {
		return s.walk(ctx, se, model, sel, false, time.Time{}, fn)
	}
	leads := sel.Leads
	if len(leads) == 0 {
		leads = make([]int, se.Horizon)
		for i := range leads {
			leads[i] = i + 1
		}
	}
	need := make(map[int]int, len(leads))
	for _, h := range leads {
		need[h] = sel.Window
	}
	var got []Pair
	budget := s.limits.MaxScanPairs
	// filled[h] is the origin whose pair filled lead h's window: a late
	// re-issue beside that pair is listed with it, as in ascending order.
	filled := map[int]time.Time{}
	var last time.Time
	err := s.walk(ctx, se, model, sel, true, time.Time{}, func(p Pair) bool {
		if len(need) == 0 && !p.Origin.Equal(last) {
			return false
		}
		budget--
		switch {
		case need[p.Lead] > 0:
			got = append(got, p)
			if !p.Late {
				if need[p.Lead]--; need[p.Lead] == 0 {
					delete(need, p.Lead)
					filled[p.Lead], last = p.Origin, p.Origin
				}
			}
		case p.Reissue && filled[p.Lead].Equal(p.Origin):
			got = append(got, p)
		}
		return budget > 0
	})
	if err != nil {
		return err
	}
	slices.SortFunc(got, func(a, b Pair) int {
		switch {
		case !a.Origin.Equal(b.Origin):
			return a.Origin.Compare(b.Origin)
		case a.Lead != b.Lead:
			return a.Lead - b.Lead
		case a.Reissue == b.Reissue:
			return 0
		case a.Reissue:
			return 1
		}
		return -1
	})
	for _, p := range got {
		if !fn(p) {
			break
		}
	}
	return nil
}

// AccuracyResult is the accuracy of a selection.
type AccuracyResult struct {
	Series Series
	Table  scoring.Table
	Late   int64         // pairs excluded by the hindsight guard
	LateBy map[int]int64 // the same, per lead
	// Levels sums, per lead, the level scales of the scored pairs under
	// the scales asked for (AccuracyWithLevels); empty otherwise.
	Levels map[int]*LevelSum
}

// LevelSum is the sum of the level scales s(ŷ) and of s(ŷ)² over a lead's
// scored pairs (method.md §4a).
type LevelSum struct {
	N         int
	Sum, Sum2 float64
}

// Window is the mean scale and root mean squared scale of the pairs, as a
// live window reports them, for turning a band into the series' unit.
func (l *LevelSum) Window() scoring.WindowValues {
	if l == nil || l.N == 0 {
		return scoring.WindowValues{Scale: 1, ScaleRMSE: 1}
	}
	n := float64(l.N)
	return scoring.WindowValues{N: l.N, Scale: l.Sum / n, ScaleRMSE: math.Sqrt(l.Sum2 / n)}
}

// Accuracy scores the selected pairs of (series, model) per lead and
// overall. scale is the MASE scale (NaN when unknown).
func (s *Store) Accuracy(ctx context.Context, key, model string, sel Selection, scale float64) (AccuracyResult, error) {
	return s.AccuracyWithLevels(ctx, key, model, sel, scale, nil)
}

// AccuracyWithLevels is Accuracy that also sums, per lead, the level
// scales of the scored pairs under levels[lead] (leads without one are
// left out).
func (s *Store) AccuracyWithLevels(ctx context.Context, key, model string, sel Selection, scale float64, levels map[int]scoring.Scale) (AccuracyResult, error) {
	se, err := s.seriesModel(ctx, key, model)
	if err != nil {
		return AccuracyResult{}, err
	}
	if err := s.checkSelection(se, &sel); err != nil {
		return AccuracyResult{}, err
	}
	var tab scoring.Tabulator
	var late int64
	lateBy, sums := map[int]int64{}, map[int]*LevelSum{}
	err = s.selectPairs(ctx, se, model, &sel, func(p Pair) bool {
		if p.Late {
			late++
			lateBy[p.Lead]++
			return true
		}
		tab.Add(p.Lead, p.Actual, p.Forecast)
		if sc, ok := levels[p.Lead]; ok {
			if sums[p.Lead] == nil {
				sums[p.Lead] = &LevelSum{}
			}
			x := sc.Of(p.Forecast)
			sums[p.Lead].N++
			sums[p.Lead].Sum += x
			sums[p.Lead].Sum2 += x * x
		}
		return true
	})
	if err != nil {
		return AccuracyResult{}, err
	}
	return AccuracyResult{Series: *se, Table: tab.Table(scale), Late: late, LateBy: lateBy, Levels: sums}, nil
}

// seriesModel resolves a series and checks that the model has forecasts
// for it, so that a mistyped model is NotFound rather than an empty table.
func (s *Store) seriesModel(ctx context.Context, key, model string) (*Series, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return nil, err
	}
	var one int
	err = s.pool.QueryRow(ctx, "SELECT 1 FROM forecasts WHERE series_id = $1 AND model = $2 LIMIT 1", se.ID, model).Scan(&one)
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, fmt.Errorf("no forecasts of model %q for series %q: %w", model, key, ErrNotFound)
	}
	if err != nil {
		return nil, fmt.Errorf("reading forecasts: %w", err)
	}
	return se, nil
}

// Pairs returns one page of the selected pairs (late ones included and
// flagged) in origin then lead order, and the token of the next page ("" at
// the end).
func (s *Store) Pairs(ctx context.Context, key, model string, sel Selection, pageToken string, pageSize int) ([]Pair, string, error) {
	se, err := s.seriesModel(ctx, key, model)
	if err != nil {
		return nil, "", err
	}
	if err := s.checkSelection(se, &sel); err != nil {
		return nil, "", err
	}
	if pageSize <= 0 || pageSize > s.limits.MaxPageSize {
		pageSize = min(1000, s.limits.MaxPageSize)
	}
	req := requestHash(key, model, sel)
	pos, err := decodeToken(pageToken, req)
	if err != nil {
		return nil, "", err
	}
	after := pos.origin
	var page []Pair
	more := false
	fn := func(p Pair) bool {
		if pageToken != "" && !pos.before(p) {
			return true
		}
		if len(page) == pageSize {
			more = true
			return false
		}
		page = append(page, p)
		return true
	}
	if sel.Window == 0 {
		err = s.walk(ctx, se, model, &sel, false, after, fn)
	} else {
		err = s.selectPairs(ctx, se, model, &sel, fn)
	}
	if err != nil {
		return nil, "", err
	}
	next := ""
	if more {
		next = encodeToken(positionOf(page[len(page)-1]), req)
	}
	return page, next, nil
}

// pairPosition is where a page of pairs ended: the last pair's origin,
// lead, and whether it was a late re-issue (listed after the lead's value).
type pairPosition struct {
	origin  time.Time
	lead    int
	reissue bool
}

func positionOf(p Pair) pairPosition { return pairPosition{p.Origin, p.Lead, p.Reissue} }

// before reports whether the position lies before pair p in listing order.
func (q pairPosition) before(p Pair) bool {
	switch {
	case !q.origin.Equal(p.Origin):
		return q.origin.Before(p.Origin)
	case q.lead != p.Lead:
		return q.lead < p.Lead
	}
	return !q.reissue && p.Reissue
}

// requestHash ties a page token to the request it continues, so that a
// token of another series or selection is refused instead of silently
// skipping pairs.
func requestHash(key, model string, sel Selection) uint32 {
	h := fnv.New32a()
	fmt.Fprintf(h, "%s\x00%s\x00%d\x00%d\x00%d\x00%d\x00%v\x00%d", key, model, sel.OriginFrom.UnixMicro(), sel.OriginTo.UnixMicro(),
		sel.TargetFrom.UnixMicro(), sel.TargetTo.UnixMicro(), sel.Leads, sel.Window)
	return h.Sum32()
}

// encodeToken is an opaque page token: the position and the request's hash.
func encodeToken(p pairPosition, req uint32) string {
	b := binary.AppendVarint(nil, p.origin.UnixNano())
	b = binary.AppendUvarint(b, uint64(p.lead))
	sub := uint64(0)
	if p.reissue {
		sub = 1
	}
	b = binary.AppendUvarint(b, sub)
	b = binary.LittleEndian.AppendUint32(b, req)
	return base64.RawURLEncoding.EncodeToString(b)
}

func decodeToken(tok string, req uint32) (pairPosition, error) {
	if tok == "" {
		return pairPosition{}, nil
	}
	b, err := base64.RawURLEncoding.DecodeString(tok)
	if err == nil {
		ns, n := binary.Varint(b)
		lead, m := binary.Uvarint(b[max(n, 0):])
		sub, k := binary.Uvarint(b[max(n+m, 0):])
		if n > 0 && m > 0 && k > 0 && n+m+k+4 == len(b) && lead < 1<<20 && sub <= 1 && ns >= MinTime.UnixNano() && ns < MaxTime.UnixNano() {
			if binary.LittleEndian.Uint32(b[n+m+k:]) != req {
				return pairPosition{}, invalid("page_token", "this token continues another request (another series, model or selection): repeat that request, or start this one without a page token")
			}
			return pairPosition{time.Unix(0, ns).UTC(), int(lead), sub == 1}, nil
		}
	}
	return pairPosition{}, invalid("page_token", "not a token this service issued: start without a page token and pass on next_page_token")
}

// StoredForecast is a forecast vector as stored, for reading back.
type StoredForecast struct {
	Origin                 time.Time
	IssuedAt               time.Time
	FirstReceived, Receive time.Time
	Values                 []float64 // NaN: no value for that lead
	Late                   []bool    // nil: none late
	LateReissues           []float64 // NaN: none; nil: none at all
	// Quantiles are those of the latest push that changed a value in use,
	// per lead as Values (NaN where that push had none for the lead).
	QuantileLevels []float64
	QuantileValues [][]float64
}

// ListForecasts reads the stored vectors of (key, model) with origins in
// [from, to) (zero: open) after origin after (zero: from the start), by
// origin ascending, at most limit.
func (s *Store) ListForecasts(ctx context.Context, key, model string, from, to, after time.Time, limit int) ([]StoredForecast, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return nil, err
	}
	lo := orMin(from)
	if !after.IsZero() && !after.Before(lo) {
		lo = after.Add(time.Microsecond)
	}
	rows, err := s.pool.Query(ctx, `SELECT origin, issued_at, first_received_at, received_at, vals, late, late_vals,
		quantile_levels, quantile_vals FROM forecasts
		WHERE series_id = $1 AND model = $2 AND origin >= $3 AND origin < $4 ORDER BY origin LIMIT $5`, se.ID, model, lo, orMax(to), limit)
	if err != nil {
		return nil, fmt.Errorf("reading forecasts: %w", err)
	}
	var out []StoredForecast
	var f StoredForecast
	var issued pgtype.Timestamptz
	var vals, lateVals []pgtype.Float8
	var qVals [][]pgtype.Float8
	_, err = pgx.ForEachRow(rows, []any{&f.Origin, &issued, &f.FirstReceived, &f.Receive, &vals, &f.Late, &lateVals,
		&f.QuantileLevels, &qVals}, func() error {
		f.Origin, f.IssuedAt = f.Origin.UTC(), issued.Time
		f.Values = fromFloat8(vals)
		f.LateReissues = nil
		if len(lateVals) > 0 {
			f.LateReissues = fromFloat8(lateVals)
		}
		f.QuantileValues = nil
		for _, q := range qVals {
			f.QuantileValues = append(f.QuantileValues, fromFloat8(q))
		}
		out = append(out, f)
		f.Late, f.QuantileLevels = nil, nil
		return nil
	})
	if err != nil {
		return nil, fmt.Errorf("reading forecasts: %w", err)
	}
	return out, nil
}

// StoredActual is an actual as stored, for reading back.
type StoredActual struct {
	Time                   time.Time
	Value                  float64
	FirstReceived, Receive time.Time
	Revisions              int
}

// ListActuals reads the stored actuals of a series with times in [from,
// to) (zero: open) after time after (zero: from the start), by time
// ascending, at most limit.
func (s *Store) ListActuals(ctx context.Context, key string, from, to, after time.Time, limit int) ([]StoredActual, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return nil, err
	}
	lo := orMin(from)
	if !after.IsZero() && !after.Before(lo) {
		lo = after.Add(time.Microsecond)
	}
	rows, err := s.pool.Query(ctx, `SELECT time, value, first_received_at, received_at, revisions FROM actuals
		WHERE series_id = $1 AND time >= $2 AND time < $3 ORDER BY time LIMIT $4`, se.ID, lo, orMax(to), limit)
	if err != nil {
		return nil, fmt.Errorf("reading actuals: %w", err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (StoredActual, error) {
		var a StoredActual
		err := r.Scan(&a.Time, &a.Value, &a.FirstReceived, &a.Receive, &a.Revisions)
		a.Time = a.Time.UTC()
		return a, err
	})
	if err != nil {
		return nil, fmt.Errorf("reading actuals: %w", err)
	}
	return out, nil
}

// SeriesModel is one model of a series: its newest origin (zero without
// forecasts) and active baseline version (0: none).
type SeriesModel struct {
	Model           string
	LastOrigin      time.Time
	BaselineVersion int
}

// ListModels lists the models with forecasts or a baseline for a series,
// by name.
func (s *Store) ListModels(ctx context.Context, key string) ([]SeriesModel, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return nil, err
	}
	rows, err := s.pool.Query(ctx, `SELECT m.model,
			(SELECT origin FROM forecasts f WHERE f.series_id = $1 AND f.model = m.model ORDER BY origin DESC LIMIT 1),
			coalesce((SELECT max(version) FROM baselines b WHERE b.series_id = $1 AND b.model = m.model), 0)
		FROM (SELECT model FROM series_models WHERE series_id = $1 UNION SELECT model FROM baselines WHERE series_id = $1) m
		ORDER BY m.model`, se.ID)
	if err != nil {
		return nil, fmt.Errorf("reading models: %w", err)
	}
	out, err := pgx.CollectRows(rows, func(r pgx.CollectableRow) (SeriesModel, error) {
		var m SeriesModel
		var last pgtype.Timestamptz
		err := r.Scan(&m.Model, &last, &m.BaselineVersion)
		m.LastOrigin = last.Time
		return m, err
	})
	if err != nil {
		return nil, fmt.Errorf("reading models: %w", err)
	}
	return out, nil
}
