package store

import (
	"context"
	"errors"
	"fmt"
	"regexp"
	"slices"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgconn"
	"github.com/jackc/pgx/v5/pgtype"

	"github.com/aftercast/aftercast/scoring"
)

// Series is one forecast quantity and its settings (method.md §1).
type Series struct {
	ID            int64
	Key           string
	Step          string
	Horizon       int
	Season        int // 0 = none
	Unit          string
	TimeZone      string
	DecisionLeads []int // empty = all leads
	// ErrorScale is how errors are scaled before they are judged
	// (method.md §4a); "" on create means auto. It and DecisionLeads are
	// the settings UpdateSeries may change.
	ErrorScale scoring.ScaleMode
	// GridAnchor is where the series' grid starts: origins and actual
	// times are GridAnchor + k·step. Zero on create means the default
	// (scoring.DefaultAnchor); a stored series always has it set.
	GridAnchor time.Time
	CreatedAt  time.Time

	step     scoring.Step
	cachedAt time.Time // when it was read; see seriesCacheTTL
}

// seriesCacheTTL bounds how long a replica serves a series from its cache.
// Step, horizon, zone and grid never change, but another replica may
// update the error scale or the decision leads; the evaluator reads those
// fresh when it judges, and the rest of a replica follows within this.
const seriesCacheTTL = 5 * time.Second

func (s *Series) fresh() bool { return time.Since(s.cachedAt) < seriesCacheTTL }

// StepValue is the parsed step in the series' zone.
func (s *Series) StepValue() scoring.Step { return s.step }

// Decision returns the decision leads, all leads 1..H when none were set.
func (s *Series) Decision() []int {
	if len(s.DecisionLeads) > 0 {
		return s.DecisionLeads
	}
	all := make([]int, s.Horizon)
	for i := range all {
		all[i] = i + 1
	}
	return all
}

var keyPattern = regexp.MustCompile(`^[A-Za-z0-9_.:/-]{1,200}$`)

// ValidKey reports whether k is a valid series key.
func ValidKey(k string) bool { return keyPattern.MatchString(k) }

// validate checks settings and fills defaults and the parsed step.
func (s *Series) validate(maxHorizon int) error {
	var v []FieldViolation
	bad := func(field, format string, args ...any) {
		v = append(v, FieldViolation{field, fmt.Sprintf(format, args...)})
	}
	if !ValidKey(s.Key) {
		bad("key", "want 1–200 characters of A-Z a-z 0-9 _ . : / -")
	}
	if s.TimeZone == "" {
		s.TimeZone = "UTC"
	}
	loc, err := time.LoadLocation(s.TimeZone)
	if err != nil {
		bad("time_zone", "unknown IANA time zone %q", s.TimeZone)
		loc = time.UTC
	}
	if s.step, err = scoring.ParseStep(s.Step, loc); err != nil {
		bad("step", "%v", err)
	}
	if !s.GridAnchor.IsZero() {
		if reason := timeProblem(s.GridAnchor); reason != "" {
			bad("grid_anchor_time", "%s", reason)
		}
		s.step = s.step.WithAnchor(s.GridAnchor)
	}
	s.GridAnchor = s.step.Anchor()
	if s.Horizon < 1 || s.Horizon > maxHorizon {
		bad("horizon", "want 1 to %d, got %d", maxHorizon, s.Horizon)
	}
	if s.Season < 0 {
		bad("season", "want 0 (none) or a positive number of steps, got %d", s.Season)
	}
	if s.ErrorScale, err = scoring.ParseScaleMode(string(s.ErrorScale)); err != nil {
		bad("error_scale", "want auto or absolute, got %q", s.ErrorScale)
	}
	if len(s.Unit) > 64 {
		bad("unit", "at most 64 bytes")
	}
	slices.Sort(s.DecisionLeads)
	s.DecisionLeads = slices.Compact(s.DecisionLeads)
	for _, h := range s.DecisionLeads {
		if h < 1 || h > s.Horizon {
			bad("decision_leads", "lead %d is outside 1..%d", h, s.Horizon)
			break
		}
	}
	if len(v) > 0 {
		return &InvalidError{v}
	}
	return nil
}

func (s *Series) sameSettings(o *Series) bool {
	return s.Step == o.Step && s.Horizon == o.Horizon && s.Season == o.Season && s.Unit == o.Unit &&
		s.TimeZone == o.TimeZone && slices.Equal(s.DecisionLeads, o.DecisionLeads) && s.GridAnchor.Equal(o.GridAnchor) &&
		s.ErrorScale == o.ErrorScale
}

// CreateSeries creates a series. Creating one that exists with identical
// settings returns it with created false; with other settings it fails with
// ErrConflict.
func (s *Store) CreateSeries(ctx context.Context, in Series) (out Series, created bool, err error) {
	if err := in.validate(s.limits.MaxHorizon); err != nil {
		return Series{}, false, err
	}
	if in.DecisionLeads == nil {
		in.DecisionLeads = []int{}
	}
	err = s.pool.QueryRow(ctx, `INSERT INTO series (key, step, horizon, season, unit, time_zone, decision_leads, grid_anchor, error_scale)
		VALUES ($1, $2, $3, $4, $5, $6, $7, $8, $9) ON CONFLICT (key) DO NOTHING RETURNING id, created_at`,
		in.Key, in.Step, in.Horizon, in.Season, in.Unit, in.TimeZone, in.DecisionLeads, in.GridAnchor, string(in.ErrorScale)).Scan(&in.ID, &in.CreatedAt)
	if err == nil {
		in.cachedAt = time.Now()
		s.remember(&in)
		return in, true, nil
	}
	if !errors.Is(err, pgx.ErrNoRows) {
		return Series{}, false, fmt.Errorf("creating series: %w", err)
	}
	existing, err := s.GetSeries(ctx, in.Key)
	if err != nil {
		return Series{}, false, err
	}
	if !existing.sameSettings(&in) {
		return existing, false, fmt.Errorf("series %s: %w", in.Key, ErrConflict)
	}
	return existing, false, nil
}

// SeriesUpdate is what UpdateSeries changes: the fields that are set.
type SeriesUpdate struct {
	ErrorScale    *scoring.ScaleMode
	DecisionLeads *[]int // empty: all leads
}

// UpdateSeries changes a series' error scale or decision leads. Both
// change what the stored production data is judged against, so a change
// marks every model of the series for a replay of its whole production
// period (cause baseline, method.md §5), in the same transaction. changed
// is false when the settings were already so; nothing is marked then.
func (s *Store) UpdateSeries(ctx context.Context, key string, u SeriesUpdate) (out Series, changed bool, err error) {
	err = s.inTx(ctx, func(tx pgx.Tx) error {
		se, err := scanSeries(tx.QueryRow(ctx, "SELECT "+seriesColumns+" FROM series WHERE key = $1 FOR UPDATE", key))
		if errors.Is(err, pgx.ErrNoRows) {
			return fmt.Errorf("series %q: %w", key, ErrNotFound)
		}
		if err != nil {
			return fmt.Errorf("reading series: %w", err)
		}
		next := *se
		if u.ErrorScale != nil {
			next.ErrorScale = *u.ErrorScale
		}
		if u.DecisionLeads != nil {
			next.DecisionLeads = slices.Clone(*u.DecisionLeads)
			if next.DecisionLeads == nil {
				next.DecisionLeads = []int{}
			}
		}
		if err := next.validate(max(s.limits.MaxHorizon, se.Horizon)); err != nil {
			return err
		}
		out = next
		if next.ErrorScale == se.ErrorScale && slices.Equal(next.DecisionLeads, se.DecisionLeads) {
			return nil
		}
		changed = true
		b := &pgx.Batch{}
		b.Queue(`UPDATE series SET error_scale = $2, decision_leads = $3 WHERE id = $1`, se.ID, string(next.ErrorScale), next.DecisionLeads)
		b.Queue(`INSERT INTO drift_marks (series_id, model, from_origin, cause) VALUES ($1, NULL, NULL, 'baseline')`, se.ID)
		return tx.SendBatch(ctx, b).Close()
	})
	if err != nil {
		return Series{}, false, err
	}
	out.cachedAt = time.Now()
	s.remember(&out)
	return out, changed, nil
}

func (s *Store) remember(se *Series) {
	s.mu.Lock()
	s.series[se.Key] = se
	s.mu.Unlock()
}

const seriesColumns = "id, key, step, horizon, season, unit, time_zone, decision_leads, grid_anchor, created_at, error_scale"

func scanSeries(row pgx.Row) (*Series, error) {
	var se Series
	var leads []int32
	var anchor pgtype.Timestamptz
	var mode string
	if err := row.Scan(&se.ID, &se.Key, &se.Step, &se.Horizon, &se.Season, &se.Unit, &se.TimeZone, &leads, &anchor, &se.CreatedAt, &mode); err != nil {
		return nil, err
	}
	se.ErrorScale = scoring.ScaleMode(mode)
	se.cachedAt = time.Now()
	se.DecisionLeads = make([]int, len(leads))
	for i, h := range leads {
		se.DecisionLeads[i] = int(h)
	}
	loc, err := time.LoadLocation(se.TimeZone)
	if err != nil {
		return nil, fmt.Errorf("series %s: stored time zone %q: %w", se.Key, se.TimeZone, err)
	}
	if se.step, err = scoring.ParseStep(se.Step, loc); err != nil {
		return nil, fmt.Errorf("series %s: stored step: %w", se.Key, err)
	}
	if anchor.Valid {
		se.step = se.step.WithAnchor(anchor.Time)
	}
	se.GridAnchor = se.step.Anchor()
	return &se, nil
}

// GetSeries returns the series with key, ErrNotFound when there is none.
func (s *Store) GetSeries(ctx context.Context, key string) (Series, error) {
	se, err := s.seriesByKey(ctx, key)
	if err != nil {
		return Series{}, err
	}
	return *se, nil
}

func (s *Store) seriesByKey(ctx context.Context, key string) (*Series, error) {
	s.mu.RLock()
	se := s.series[key]
	s.mu.RUnlock()
	if se != nil && se.fresh() {
		return se, nil
	}
	if !ValidKey(key) {
		// No stored series has it, and PostgreSQL refuses some such keys
		// (a NUL byte) as text: asking would be an internal error.
		return nil, fmt.Errorf("series %q: %w", key, ErrNotFound)
	}
	se, err := scanSeries(s.pool.QueryRow(ctx, "SELECT "+seriesColumns+" FROM series WHERE key = $1", key))
	if errors.Is(err, pgx.ErrNoRows) {
		return nil, fmt.Errorf("series %q: %w", key, ErrNotFound)
	}
	if err != nil {
		return nil, fmt.Errorf("reading series: %w", err)
	}
	s.remember(se)
	return se, nil
}

// seriesByKeys resolves many keys at once; unknown keys are absent from the
// result.
func (s *Store) seriesByKeys(ctx context.Context, keys []string) (map[string]*Series, error) {
	out := make(map[string]*Series, len(keys))
	var missing []string
	s.mu.RLock()
	for _, k := range keys {
		if se := s.series[k]; se != nil && se.fresh() {
			out[k] = se
		} else if ValidKey(k) { // an invalid key is unknown without asking (see seriesByKey)
			missing = append(missing, k)
		}
	}
	s.mu.RUnlock()
	if len(missing) == 0 {
		return out, nil
	}
	rows, err := s.pool.Query(ctx, "SELECT "+seriesColumns+" FROM series WHERE key = ANY($1)", missing)
	if err != nil {
		return nil, fmt.Errorf("reading series: %w", err)
	}
	defer rows.Close()
	for rows.Next() {
		se, err := scanSeries(rows)
		if err != nil {
			return nil, err
		}
		s.remember(se)
		out[se.Key] = se
	}
	return out, rows.Err()
}

// ListSeries returns up to limit series with keys after the given key, in
// key order.
func (s *Store) ListSeries(ctx context.Context, after string, limit int) ([]Series, error) {
	if limit <= 0 || limit > 1000 {
		limit = 1000
	}
	rows, err := s.pool.Query(ctx, "SELECT "+seriesColumns+" FROM series WHERE key > $1 ORDER BY key LIMIT $2", after, limit)
	if err != nil {
		return nil, fmt.Errorf("listing series: %w", err)
	}
	defer rows.Close()
	var out []Series
	for rows.Next() {
		se, err := scanSeries(rows)
		if err != nil {
			return nil, err
		}
		out = append(out, *se)
	}
	return out, rows.Err()
}

// isUniqueViolation reports a PostgreSQL unique_violation.
func isUniqueViolation(err error) bool {
	var pe *pgconn.PgError
	return errors.As(err, &pe) && pe.Code == "23505"
}
