package testlock

import (
	"os"
	"os/exec"
	"testing"
	"time"
)

// While one process holds the lock, another's Exclusive waits until it is
// released.
func TestExclusiveWaitsForTheHolder(t *testing.T) {
	if os.Getenv("TESTLOCK_HOLD") != "" {
		Exclusive(t)
		os.WriteFile(os.Getenv("TESTLOCK_HOLD"), []byte("held"), 0o644)
		time.Sleep(500 * time.Millisecond)
		return
	}
	flag := t.TempDir() + "/held"
	cmd := exec.Command(os.Args[0], "-test.run", "^TestExclusiveWaitsForTheHolder$")
	cmd.Env = append(os.Environ(), "TESTLOCK_HOLD="+flag)
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
		t.Run("waiter", func(t *testing.T) { Exclusive(t) })
		close(done)
	}()
	<-done
	if waited := time.Since(t0); waited < 200*time.Millisecond {
		t.Errorf("took the lock after %v while the holder keeps it 500 ms", waited)
	}
}
