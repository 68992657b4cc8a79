package pglocal

import (
	"bytes"
	"context"
	"errors"
	"fmt"
	"net"
	"os"
	"os/exec"
	"path/filepath"
	"runtime"
	"strconv"
	"strings"
	"syscall"
	"time"
)

// errPortInUse marks a start that failed because another process had
// taken the port.
var errPortInUse = errors.New("port in use")

// postmaster is one run of the server process.
type postmaster struct {
	proc   *os.Process
	exited chan struct{} // closed once proc has exited and been reaped
	err    error         // proc's exit error; set before exited is closed
}

// startPostmaster starts postgres on c.port and waits until it accepts
// connections.
func (c *Cluster) startPostmaster(ctx context.Context) error {
	logf, err := os.OpenFile(c.logPath, os.O_CREATE|os.O_WRONLY|os.O_TRUNC, 0o600)
	if err != nil {
		return fmt.Errorf("opening server log: %w", err)
	}
	defer logf.Close() // the server gets its own copy of the descriptor
	if err := c.chown(c.logPath); err != nil {
		return err
	}
	args := []string{
		"-D", c.dataDir,
		"-p", strconv.Itoa(c.port),
		"-c", "listen_addresses=127.0.0.1",
		"-c", "unix_socket_directories=" + c.sockDir,
		"-c", "max_connections=200",
	}
	if !c.persistent {
		// Durability buys nothing for a cluster that Stop deletes.
		args = append(args, "-c", "fsync=off", "-c", "synchronous_commit=off", "-c", "full_page_writes=off")
	}
	// ctx bounds the start only: the server outlives it, until Stop.
	cmd := exec.Command(filepath.Join(c.binDir, "postgres"), args...) //nolint:noctx // not CommandContext: the server must outlive ctx
	cmd.Stdout, cmd.Stderr = logf, logf
	c.asServerUser(cmd)
	// A process group of its own keeps the server out of reach of a Ctrl-C
	// in the terminal, which signals the whole foreground group: it must
	// wait for our orderly Stop rather than die alongside us.
	cmd.SysProcAttr.Setpgid = true
	setParentDeathSignal(cmd.SysProcAttr)

	pm := &postmaster{exited: make(chan struct{})}
	started := make(chan error, 1)
	go func() {
		// The parent-death signal fires when the thread that started the
		// server exits, not the process, and Go ends a thread whenever a
		// goroutine locked to it returns. Starting from a thread we keep
		// locked, blocked in Wait for as long as the server lives, means
		// no other goroutine can ever end it early. We never unlock, so the
		// thread ends with this goroutine, once the server is gone.
		runtime.LockOSThread()
		if err := cmd.Start(); err != nil {
			started <- err
			return
		}
		pm.proc = cmd.Process
		started <- nil
		pm.err = cmd.Wait()
		close(pm.exited)
	}()
	if err := <-started; err != nil {
		return fmt.Errorf("starting postgres: %w", err)
	}
	c.pm = pm
	return c.waitReady(ctx)
}

func (c *Cluster) waitReady(ctx context.Context) error {
	tick := time.NewTicker(50 * time.Millisecond)
	defer tick.Stop()
	for {
		select {
		case <-c.pm.exited:
			log, _ := os.ReadFile(c.logPath)
			why := c.pm.err
			if why == nil {
				why = errors.New("exit status 0")
			}
			err := fmt.Errorf("postgres exited while starting (%w); %s ends:\n%s", why, c.logPath, tail(log))
			if bytes.Contains(log, []byte("could not bind")) || bytes.Contains(log, []byte("Address already in use")) {
				return fmt.Errorf("%w: %w", errPortInUse, err)
			}
			return err
		case <-ctx.Done():
			log, _ := os.ReadFile(c.logPath)
			return fmt.Errorf("waiting for postgres to start: %w; %s ends:\n%s", ctx.Err(), c.logPath, tail(log))
		case <-tick.C:
		}
		if readyInPIDFile(c.dataDir, c.pm.proc.Pid) && c.accepting(ctx) {
			return nil
		}
	}
}

// readyInPIDFile reports whether postmaster.pid says that the server with
// this pid accepts connections; `pg_ctl start -w` waits for the same. Unlike
// a probe of the port, it cannot mistake another server that got the port
// first for ours.
func readyInPIDFile(dataDir string, pid int) bool {
	b, err := os.ReadFile(filepath.Join(dataDir, "postmaster.pid"))
	// Line 1 is the pid and line 8 the status; see PostgreSQL's pidfile.h.
	lines := strings.Split(string(b), "\n")
	return err == nil && len(lines) >= 8 &&
		strings.TrimSpace(lines[0]) == strconv.Itoa(pid) &&
		strings.TrimSpace(lines[7]) == "ready"
}

// accepting checks that a client gets in: with pg_isready, which goes
// through the protocol's startup, or else with a TCP connect.
func (c *Cluster) accepting(ctx context.Context) bool {
	isready := filepath.Join(c.binDir, "pg_isready")
	if _, err := os.Stat(isready); err == nil {
		// A conninfo string rather than flags, so that PG* variables in
		// our environment cannot change what is probed.
		conninfo := fmt.Sprintf("host=127.0.0.1 port=%d user=postgres dbname=postgres sslmode=disable connect_timeout=2", c.port)
		return exec.CommandContext(ctx, isready, "-q", "-d", conninfo).Run() == nil
	}
	d := net.Dialer{Timeout: 2 * time.Second}
	conn, err := d.DialContext(ctx, "tcp", net.JoinHostPort("127.0.0.1", strconv.Itoa(c.port)))
	if err != nil {
		return false
	}
	conn.Close()
	return true
}

// shutdown sends SIGINT, which is what `pg_ctl stop -m fast` sends, and
// waits for the server to exit, killing it if ctx ends first. It signals
// the server itself rather than run pg_ctl because pg_ctl, like postgres,
// refuses to run as root, and because waiting on our own child is exact
// where pg_ctl polls postmaster.pid.
func (p *postmaster) shutdown(ctx context.Context) error {
	if err := p.proc.Signal(syscall.SIGINT); err != nil && !errors.Is(err, os.ErrProcessDone) {
		return fmt.Errorf("signalling postgres: %w", err)
	}
	select {
	case <-p.exited:
		return nil
	case <-ctx.Done():
	}
	p.kill()
	return fmt.Errorf("postgres did not shut down in time, killed it: %w", ctx.Err())
}

// kill ends the server at once. Its child processes notice that their
// postmaster is gone and exit by themselves.
func (p *postmaster) kill() {
	_ = p.proc.Kill()
	<-p.exited
}

// runningPostmaster returns the pid in dataDir's postmaster.pid and whether
// a process with that pid is alive. Like postgres itself, it cannot tell a
// live postmaster from an unrelated process that reused a dead one's pid.
func runningPostmaster(dataDir string) (int, bool) {
	b, err := os.ReadFile(filepath.Join(dataDir, "postmaster.pid"))
	if err != nil {
		return 0, false
	}
	first, _, _ := strings.Cut(string(b), "\n")
	pid, err := strconv.Atoi(strings.TrimSpace(first))
	if err != nil || pid == 0 {
		return 0, false
	}
	pid = max(pid, -pid) // a single-user backend writes its pid negated
	// Signal 0 only checks; EPERM means the process exists as another user.
	err = syscall.Kill(pid, 0)
	return pid, err == nil || errors.Is(err, syscall.EPERM)
}

// tail returns the last lines of a log, enough to show why a start failed.
func tail(b []byte) string {
	lines := strings.Split(strings.TrimRight(string(b), "\n"), "\n")
	if len(lines) > 20 {
		lines = lines[len(lines)-20:]
	}
	return strings.Join(lines, "\n")
}

// freePort returns a TCP port on 127.0.0.1 that was free a moment ago.
// Another process may take it before postgres binds it, so Start retries.
func freePort(ctx context.Context) (int, error) {
	var lc net.ListenConfig
	l, err := lc.Listen(ctx, "tcp", "127.0.0.1:0")
	if err != nil {
		return 0, fmt.Errorf("finding a free port: %w", err)
	}
	defer l.Close()
	return l.Addr().(*net.TCPAddr).Port, nil
}
