package pglocal

import "syscall"

// setParentDeathSignal makes the kernel send SIGINT to the postmaster when
// the thread that started it exits. SIGINT is PostgreSQL's fast shutdown, the
// same as `pg_ctl stop -m fast`: backends are told to quit and a shutdown
// checkpoint is written, which takes well under a second for a test-sized
// cluster. SIGQUIT (immediate shutdown) would skip the checkpoint and leave a
// persistent data directory needing crash recovery on its next start.
func setParentDeathSignal(attr *syscall.SysProcAttr) {
	attr.Pdeathsig = syscall.SIGINT
}
