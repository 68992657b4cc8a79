//go:build unix

package web_test

import (
	"os/exec"
	"syscall"
)

// ownGroup starts cmd in a process group of its own and makes cancelling
// it kill the whole group: chromium forks helpers that would outlive a
// kill of the parent alone.
func ownGroup(cmd *exec.Cmd) {
	cmd.SysProcAttr = &syscall.SysProcAttr{Setpgid: true}
	cmd.Cancel = func() error { return syscall.Kill(-cmd.Process.Pid, syscall.SIGKILL) }
}
