package pglocal

import (
	"cmp"
	"context"
	"errors"
	"fmt"
	"os"
	"os/exec"
	"path/filepath"
	"slices"
	"strconv"
	"strings"
)

// ErrNoBinaries is returned, wrapped, by [Start] when it finds no PostgreSQL
// server binaries (initdb and postgres).
var ErrNoBinaries = errors.New("no PostgreSQL server binaries (initdb, postgres) found: " +
	"install them (Debian: apt-get install postgresql) " +
	"or use an existing server with --database-url or AFTERCAST_DATABASE_URL")

// findBinDir returns dir if it holds the server binaries, or, for an empty
// dir, the first directory that does among: what `pg_config --bindir`
// prints, the real directory of initdb on PATH, and /usr/lib/postgresql/*/bin
// from the highest version down. pg_config comes first because it names the
// installation the user chose; it is checked like the rest because Debian's
// libpq-dev ships a pg_config without a server.
func findBinDir(ctx context.Context, dir string) (string, error) {
	if dir != "" {
		if !hasServer(dir) {
			return "", fmt.Errorf("looking in %s: %w", dir, ErrNoBinaries)
		}
		return dir, nil
	}
	var dirs []string
	if out, err := exec.CommandContext(ctx, "pg_config", "--bindir").Output(); err == nil {
		dirs = append(dirs, strings.TrimSpace(string(out)))
	}
	if p, err := exec.LookPath("initdb"); err == nil {
		// A symlink such as /usr/local/bin/initdb would lead to a directory
		// without pg_isready; the link's target has the full set.
		if real, err := filepath.EvalSymlinks(p); err == nil {
			p = real
		}
		dirs = append(dirs, filepath.Dir(p))
	}
	dirs = append(dirs, debianBinDirs()...)
	for _, d := range dirs {
		if hasServer(d) {
			return d, nil
		}
	}
	return "", ErrNoBinaries
}

// debianBinDirs lists /usr/lib/postgresql/*/bin, highest version first.
func debianBinDirs() []string {
	dirs, _ := filepath.Glob("/usr/lib/postgresql/*/bin")
	version := func(d string) int {
		v, _ := strconv.Atoi(filepath.Base(filepath.Dir(d)))
		return v
	}
	slices.SortFunc(dirs, func(a, b string) int { return cmp.Compare(version(b), version(a)) })
	return dirs
}

func hasServer(dir string) bool {
	for _, name := range []string{"initdb", "postgres"} {
		fi, err := os.Stat(filepath.Join(dir, name))
		if err != nil || fi.IsDir() || fi.Mode()&0o111 == 0 {
			return false
		}
	}
	return true
}
