package store

import (
	"context"
	"embed"
	"fmt"
	"io/fs"
	"log/slog"
	"path"
	"slices"
	"strconv"
	"strings"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"
)

//go:embed migrations/*.sql
var migrationFiles embed.FS

// Migration is one numbered schema change.
type Migration struct {
	Version int
	Name    string
	Up      string
	Down    string
}

// Migrations lists the embedded migrations in version order.
func Migrations() ([]Migration, error) {
	files, err := fs.Glob(migrationFiles, "migrations/*.sql")
	if err != nil {
		return nil, err
	}
	byVersion := map[int]*Migration{}
	for _, f := range files {
		base := path.Base(f)
		num, rest, ok := strings.Cut(base, "_")
		v, err := strconv.Atoi(num)
		if !ok || err != nil {
			return nil, fmt.Errorf("migration file %s: want NNN_name.up.sql or NNN_name.down.sql", base)
		}
		body, err := migrationFiles.ReadFile(f)
		if err != nil {
			return nil, err
		}
		m := byVersion[v]
		if m == nil {
			m = &Migration{Version: v}
			byVersion[v] = m
		}
		switch {
		case strings.HasSuffix(rest, ".up.sql"):
			m.Name, m.Up = strings.TrimSuffix(rest, ".up.sql"), string(body)
		case strings.HasSuffix(rest, ".down.sql"):
			m.Down = string(body)
		default:
			return nil, fmt.Errorf("migration file %s: want .up.sql or .down.sql", base)
		}
	}
	out := make([]Migration, 0, len(byVersion))
	for _, m := range byVersion {
		if m.Up == "" {
			return nil, fmt.Errorf("migration %03d has no .up.sql", m.Version)
		}
		out = append(out, *m)
	}
	slices.SortFunc(out, func(a, b Migration) int { return a.Version - b.Version })
	for i, m := range out {
		if m.Version != i+1 {
			return nil, fmt.Errorf("migrations must be numbered 1, 2, 3…: found %03d at position %d", m.Version, i+1)
		}
	}
	return out, nil
}

// The service's own advisory locks use PostgreSQL's two-key form, whose key
// space is separate from the one-key form that locks series by id, so no
// series id can collide with them.
const (
	lockClass      = 0x61667463 // "aftc"
	lockMigrations = 1          // serialises migrations across replicas starting at once
	lockEvents     = 2          // orders drift events (see insertEvents)
)

// Migrate applies every embedded migration not yet recorded in
// aftercast_schema_migrations, each in its own transaction, under a
// session advisory lock. It returns the versions it applied.
func Migrate(ctx context.Context, pool *pgxpool.Pool, log *slog.Logger) ([]int, error) {
	ms, err := Migrations()
	if err != nil {
		return nil, err
	}
	conn, err := pool.Acquire(ctx)
	if err != nil {
		return nil, fmt.Errorf("acquiring connection: %w", err)
	}
	defer conn.Release()
	if _, err := conn.Exec(ctx, "SELECT pg_advisory_lock($1, $2)", lockClass, lockMigrations); err != nil {
		return nil, fmt.Errorf("taking the migration lock: %w", err)
	}
	defer func() {
		// Unlock on a context that outlives a cancelled ctx, or the lock
		// would stay with the pooled connection.
		_, _ = conn.Exec(context.WithoutCancel(ctx), "SELECT pg_advisory_unlock($1, $2)", lockClass, lockMigrations)
	}()
	if _, err := conn.Exec(ctx, `CREATE TABLE IF NOT EXISTS aftercast_schema_migrations (
		version    integer PRIMARY KEY,
		name       text NOT NULL,
		applied_at timestamptz NOT NULL DEFAULT now())`); err != nil {
		return nil, fmt.Errorf("creating the version table: %w", err)
	}
	rows, err := conn.Query(ctx, "SELECT version FROM aftercast_schema_migrations")
	if err != nil {
		return nil, fmt.Errorf("reading applied migrations: %w", err)
	}
	done, err := pgx.CollectRows(rows, pgx.RowTo[int])
	if err != nil {
		return nil, fmt.Errorf("reading applied migrations: %w", err)
	}
	if len(done) > 0 && slices.Max(done) > len(ms) {
		return nil, fmt.Errorf("database schema is at version %d, newer than this binary's %d: upgrade aftercast", slices.Max(done), len(ms))
	}
	var applied []int
	for _, m := range ms {
		if slices.Contains(done, m.Version) {
			continue
		}
		err := pgx.BeginFunc(ctx, conn, func(tx pgx.Tx) error {
			if _, err := tx.Exec(ctx, m.Up); err != nil {
				return err
			}
			_, err := tx.Exec(ctx, "INSERT INTO aftercast_schema_migrations (version, name) VALUES ($1, $2)", m.Version, m.Name)
			return err
		})
		if err != nil {
			return applied, fmt.Errorf("applying migration %03d_%s: %w", m.Version, m.Name, err)
		}
		if log != nil {
			log.Info("applied migration", "version", m.Version, "name", m.Name)
		}
		applied = append(applied, m.Version)
	}
	return applied, nil
}
