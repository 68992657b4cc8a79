package store

import (
	"context"
	"fmt"
	"time"
)

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
