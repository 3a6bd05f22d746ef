package main

import (
	"fmt"
	"os"
	"runtime/pprof"
)

// startCPUProfile writes a CPU profile of this process to path until the
// returned stop is called ("" profiles nothing). For go tool pprof.
func startCPUProfile(path string) (stop func(), err error) {
	if path == "" {
		return func() {}, nil
	}
	fh, err := os.Create(path)
	if err != nil {
		return nil, fmt.Errorf("--cpuprofile: %w", err)
	}
	if err := pprof.StartCPUProfile(fh); err != nil {
		fh.Close()
		return nil, fmt.Errorf("--cpuprofile: %w", err)
	}
	return func() { pprof.StopCPUProfile(); fh.Close() }, nil
}
