//go:build !linux

package filters_test

func threadCPUNanos() int64 { return -1 }
