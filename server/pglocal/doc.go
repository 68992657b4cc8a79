// Package pglocal runs a private PostgreSQL cluster from the server binaries
// installed on the machine. Tests use it for a real database, `aftercast
// serve` uses it when no database URL is given, and so does the demo.
//
// It owns the cluster's life: initdb, a postmaster that listens only on
// 127.0.0.1 and on a socket directory of its own, the wait until it accepts
// connections, and shutdown. It creates no databases and runs no migrations;
// callers connect to [Cluster.URL].
//
// The postmaster is a direct child of the calling process. [Cluster.Stop]
// shuts it down, and on Linux the kernel asks it to shut down when the calling
// process dies without calling Stop. Files a dead process leaves behind in the
// temp directory are removed by a later [Start]. Because PostgreSQL refuses to
// run as root, a root caller runs the server programs as the postgres OS user.
//
// Every local user can connect as the superuser, without a password, for
// as long as the cluster runs. The package needs a Unix system, and only on
// Linux does the server stop by itself when its parent dies.
package pglocal
