// Package testlock lets the heaviest timing-sensitive tests of different
// packages take turns. go test runs packages in parallel (one per core);
// on a 2-core machine a 10 s flood in one package starved a live end-to-end
// test in another, and each failed the other's timing. A test that floods
// the machine, or one that needs it, takes the lock first.
package testlock

import (
	"os"
	"path/filepath"
	"testing"
)

// Exclusive blocks until no other test process holds the lock, and holds
// it until t ends. Tests of one package run one at a time already unless
// they call t.Parallel; the lock is for tests in different packages.
func Exclusive(t testing.TB) {
	t.Helper()
	exclusiveAt(t, filepath.Join(os.TempDir(), "godwit-heavy-tests.lock"))
}

// exclusiveAt is Exclusive on the lock file at path.
func exclusiveAt(t testing.TB, path string) {
	t.Helper()
	f, err := os.OpenFile(path, os.O_CREATE|os.O_RDWR, 0o666)
	if err != nil {
		t.Logf("testlock: %v; running without the lock", err)
		return
	}
	if err := lock(f); err != nil {
		f.Close()
		t.Logf("testlock: %v; running without the lock", err)
		return
	}
	t.Cleanup(func() {
		_ = unlock(f)
		f.Close()
	})
}
