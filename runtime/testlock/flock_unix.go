//go:build unix

package testlock

import (
	"os"
	"syscall"
)

// flock(2): released when the process ends, however it ends.
func lock(f *os.File) error   { return syscall.Flock(int(f.Fd()), syscall.LOCK_EX) }
func unlock(f *os.File) error { return syscall.Flock(int(f.Fd()), syscall.LOCK_UN) }
