package main

import (
	"context"
	"fmt"
	"strings"
	"syscall"
	"testing"
	"time"

	"github.com/jackc/pgx/v5"

	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/pglocal"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// The case: PostgreSQL crashes mid-push (a backend killed with
// SIGKILL, so the postmaster ends every session and runs crash recovery).
// The service must answer UNAVAILABLE, the CLI retry until the database is
// back, and the summary cover the invocation: every row accepted once,
// none a duplicate, and exactly the file stored. The cluster is the
// test's own: a crash would end the sessions of every other test.
func TestPushSurvivesAPostgreSQLCrash(t *testing.T) {
	t.Parallel()
	ctx := t.Context()
	cl, err := pglocal.Start(ctx, pglocal.Options{Logger: storetest.Logger(t)})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = cl.Stop(context.Background()) })
	srv, err := server.New(server.Config{Listen: "127.0.0.1:0", MetricsListen: "-", DatabaseURL: cl.URL("postgres"), Logger: storetest.Logger(t)})
	if err != nil {
		t.Fatal(err)
	}
	startCtx, cancel := context.WithTimeout(ctx, 2*time.Minute)
	defer cancel()
	if err := srv.Start(startCtx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop(context.Background()) })
	addr := srv.GRPCAddr()
	if code, out, errs := cliRun("series", "create", "--addr", addr, "--step", "1h", "--horizon", "24", "crash/a"); code != 0 {
		t.Fatal(out, errs)
	}

	const n = 40000
	file := writeTemp(t, actualsCSV("crash/a", n))
	crashed := make(chan error, 1)
	go func() { crashed <- crashOnFirstCommit(ctx, cl.URL("postgres")) }()
	code, out, errs := cliRun("push", "actuals", "--addr", addr, "--batch", "500", file)
	if err := <-crashed; err != nil {
		t.Fatal(err)
	}
	if want := fmt.Sprintf("accepted %d, duplicate 0, revised 0, rejected 0\n", n); code != 0 || !strings.Contains(out, want) {
		t.Fatalf("exit %d\nstdout %s\nstderr %s\nwant %q", code, out, errs, want)
	}
	if !strings.Contains(errs, "database unavailable, retry later; retrying in") {
		t.Errorf("the crash did not reach the CLI as UNAVAILABLE, retried: stderr %q", errs)
	}
	code, out, _ = cliRun("push", "actuals", "--addr", addr, file)
	if want := fmt.Sprintf("accepted 0, duplicate %d, revised 0, rejected 0\n", n); code != 0 || !strings.Contains(out, want) {
		t.Errorf("the rows stored are not the file's: a second push says %q", out)
	}
}

// crashOnFirstCommit waits until some actuals are committed, then kills
// the session of another client (the service's) with SIGKILL.
func crashOnFirstCommit(ctx context.Context, url string) error {
	ctx, cancel := context.WithTimeout(ctx, time.Minute)
	defer cancel()
	conn, err := pgx.Connect(ctx, url)
	if err != nil {
		return err
	}
	defer conn.Close(context.Background())
	for {
		var stored, pid int
		err := conn.QueryRow(ctx, `SELECT (SELECT count(*) FROM actuals),
			coalesce((SELECT pid FROM pg_stat_activity WHERE backend_type = 'client backend' AND pid <> pg_backend_pid()
			  AND state = 'active' LIMIT 1), 0)`).Scan(&stored, &pid)
		if err != nil {
			return fmt.Errorf("watching the push: %w", err)
		}
		if stored > 0 && pid != 0 {
			return syscall.Kill(pid, syscall.SIGKILL)
		}
		time.Sleep(time.Millisecond)
	}
}
