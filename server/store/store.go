// Package store keeps aftercast's inputs in PostgreSQL — series, forecast
// vectors, actuals — and derives scored pairs from them on read, so that
// live accuracy is by construction what an offline computation over the
// stored state gives. It owns the schema (embedded numbered migrations),
// the reconciliation rules of method.md §3 (idempotency, revisions,
// re-issues, the hindsight guard) and the queries that select pairs. It
// knows nothing of gRPC; the server maps its errors to status codes.
package store

import (
	"context"
	"errors"
	"fmt"
	"strings"
	"sync"
	"sync/atomic"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"
)

// Sentinel errors; the server maps them to gRPC codes in one place.
var (
	ErrNotFound = errors.New("not found")
	ErrConflict = errors.New("already exists with other settings")
)

// FieldViolation names one bad field of a request.
type FieldViolation struct {
	Field  string
	Reason string
}

// InvalidError is a request that cannot be served as given.
type InvalidError struct{ Violations []FieldViolation }

func (e *InvalidError) Error() string {
	parts := make([]string, len(e.Violations))
	for i, v := range e.Violations {
		parts[i] = v.Field + ": " + v.Reason
	}
	return "invalid request: " + strings.Join(parts, "; ")
}

func invalid(field, format string, args ...any) error {
	return &InvalidError{[]FieldViolation{{field, fmt.Sprintf(format, args...)}}}
}

// Limits bound what one request may ask of the store.
type Limits struct {
	MaxHorizon   int // largest horizon a series may have
	MaxBatch     int // most forecast vectors or actuals in one write
	MaxPageSize  int // most pairs in one page
	MaxWindow    int // largest live window n
	MaxScanPairs int // most pairs one accuracy query may read
}

// DefaultLimits are the limits used where a field of Limits is zero.
var DefaultLimits = Limits{MaxHorizon: 1000, MaxBatch: 10000, MaxPageSize: 10000, MaxWindow: 10000, MaxScanPairs: 50_000_000}

func (l Limits) withDefaults() Limits {
	d := DefaultLimits
	if l.MaxHorizon > 0 {
		d.MaxHorizon = l.MaxHorizon
	}
	if l.MaxBatch > 0 {
		d.MaxBatch = l.MaxBatch
	}
	if l.MaxPageSize > 0 {
		d.MaxPageSize = l.MaxPageSize
	}
	if l.MaxWindow > 0 {
		d.MaxWindow = l.MaxWindow
	}
	if l.MaxScanPairs > 0 {
		d.MaxScanPairs = l.MaxScanPairs
	}
	return d
}

type modelKey struct {
	series int64
	model  string
}

// Store is aftercast's PostgreSQL storage.
type Store struct {
	pool   *pgxpool.Pool
	limits Limits

	// Series settings never change once created (a different create is
	// refused), so caching them by key is safe across replicas.
	mu     sync.RWMutex
	series map[string]*Series
	models map[modelKey]bool // (series, model) pairs known to be in series_models

	// actualsConflict is set when the last batch of actuals held a stored
	// time: the next batch reads stored values first instead of trying an
	// optimistic insert (see WriteActuals). A hint only; counts never depend
	// on it.
	actualsConflict atomic.Bool
	// forecastsConflict is the same hint for batches of forecasts.
	forecastsConflict atomic.Bool
	// receiptsSwept is when expired receipts were last dropped (unix
	// seconds; see dropExpiredReceipts).
	receiptsSwept atomic.Int64
}

// New returns a Store over pool; the schema must be migrated (see Migrate).
func New(pool *pgxpool.Pool, limits Limits) *Store {
	return &Store{pool: pool, limits: limits.withDefaults(), series: make(map[string]*Series), models: make(map[modelKey]bool)}
}

// Limits returns the limits in force.
func (s *Store) Limits() Limits { return s.limits }

// Pool returns the connection pool, for health checks and pool metrics.
func (s *Store) Pool() *pgxpool.Pool { return s.pool }

// inTx runs f in a transaction, committing when it returns nil.
func (s *Store) inTx(ctx context.Context, f func(pgx.Tx) error) error {
	tx, err := s.pool.Begin(ctx)
	if err != nil {
		return fmt.Errorf("starting transaction: %w", err)
	}
	defer func() { _ = tx.Rollback(context.WithoutCancel(ctx)) }()
	if err := f(tx); err != nil {
		return err
	}
	if err := tx.Commit(ctx); err != nil {
		return fmt.Errorf("committing: %w", err)
	}
	return nil
}

// DeleteBefore removes forecasts whose origin and actuals whose time are
// before cutoff (the retention setting), in slices so that no single
// statement holds locks for long. It returns how many rows went.
func (s *Store) DeleteBefore(ctx context.Context, cutoff time.Time) (forecasts, actuals int64, err error) {
	for _, q := range []struct {
		n   *int64
		sql string
	}{
		{&forecasts, `DELETE FROM forecasts WHERE ctid = ANY(ARRAY(SELECT ctid FROM forecasts WHERE origin < $1 LIMIT 10000))`},
		{&actuals, `DELETE FROM actuals WHERE ctid = ANY(ARRAY(SELECT ctid FROM actuals WHERE time < $1 LIMIT 10000))`},
	} {
		for {
			tag, err := s.pool.Exec(ctx, q.sql, cutoff)
			if err != nil {
				return forecasts, actuals, fmt.Errorf("applying retention: %w", err)
			}
			*q.n += tag.RowsAffected()
			if tag.RowsAffected() < 10000 {
				break
			}
		}
	}
	return forecasts, actuals, nil
}
