package testlock

import (
	"os"
	"os/exec"
	"testing"
	"time"
)

// While one process holds the lock, another's Exclusive waits until it is
// released. The test uses a lock file of its own: the shared one may be held
// for many seconds by a heavy test of another package running meanwhile.
func TestExclusiveWaitsForTheHolder(t *testing.T) {
	if flag := os.Getenv("TESTLOCK_HOLD"); flag != "" {
		exclusiveAt(t, os.Getenv("TESTLOCK_FILE"))
		os.WriteFile(flag, []byte("held"), 0o644)
		time.Sleep(500 * time.Millisecond)
		return
	}
	dir := t.TempDir()
	flag, lockFile := dir+"/held", dir+"/test.lock"
	cmd := exec.Command(os.Args[0], "-test.run", "^TestExclusiveWaitsForTheHolder$")
	cmd.Env = append(os.Environ(), "TESTLOCK_HOLD="+flag, "TESTLOCK_FILE="+lockFile)
	if err := cmd.Start(); err != nil {
		t.Fatal(err)
	}
	defer cmd.Wait()
	for deadline := time.Now().Add(10 * time.Second); ; time.Sleep(5 * time.Millisecond) {
		if _, err := os.Stat(flag); err == nil {
			break
		}
		if time.Now().After(deadline) {
			t.Fatal("the holder never took the lock")
		}
	}
	t0 := time.Now()
	done := make(chan struct{})
	go func() {
		t.Run("waiter", func(t *testing.T) { exclusiveAt(t, lockFile) })
		close(done)
	}()
	<-done
	if waited := time.Since(t0); waited < 200*time.Millisecond {
		t.Errorf("took the lock after %v while the holder keeps it 500 ms", waited)
	}
}
