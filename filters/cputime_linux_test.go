//go:build linux

package filters_test

import (
	"syscall"
	"unsafe"
)

// threadCPUNanos is the calling thread's CPU time (CLOCK_THREAD_CPUTIME_ID),
// so that benchmarks on a shared machine can report CPU time per operation
// beside the wall-clock ns/op.
func threadCPUNanos() int64 {
	var ts syscall.Timespec
	const clockThreadCPUTimeID = 3
	if _, _, e := syscall.Syscall(syscall.SYS_CLOCK_GETTIME, clockThreadCPUTimeID, uintptr(unsafe.Pointer(&ts)), 0); e != 0 {
		return -1
	}
	return ts.Nano()
}
