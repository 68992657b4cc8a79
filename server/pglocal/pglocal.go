package pglocal

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"io/fs"
	"log/slog"
	"net"
	"net/url"
	"os"
	"os/exec"
	"os/user"
	"path/filepath"
	"strconv"
	"sync"
	"syscall"
	"time"
)

const (
	defaultStartTimeout = 60 * time.Second
	// defaultStopTimeout bounds Stop when its context has no deadline.
	defaultStopTimeout = 30 * time.Second
	// startAttempts is how often Start tries fresh ports: a port found free
	// by a probe can be taken by another process before postgres binds it.
	startAttempts = 3
	// sweepAge is how old a dead process's temp directory must be before
	// Start removes it; younger ones may belong to a Start that has created
	// the directory but not yet locked it.
	sweepAge = time.Minute
)

// Options configures [Start]. The zero value starts a throwaway cluster.
type Options struct {
	// DataDir is the cluster's data directory. Empty means a new temporary
	// directory that Stop removes. Otherwise the directory persists: Start
	// runs initdb only if it is missing or empty and reuses it otherwise.
	// When running as root, the postgres OS user must be able to reach it.
	// The server log, rewritten by each Start, is postgres.log in a
	// persistent data directory and beside a temporary one.
	DataDir string
	// BinDir holds initdb and postgres. Empty means discover it: the output
	// of `pg_config --bindir`, else the directory of initdb on PATH, else
	// the highest version of /usr/lib/postgresql/*/bin.
	BinDir string
	// Port is the TCP port on 127.0.0.1. Zero means a free one.
	Port int
	// Logger receives progress messages. Nil means discard them.
	Logger *slog.Logger
	// StartTimeout bounds Start, initdb included. Zero means 60s.
	StartTimeout time.Duration
}

// Cluster is a running PostgreSQL cluster started by [Start]. Its methods
// are safe for concurrent use.
type Cluster struct {
	binDir  string
	dataDir string
	logPath string
	// root is this cluster's private temp directory: lock file, socket
	// directory and, for a throwaway cluster, data directory and log.
	root       string
	sockDir    string
	persistent bool
	port       int
	cred       *syscall.Credential // nil unless the server runs as another user
	log        *slog.Logger

	// lock holds a flock on root/lock while the cluster exists, telling
	// sweep in other processes that root is in use.
	lock *os.File
	pm   *postmaster

	stopOnce sync.Once
	stopErr  error
}

// Start initializes the cluster's data directory if needed, starts
// postgres and returns once it accepts connections. Errors from a failed
// start include the tail of the server log. If no server binaries are found,
// the error wraps [ErrNoBinaries].
func Start(ctx context.Context, opt Options) (*Cluster, error) {
	ctx, cancel := context.WithTimeout(ctx, cmp.Or(opt.StartTimeout, defaultStartTimeout))
	defer cancel()
	log := opt.Logger
	if log == nil {
		log = slog.New(slog.DiscardHandler)
	}
	binDir, err := findBinDir(ctx, opt.BinDir)
	if err != nil {
		return nil, fmt.Errorf("finding postgres: %w", err)
	}
	cred, err := serverCredential()
	if err != nil {
		return nil, err
	}
	sweep(os.TempDir(), sweepAge, log)

	c := &Cluster{binDir: binDir, cred: cred, log: log, persistent: opt.DataDir != ""}
	if err := c.start(ctx, opt); err != nil {
		if c.pm != nil {
			c.pm.kill()
		}
		return nil, errors.Join(err, c.removeFiles())
	}
	log.Info("postgres started", "data_dir", c.dataDir, "port", c.port, "pid", c.pm.proc.Pid, "bin_dir", binDir)
	return c, nil
}

func (c *Cluster) start(ctx context.Context, opt Options) error {
	needInit, err := c.makeDirs(opt.DataDir)
	if err != nil {
		return err
	}
	if needInit {
		if err := c.initdb(ctx); err != nil {
			return err
		}
	}
	for attempt := 1; ; attempt++ {
		c.port = opt.Port
		if c.port == 0 {
			if c.port, err = freePort(ctx); err != nil {
				return err
			}
		}
		err = c.startPostmaster(ctx)
		if err == nil || opt.Port != 0 || attempt == startAttempts || !errors.Is(err, errPortInUse) {
			return err
		}
		c.log.Warn("postgres port taken, retrying", "port", c.port)
	}
}

// URL returns a URL for database dbname as the superuser postgres, e.g.
// postgres://postgres@127.0.0.1:5432/dbname?sslmode=disable. No password is
// needed: the cluster trusts every local connection.
func (c *Cluster) URL(dbname string) string {
	u := url.URL{
		Scheme:   "postgres",
		User:     url.User("postgres"),
		Host:     net.JoinHostPort("127.0.0.1", strconv.Itoa(c.port)),
		Path:     "/" + dbname,
		RawQuery: "sslmode=disable",
	}
	return u.String()
}

// DataDir returns the absolute path of the cluster's data directory.
func (c *Cluster) DataDir() string { return c.dataDir }

// Stop shuts the server down as `pg_ctl stop -m fast` does, kills it if it
// is still running when ctx ends (or after 30s if ctx has no deadline), and
// removes the temporary files, the data directory too unless it is
// persistent. Calling Stop again returns the first call's result.
func (c *Cluster) Stop(ctx context.Context) error {
	c.stopOnce.Do(func() {
		if _, ok := ctx.Deadline(); !ok {
			var cancel context.CancelFunc
			ctx, cancel = context.WithTimeout(ctx, defaultStopTimeout)
			defer cancel()
		}
		err := c.pm.shutdown(ctx)
		c.stopErr = errors.Join(err, c.removeFiles())
		c.log.Info("postgres stopped", "data_dir", c.dataDir, "err", c.stopErr)
	})
	return c.stopErr
}

// makeDirs creates root with its lock and socket directory, picks the data
// directory and log file, and reports whether the data directory needs
// initdb.
func (c *Cluster) makeDirs(dataDir string) (needInit bool, err error) {
	if c.root, err = os.MkdirTemp("", "pglocal-"); err != nil {
		return false, fmt.Errorf("creating temp dir: %w", err)
	}
	// MkdirTemp makes 0700 directories; the server user must get through.
	if err := os.Chmod(c.root, 0o755); err != nil {
		return false, fmt.Errorf("creating temp dir: %w", err)
	}
	if c.lock, err = os.OpenFile(filepath.Join(c.root, "lock"), os.O_CREATE|os.O_RDWR, 0o600); err != nil {
		return false, fmt.Errorf("creating lock file: %w", err)
	}
	if err := syscall.Flock(int(c.lock.Fd()), syscall.LOCK_EX|syscall.LOCK_NB); err != nil {
		return false, fmt.Errorf("locking %s: %w", c.lock.Name(), err)
	}
	c.sockDir = filepath.Join(c.root, "sock")
	if err := c.mkdir(c.sockDir); err != nil {
		return false, err
	}
	if !c.persistent {
		c.dataDir = filepath.Join(c.root, "data")
		c.logPath = filepath.Join(c.root, "postgres.log")
		return true, c.mkdir(c.dataDir)
	}

	if c.dataDir, err = filepath.Abs(dataDir); err != nil {
		return false, fmt.Errorf("resolving data dir: %w", err)
	}
	c.logPath = filepath.Join(c.dataDir, "postgres.log")
	entries, err := os.ReadDir(c.dataDir)
	switch {
	case errors.Is(err, fs.ErrNotExist):
		if err := os.MkdirAll(filepath.Dir(c.dataDir), 0o755); err != nil {
			return false, fmt.Errorf("creating data dir: %w", err)
		}
		return true, c.mkdir(c.dataDir)
	case err != nil:
		return false, fmt.Errorf("reading data dir: %w", err)
	case len(entries) == 0:
		// initdb sets the mode itself, but only if the server user owns it.
		return true, c.chown(c.dataDir)
	}
	if _, err := os.Stat(filepath.Join(c.dataDir, "PG_VERSION")); err != nil {
		return false, fmt.Errorf("data dir %s is neither empty nor a PostgreSQL data directory", c.dataDir)
	}
	// A stale postmaster.pid, from a server that died, is fine: postgres
	// notices that its process is gone and replaces the file.
	if pid, ok := runningPostmaster(c.dataDir); ok {
		return false, fmt.Errorf("data dir %s is in use by a running postgres (pid %d)", c.dataDir, pid)
	}
	return false, nil
}

func (c *Cluster) initdb(ctx context.Context) error {
	args := []string{"-D", c.dataDir, "-U", "postgres", "-A", "trust", "-E", "UTF8", "--locale=C"}
	if !c.persistent {
		args = append(args, "--no-sync")
	}
	began := time.Now()
	cmd := exec.CommandContext(ctx, filepath.Join(c.binDir, "initdb"), args...)
	c.asServerUser(cmd)
	if out, err := cmd.CombinedOutput(); err != nil {
		return fmt.Errorf("running initdb: %w\n%s", err, tail(out))
	}
	// Worth knowing: initdb is most of Start's time, and it is CPU-bound.
	c.log.Info("initdb done", "data_dir", c.dataDir, "took", time.Since(began).Round(time.Millisecond))
	return nil
}

// removeFiles deletes root (and with it a throwaway data directory), then
// drops the lock, so that no sweep sees root unlocked but still in use.
func (c *Cluster) removeFiles() error {
	var err error
	// The children of a killed server may still write for a moment, so
	// removal is retried for a while.
	for i := 0; c.root != "" && i < 10; i++ {
		if err = os.RemoveAll(c.root); err == nil {
			break
		}
		err = fmt.Errorf("removing temp dir: %w", err)
		time.Sleep(200 * time.Millisecond)
	}
	if c.lock != nil {
		c.lock.Close()
	}
	return err
}

// asServerUser prepares cmd to run a server program: as the postgres OS user
// when we are root, from a working directory that user can read.
func (c *Cluster) asServerUser(cmd *exec.Cmd) {
	cmd.Dir = "/"
	cmd.SysProcAttr = &syscall.SysProcAttr{Credential: c.cred}
}

// mkdir creates a 0700 directory owned by the server user.
func (c *Cluster) mkdir(dir string) error {
	if err := os.Mkdir(dir, 0o700); err != nil {
		return fmt.Errorf("creating dir: %w", err)
	}
	return c.chown(dir)
}

func (c *Cluster) chown(path string) error {
	if c.cred == nil {
		return nil
	}
	if err := os.Chown(path, int(c.cred.Uid), int(c.cred.Gid)); err != nil {
		return fmt.Errorf("handing %s to the postgres user: %w", path, err)
	}
	return nil
}

// serverCredential returns the postgres OS user's credential when we run as
// root, which PostgreSQL refuses to run as, and nil otherwise.
func serverCredential() (*syscall.Credential, error) {
	if os.Geteuid() != 0 {
		return nil, nil
	}
	u, err := user.Lookup("postgres")
	if err != nil {
		return nil, fmt.Errorf("running as root needs a postgres OS user to run the server: %w", err)
	}
	uid, err := strconv.ParseUint(u.Uid, 10, 32)
	if err != nil {
		return nil, fmt.Errorf("parsing postgres uid: %w", err)
	}
	gid, err := strconv.ParseUint(u.Gid, 10, 32)
	if err != nil {
		return nil, fmt.Errorf("parsing postgres gid: %w", err)
	}
	return &syscall.Credential{Uid: uint32(uid), Gid: uint32(gid)}, nil
}

// sweep removes the pglocal-* directories in tmp left by processes that died
// without calling Stop: the parent-death signal stops their server, but
// nobody is left to delete the files. A live owner holds the flock on
// root/lock, and the kernel drops it when the owner dies.
func sweep(tmp string, minAge time.Duration, log *slog.Logger) {
	roots, _ := filepath.Glob(filepath.Join(tmp, "pglocal-*"))
	for _, root := range roots {
		fi, err := os.Stat(root)
		if err != nil || !fi.IsDir() || time.Since(fi.ModTime()) < minAge {
			continue
		}
		f, err := os.Open(filepath.Join(root, "lock"))
		if err != nil {
			continue
		}
		if syscall.Flock(int(f.Fd()), syscall.LOCK_EX|syscall.LOCK_NB) == nil {
			// The owner is dead, but its server may still be shutting down.
			if _, running := runningPostmaster(filepath.Join(root, "data")); !running {
				if err := os.RemoveAll(root); err == nil {
					log.Info("removed files of a dead pglocal cluster", "dir", root)
				}
			}
		}
		f.Close()
	}
}
