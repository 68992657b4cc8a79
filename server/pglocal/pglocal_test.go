package pglocal

import (
	"bufio"
	"bytes"
	"context"
	"errors"
	"fmt"
	"io"
	"io/fs"
	"log/slog"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"sync"
	"syscall"
	"testing"
	"time"
)

// testWriter sends the package's log lines to t.Log.
type testWriter struct{ t *testing.T }

func (w testWriter) Write(p []byte) (int, error) {
	w.t.Log(strings.TrimSuffix(string(p), "\n"))
	return len(p), nil
}

func testLogger(t *testing.T) *slog.Logger {
	t.Helper()
	return slog.New(slog.NewTextHandler(testWriter{t}, nil))
}

// start starts a cluster that is stopped when the test ends.
func start(t *testing.T, opt Options) *Cluster {
	t.Helper()
	if testing.Short() {
		t.Skip("starts a PostgreSQL server")
	}
	opt.Logger = testLogger(t)
	c, err := Start(t.Context(), opt)
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { stop(t, c) })
	return c
}

func stop(t *testing.T, c *Cluster) {
	t.Helper()
	ctx, cancel := context.WithTimeout(context.Background(), 30*time.Second)
	defer cancel()
	if err := c.Stop(ctx); err != nil {
		t.Errorf("Stop: %v", err)
	}
}

// psql runs sql on c with the psql client and returns its unaligned output.
func psql(t *testing.T, c *Cluster, sql string) string {
	t.Helper()
	cmd := exec.CommandContext(t.Context(), filepath.Join(c.binDir, "psql"), "-X",
		"-h", "127.0.0.1", "-p", strconv.Itoa(c.port), "-U", "postgres", "-d", "postgres", "-Atc", sql)
	out, err := cmd.CombinedOutput()
	if err != nil {
		t.Fatalf("psql %q: %v\n%s", sql, err, out)
	}
	return strings.TrimSpace(string(out))
}

// alive reports whether pid is a live process. A zombie counts as dead: the
// init process of a container may never reap a postmaster that outlived its
// parent.
func alive(pid int) bool {
	if syscall.Kill(pid, 0) != nil {
		return false
	}
	b, err := os.ReadFile(fmt.Sprintf("/proc/%d/stat", pid))
	if err != nil {
		return true // no /proc to tell zombies apart
	}
	// The state letter follows the parenthesised command name.
	i := bytes.LastIndexByte(b, ')')
	return i < 0 || i+2 >= len(b) || b[i+2] != 'Z'
}

func waitGone(t *testing.T, pids []int, timeout time.Duration) {
	t.Helper()
	deadline := time.Now().Add(timeout)
	for _, pid := range pids {
		for alive(pid) {
			if time.Now().After(deadline) {
				t.Fatalf("process %d still running after %v", pid, timeout)
			}
			time.Sleep(50 * time.Millisecond)
		}
	}
}

// reachableTempDir returns a t.TempDir that the postgres OS user can enter
// when the tests run as root; t.TempDir's parent is 0700.
func reachableTempDir(t *testing.T) string {
	t.Helper()
	dir := t.TempDir()
	for _, d := range []string{filepath.Dir(dir), dir} {
		if err := os.Chmod(d, 0o755); err != nil {
			t.Fatal(err)
		}
	}
	return dir
}

func TestStartTemp(t *testing.T) {
	t.Parallel()
	c := start(t, Options{})
	if got := psql(t, c, "select 1"); got != "1" {
		t.Errorf("select 1 = %q", got)
	}
	settings := map[string]string{
		"fsync":              "off",
		"synchronous_commit": "off",
		"full_page_writes":   "off",
		"max_connections":    "200",
		"listen_addresses":   "127.0.0.1",
		"server_encoding":    "UTF8",
		"lc_collate":         "C",
	}
	for name, want := range settings {
		if got := psql(t, c, "show "+name); got != want {
			t.Errorf("%s = %q, want %q", name, got, want)
		}
	}
	if got, want := c.URL("app"), fmt.Sprintf("postgres://postgres@127.0.0.1:%d/app?sslmode=disable", c.port); got != want {
		t.Errorf("URL = %q, want %q", got, want)
	}
	if !strings.HasPrefix(c.DataDir(), c.root) {
		t.Errorf("DataDir %s is outside the temp dir %s", c.DataDir(), c.root)
	}

	stop(t, c)
	if _, err := os.Stat(c.root); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("temp dir %s left behind: %v", c.root, err)
	}
	addr := net.JoinHostPort("127.0.0.1", strconv.Itoa(c.port))
	d := net.Dialer{Timeout: time.Second}
	if conn, err := d.DialContext(t.Context(), "tcp", addr); err == nil {
		conn.Close()
		t.Errorf("%s still accepts connections after Stop", addr)
	}
}

func TestStopIdempotent(t *testing.T) {
	t.Parallel()
	c := start(t, Options{})
	var wg sync.WaitGroup
	for range 3 {
		wg.Go(func() { stop(t, c) })
	}
	wg.Wait()
	stop(t, c)
	if alive(c.pm.proc.Pid) {
		t.Errorf("postmaster %d still running", c.pm.proc.Pid)
	}
}

func TestStopKillsAfterDeadline(t *testing.T) {
	t.Parallel()
	if testing.Short() {
		t.Skip("starts a PostgreSQL server")
	}
	c, err := Start(t.Context(), Options{Logger: testLogger(t)})
	if err != nil {
		t.Fatal(err)
	}
	psql(t, c, "create table busy as select generate_series(1, 100000) as x")
	ctx, cancel := context.WithCancel(context.Background())
	cancel()
	if err := c.Stop(ctx); !errors.Is(err, context.Canceled) {
		t.Errorf("Stop with an ended context: %v, want context.Canceled", err)
	}
	if alive(c.pm.proc.Pid) {
		t.Errorf("postmaster %d still running", c.pm.proc.Pid)
	}
	if _, err := os.Stat(c.root); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("temp dir %s left behind: %v", c.root, err)
	}
}

func TestPersistentDataDir(t *testing.T) {
	t.Parallel()
	dir := filepath.Join(reachableTempDir(t), "pg") // missing: Start creates it

	a := start(t, Options{DataDir: dir})
	psql(t, a, "create table kept (x int); insert into kept values (42)")
	if got := psql(t, a, "show fsync"); got != "on" {
		t.Errorf("fsync = %q on a persistent cluster", got)
	}
	if c, err := Start(t.Context(), Options{DataDir: dir}); err == nil {
		stop(t, c)
		t.Error("second Start on a data dir in use succeeded")
	} else if !strings.Contains(err.Error(), "in use by a running postgres") {
		t.Errorf("second Start on a data dir in use: %v", err)
	}
	stop(t, a)
	if _, err := os.Stat(filepath.Join(dir, "PG_VERSION")); err != nil {
		t.Fatalf("data dir gone after Stop: %v", err)
	}
	if _, err := os.Stat(a.root); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("temp dir %s left behind: %v", a.root, err)
	}

	b := start(t, Options{DataDir: dir})
	if got := psql(t, b, "select x from kept"); got != "42" {
		t.Errorf("after restart, kept holds %q", got)
	}
	// Kill the server the way a crash would, leaving a stale postmaster.pid.
	// Its children must be gone first, or the next server finds the shared
	// memory still in use.
	var children []int
	for _, s := range strings.Fields(psql(t, b, "select pid from pg_stat_activity where pid <> pg_backend_pid()")) {
		pid, _ := strconv.Atoi(s)
		children = append(children, pid)
	}
	b.pm.kill()
	waitGone(t, children, 30*time.Second)
	if _, err := os.Stat(filepath.Join(dir, "postmaster.pid")); err != nil {
		t.Fatalf("no stale postmaster.pid: %v", err)
	}
	stop(t, b)

	c := start(t, Options{DataDir: dir})
	if got := psql(t, c, "select x from kept"); got != "42" {
		t.Errorf("after a crash, kept holds %q", got)
	}
}

// TestPortTaken checks that a start failing on a taken port says so, with
// the server log, and is recognised as the failure Start retries on a new
// port. A fixed port is never retried.
func TestPortTaken(t *testing.T) {
	t.Parallel()
	if testing.Short() {
		t.Skip("starts a PostgreSQL server")
	}
	var lc net.ListenConfig
	l, err := lc.Listen(t.Context(), "tcp", "127.0.0.1:0")
	if err != nil {
		t.Fatal(err)
	}
	defer l.Close()
	port := l.Addr().(*net.TCPAddr).Port
	c, err := Start(t.Context(), Options{Port: port, Logger: testLogger(t)})
	if err == nil {
		stop(t, c)
		t.Fatalf("Start on taken port %d succeeded", port)
	}
	if !errors.Is(err, errPortInUse) || !strings.Contains(err.Error(), "could not bind") {
		t.Errorf("Start on a taken port: %v", err)
	}
}

func TestDataDirNotCluster(t *testing.T) {
	t.Parallel()
	dir := reachableTempDir(t)
	if err := os.WriteFile(filepath.Join(dir, "notes.txt"), nil, 0o644); err != nil {
		t.Fatal(err)
	}
	_, err := Start(t.Context(), Options{DataDir: dir})
	if errors.Is(err, ErrNoBinaries) {
		t.Skip(err)
	}
	if err == nil || !strings.Contains(err.Error(), "neither empty nor a PostgreSQL data directory") {
		t.Errorf("Start on a non-empty non-cluster dir: %v", err)
	}
}

func TestNoBinaries(t *testing.T) {
	t.Parallel()
	_, err := Start(t.Context(), Options{BinDir: t.TempDir()})
	if !errors.Is(err, ErrNoBinaries) {
		t.Fatalf("Start with an empty BinDir: %v, want ErrNoBinaries", err)
	}
	for _, hint := range []string{"apt-get install postgresql", "--database-url", "AFTERCAST_DATABASE_URL"} {
		if !strings.Contains(err.Error(), hint) {
			t.Errorf("error %q lacks the hint %q", err, hint)
		}
	}
}

// TestSurvivesCallerThreadExit starts a cluster on an OS thread that then
// ends. Had Start forked the server from the calling thread, the server's
// parent-death signal would shut it down.
func TestSurvivesCallerThreadExit(t *testing.T) {
	t.Parallel()
	if testing.Short() {
		t.Skip("starts a PostgreSQL server")
	}
	var c *Cluster
	var err error
	onEndingThread(func() {
		c, err = Start(t.Context(), Options{Logger: testLogger(t)})
	})
	if err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { stop(t, c) })
	time.Sleep(time.Second) // time for a stray signal to land and stop the server
	if got := psql(t, c, "select 1"); got != "1" {
		t.Errorf("select 1 = %q", got)
	}
}

// onEndingThread runs f on an OS thread that ends when f returns. A
// goroutine that exits while locked to its thread ends the thread, except
// the main thread, which Go keeps; so a goroutine that lands there holds it
// while another runs f.
func onEndingThread(f func()) {
	done := make(chan struct{})
	var run func()
	run = func() {
		runtime.LockOSThread()
		if onMainThread() {
			go run()
			<-done
			runtime.UnlockOSThread()
			return
		}
		defer close(done)
		f()
	}
	go run()
	<-done
}

// onMainThread reports whether the calling goroutine runs on the process's
// main thread, whose thread id is the process id.
func onMainThread() bool {
	link, _ := os.Readlink("/proc/thread-self") // "PID/task/TID"
	pid, _, _ := strings.Cut(link, "/")
	return link == pid+"/task/"+pid
}

// TestParentDeath starts a cluster in a child process, kills the child with
// SIGKILL and checks that the server shuts itself down. The child is this
// test binary run again with PGLOCAL_CHILD=1.
func TestParentDeath(t *testing.T) {
	t.Parallel()
	if os.Getenv("PGLOCAL_CHILD") == "1" {
		parentDeathChild()
		return
	}
	if runtime.GOOS != "linux" {
		t.Skip("the parent-death signal is Linux only")
	}
	if testing.Short() {
		t.Skip("starts a PostgreSQL server")
	}
	child := exec.CommandContext(t.Context(), os.Args[0], "-test.run=^TestParentDeath$", "-test.count=1")
	child.Env = append(os.Environ(), "PGLOCAL_CHILD=1")
	stderr, err := os.Create(filepath.Join(t.TempDir(), "stderr"))
	if err != nil {
		t.Fatal(err)
	}
	child.Stderr = stderr
	// The child exits when its stdin closes, so it cannot outlive us.
	stdin, err := child.StdinPipe()
	if err != nil {
		t.Fatal(err)
	}
	defer stdin.Close()
	stdout, err := child.StdoutPipe()
	if err != nil {
		t.Fatal(err)
	}
	if err := child.Start(); err != nil {
		t.Fatal(err)
	}
	t.Cleanup(func() { _ = child.Process.Kill() })

	found := make(chan string, 1)
	go func() {
		defer close(found)
		sc := bufio.NewScanner(stdout)
		for sc.Scan() {
			if strings.HasPrefix(sc.Text(), "CLUSTER ") {
				found <- sc.Text()
				break
			}
		}
		_, _ = io.Copy(io.Discard, stdout)
	}()
	var line string
	select {
	case line = <-found:
	case <-time.After(2 * time.Minute):
	}
	var dataDir string
	var pid int
	if _, err := fmt.Sscanf(line, "CLUSTER %s %d", &dataDir, &pid); err != nil {
		msg, _ := os.ReadFile(stderr.Name())
		t.Fatalf("child did not report a cluster (%q: %v); its stderr:\n%s", line, err, msg)
	}
	root := filepath.Dir(dataDir)
	if !strings.HasPrefix(filepath.Base(root), "pglocal-") {
		t.Fatalf("unexpected data dir %s", dataDir)
	}
	// The child cannot clean up after itself; a later Start would.
	t.Cleanup(func() { os.RemoveAll(root) })
	if !alive(pid) {
		t.Fatalf("postmaster %d not running", pid)
	}

	if err := child.Process.Signal(syscall.SIGKILL); err != nil {
		t.Fatal(err)
	}
	_ = child.Wait()
	waitGone(t, []int{pid}, 30*time.Second)
	// The server shut down on its parent-death signal, not some other way.
	log, _ := os.ReadFile(filepath.Join(root, "postgres.log"))
	if !bytes.Contains(log, []byte("received fast shutdown request")) {
		t.Errorf("server log shows no fast shutdown:\n%s", tail(log))
	}
}

func parentDeathChild() {
	c, err := Start(context.Background(), Options{})
	if err != nil {
		fmt.Fprintln(os.Stderr, err)
		os.Exit(1)
	}
	fmt.Printf("CLUSTER %s %d\n", c.DataDir(), c.pm.proc.Pid)
	_, _ = io.Copy(io.Discard, os.Stdin)
	os.Exit(0)
}

func TestSweep(t *testing.T) {
	t.Parallel()
	tmp := t.TempDir()
	mkroot := func(name string, age time.Duration, locked bool) string {
		root := filepath.Join(tmp, name)
		if err := os.Mkdir(root, 0o755); err != nil {
			t.Fatal(err)
		}
		f, err := os.Create(filepath.Join(root, "lock"))
		if err != nil {
			t.Fatal(err)
		}
		if locked {
			if err := syscall.Flock(int(f.Fd()), syscall.LOCK_EX); err != nil {
				t.Fatal(err)
			}
			t.Cleanup(func() { f.Close() })
		} else {
			f.Close()
		}
		then := time.Now().Add(-age)
		if err := os.Chtimes(root, then, then); err != nil {
			t.Fatal(err)
		}
		return root
	}
	dead := mkroot("pglocal-dead", time.Hour, false)
	kept := []string{
		mkroot("pglocal-live", time.Hour, true),
		mkroot("pglocal-young", 0, false),
		mkroot("unrelated", time.Hour, false),
	}

	sweep(tmp, time.Minute, testLogger(t))
	if _, err := os.Stat(dead); !errors.Is(err, fs.ErrNotExist) {
		t.Errorf("%s not swept: %v", dead, err)
	}
	for _, root := range kept {
		if _, err := os.Stat(root); err != nil {
			t.Errorf("%s swept: %v", root, err)
		}
	}
}
