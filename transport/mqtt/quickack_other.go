//go:build !linux

package mqtt

import "syscall"

// setQuickAck is Linux-only (TCP_QUICKACK); elsewhere the kernel's
// delayed acknowledgements stay as they are.
func setQuickAck(syscall.RawConn) {}
