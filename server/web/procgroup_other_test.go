//go:build !unix

package web_test

import "os/exec"

// ownGroup leaves cmd as it is where there are no process groups; the
// default cancel kills the browser process itself.
func ownGroup(cmd *exec.Cmd) {}
