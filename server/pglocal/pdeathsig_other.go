//go:build !linux

package pglocal

import "syscall"

// setParentDeathSignal does nothing: only Linux has a parent-death signal
// that works like this, so elsewhere a postmaster outlives a caller that dies
// without calling Stop.
func setParentDeathSignal(*syscall.SysProcAttr) {}
