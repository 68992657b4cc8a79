// Package storetest gives tests a private, migrated PostgreSQL database
// each. It uses the server at AFTERCAST_TEST_DATABASE_URL when that is set
// (an admin URL of a server where databases may be created) and otherwise
// starts a throwaway cluster with pglocal for the test binary. A template
// database is migrated once and cloned per test, which keeps tests fast and
// isolated.
package storetest

import (
	"context"
	"fmt"
	"log/slog"
	"net/url"
	"os"
	"sync"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"
	"github.com/jackc/pgx/v5/pgxpool"

	"github.com/aftercast/aftercast/server/pglocal"
	"github.com/aftercast/aftercast/server/store"
)

// EnvURL names the variable that points tests at an existing server.
const EnvURL = "AFTERCAST_TEST_DATABASE_URL"

var (
	mu       sync.Mutex // serialises CREATE DATABASE … TEMPLATE, which needs the template idle
	cluster  *pglocal.Cluster
	adminURL string
	template string
	counter  int
	setupErr error
	once     sync.Once
)

// Main runs the tests of a package that uses this one and stops the
// cluster it may have started: call it from TestMain as
// os.Exit(storetest.Main(m)).
func Main(m *testing.M) int {
	code := m.Run()
	if cluster != nil {
		ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
		defer cancel()
		if err := cluster.Stop(ctx); err != nil {
			fmt.Fprintln(os.Stderr, "storetest: stopping cluster:", err)
		}
	}
	return code
}

func setup() error {
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	adminURL = os.Getenv(EnvURL)
	if adminURL == "" {
		c, err := pglocal.Start(ctx, pglocal.Options{})
		if err != nil {
			return fmt.Errorf("starting a private PostgreSQL for tests (or set %s): %w", EnvURL, err)
		}
		cluster = c
		adminURL = c.URL("postgres")
	}
	template = fmt.Sprintf("aftercast_tmpl_%d", os.Getpid())
	if err := exec(ctx, adminURL, "DROP DATABASE IF EXISTS "+template+" WITH (FORCE)", "CREATE DATABASE "+template); err != nil {
		return err
	}
	pool, err := pgxpool.New(ctx, withDB(adminURL, template))
	if err != nil {
		return err
	}
	defer pool.Close()
	if _, err := store.Migrate(ctx, pool, nil); err != nil {
		return fmt.Errorf("migrating the template: %w", err)
	}
	return nil
}

func exec(ctx context.Context, u string, stmts ...string) error {
	conn, err := pgx.Connect(ctx, u)
	if err != nil {
		return fmt.Errorf("connecting to %s: %w", redact(u), err)
	}
	defer conn.Close(context.WithoutCancel(ctx))
	for _, s := range stmts {
		if _, err := conn.Exec(ctx, s); err != nil {
			return fmt.Errorf("%s: %w", s, err)
		}
	}
	return nil
}

func withDB(u, db string) string {
	p, err := url.Parse(u)
	if err != nil {
		panic(err)
	}
	p.Path = "/" + db
	return p.String()
}

func redact(u string) string {
	p, err := url.Parse(u)
	if err != nil {
		return "(unparsable URL)"
	}
	return p.Redacted()
}

// URL returns the URL of a new migrated database dropped when t ends.
func URL(t testing.TB) string {
	t.Helper()
	once.Do(func() { setupErr = setup() })
	if setupErr != nil {
		t.Fatal(setupErr)
	}
	mu.Lock()
	counter++
	name := fmt.Sprintf("aftercast_t%d_%d", os.Getpid(), counter)
	err := exec(context.Background(), adminURL, "CREATE DATABASE "+name+" TEMPLATE "+template)
	mu.Unlock()
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() {
		if err := exec(context.Background(), adminURL, "DROP DATABASE IF EXISTS "+name+" WITH (FORCE)"); err != nil {
			t.Logf("dropping test database: %v", err)
		}
	})
	return withDB(adminURL, name)
}

// Pool returns a pool on a new migrated database, closed when t ends.
func Pool(t testing.TB) *pgxpool.Pool {
	t.Helper()
	pool, err := pgxpool.New(context.Background(), URL(t))
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(pool.Close)
	return pool
}

// Store returns a Store with default limits on a new migrated database.
func Store(t testing.TB) *store.Store {
	t.Helper()
	return store.New(Pool(t), store.Limits{})
}

// Logger sends slog output to t.Log.
func Logger(t testing.TB) *slog.Logger {
	t.Helper()
	return slog.New(slog.NewTextHandler(tlogWriter{t}, &slog.HandlerOptions{Level: slog.LevelDebug}))
}

type tlogWriter struct{ t testing.TB }

func (w tlogWriter) Write(p []byte) (int, error) {
	w.t.Helper()
	w.t.Log(string(p))
	return len(p), nil
}
