package main

import (
	"bytes"
	"context"
	"fmt"
	"io"
	"net"
	"os"
	"strings"
	"sync/atomic"
	"testing"
	"time"

	"github.com/aftercast/aftercast/server"
	"github.com/aftercast/aftercast/server/store"
	"github.com/aftercast/aftercast/server/store/storetest"
)

// startService runs the service on a fresh database with cfg's limits.
func startService(t *testing.T, cfg server.Config) string {
	t.Helper()
	cfg.Listen, cfg.MetricsListen, cfg.DatabaseURL = "127.0.0.1:0", "-", storetest.URL(t)
	srv, err := server.New(cfg)
	if err != nil {
		t.Fatal(err)
	}
	ctx, cancel := context.WithTimeout(context.Background(), 2*time.Minute)
	defer cancel()
	if err := srv.Start(ctx); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = srv.Stop(context.Background()) })
	return srv.GRPCAddr()
}

// cuttingProxy forwards TCP connections to target, and cuts the first one
// after cut bytes from the client: a connection that breaks mid-push.
func cuttingProxy(t *testing.T, target string, cut int64) string {
	t.Helper()
	ln := listenLocal(t)
	t.Cleanup(func() { ln.Close() })
	var first atomic.Bool
	first.Store(true)
	go func() {
		for {
			c, err := ln.Accept()
			if err != nil {
				return
			}
			go forward(t.Context(), c, target, cut, first.Swap(false))
		}
	}()
	return ln.Addr().String()
}

func forward(ctx context.Context, c net.Conn, target string, cut int64, cutThis bool) {
	defer c.Close()
	s, err := (&net.Dialer{}).DialContext(ctx, "tcp", target)
	if err != nil {
		return
	}
	defer s.Close()
	go func() { _, _ = io.Copy(c, s); c.Close() }()
	var from io.Reader = c
	if cutThis {
		from = io.LimitReader(c, cut)
	}
	_, _ = io.Copy(s, from)
}

func cliRun(args ...string) (code int, stdout, stderr string) {
	var out, errb bytes.Buffer
	code = run(args, &out, &errb)
	return code, out.String(), errb.String()
}

func actualsCSV(key string, n int) string {
	var b strings.Builder
	b.WriteString("series,time,value\n")
	t0 := time.Date(2026, 1, 1, 0, 0, 0, 0, time.UTC)
	for i := range n {
		fmt.Fprintf(&b, "%s,%s,%d.5\n", key, t0.Add(time.Duration(i)*time.Hour).Format(time.RFC3339), i)
	}
	return b.String()
}

// The case: the connection breaks mid-push, the CLI retries the
// whole file, and its summary covers the invocation — every row accepted
// once — instead of the last attempt's "accepted 0, duplicate N". Then
// the same through standard input, which is read again from a copy.
func TestPushRetriedAfterABrokenConnectionCountsOnce(t *testing.T) { //nolint:paralleltest // replaces os.Stdin
	direct := startService(t, server.Config{})
	if code, out, errs := cliRun("series", "create", "--addr", direct, "--step", "1h", "--horizon", "24", "cut/a"); code != 0 {
		t.Fatal(out, errs)
	}
	const n = 20000 // about 900 kB of messages; the cut comes after 300 kB
	file := writeTemp(t, actualsCSV("cut/a", n))
	code, out, errs := cliRun("push", "actuals", "--addr", cuttingProxy(t, direct, 300<<10), "--batch", "1000", file)
	if want := fmt.Sprintf("accepted %d, duplicate 0, revised 0, rejected 0\n", n); code != 0 || !strings.Contains(out, want) {
		t.Fatalf("exit %d\nstdout %s\nstderr %s\nwant %q", code, out, errs, want)
	}
	if !strings.Contains(errs, "retrying in") {
		t.Errorf("the cut was not retried? stderr %q", errs)
	}
	code, out, _ = cliRun("push", "actuals", "--addr", direct, file)
	if want := fmt.Sprintf("accepted 0, duplicate %d, revised 0, rejected 0\n", n); code != 0 || !strings.Contains(out, want) {
		t.Errorf("the rows stored are not the file's: a second push says %q", out)
	}

	r, w, err := os.Pipe()
	if err != nil {
		t.Fatal(err)
	}
	stdin := os.Stdin
	os.Stdin = r
	t.Cleanup(func() { os.Stdin = stdin })
	go func() { _, _ = io.WriteString(w, actualsCSV("cut/a", 2*n)); w.Close() }()
	code, out, errs = cliRun("push", "actuals", "--addr", cuttingProxy(t, direct, 300<<10), "--batch", "1000", "-")
	if want := fmt.Sprintf("accepted %d, duplicate %d, revised 0, rejected 0\n", n, n); code != 0 || !strings.Contains(out, want) ||
		!strings.Contains(errs, "retrying in") {
		t.Errorf("stdin: exit %d\nstdout %s\nstderr %s\nwant %q after a retry", code, out, errs, want)
	}
}

// Batches follow the service's limits: the default --batch is lowered to
// the service's max batch silently, an explicit one with a note.
func TestPushBatchesFitTheService(t *testing.T) {
	t.Parallel()
	addr := startService(t, server.Config{Limits: store.Limits{MaxBatch: 100}, MaxMessageBytes: 64 << 10})
	if code, out, errs := cliRun("series", "create", "--addr", addr, "--step", "1h", "--horizon", "24", "small/a"); code != 0 {
		t.Fatal(out, errs)
	}
	file := writeTemp(t, actualsCSV("small/a", 3000))
	code, out, errs := cliRun("push", "actuals", "--addr", addr, file)
	if code != 0 || !strings.Contains(out, "accepted 3000,") || errs != "" {
		t.Errorf("default batch: exit %d\n%s\n%s", code, out, errs)
	}
	code, out, errs = cliRun("push", "actuals", "--addr", addr, "--batch", "400", file)
	note := "--batch 400 is above the service's limit of 100 actuals per message; sending 100"
	if code != 0 || !strings.Contains(out, "duplicate 3000,") || !strings.Contains(errs, note) {
		t.Errorf("explicit batch: exit %d\n%s\n%s", code, out, errs)
	}
}

// UNAVAILABLE is retried with growing waits for --retry-for, then
// reported; --retry-for 0 never retries.
func TestRetryForBoundsTheRetries(t *testing.T) {
	t.Parallel()
	ln := listenLocal(t)
	closed := ln.Addr().String()
	ln.Close()
	start := time.Now()
	code, _, errs := cliRun("series", "get", "--addr", closed, "--retry-for", "2s", "x")
	took := time.Since(start)
	if code != 1 || strings.Count(errs, "retrying in") != 2 || !strings.Contains(errs, "cannot reach aftercast") {
		// 0.5 s and 1 s waits fit in 2 s; the next, 2 s, would not.
		t.Errorf("exit %d after %v, stderr:\n%s", code, took, errs)
	}
	code, _, errs = cliRun("series", "get", "--addr", closed, "--retry-for", "0", "x")
	if code != 1 || strings.Contains(errs, "retrying") {
		t.Errorf("--retry-for 0: exit %d, stderr:\n%s", code, errs)
	}
}
