package mqtt

import "syscall"

// setQuickAck asks Linux to acknowledge received data at once (tcp(7),
// TCP_QUICKACK). Failure only costs latency, so it is ignored.
func setQuickAck(raw syscall.RawConn) {
	_ = raw.Control(func(fd uintptr) {
		_ = syscall.SetsockoptInt(int(fd), syscall.IPPROTO_TCP, syscall.TCP_QUICKACK, 1)
	})
}
