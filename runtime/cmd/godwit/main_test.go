package main

import (
	"bytes"
	"strings"
	"testing"
)

func TestVersionPrintsPlatform(t *testing.T) {
	root := newRootCmd()
	var out bytes.Buffer
	root.SetOut(&out)
	root.SetArgs([]string{"version"})
	if err := root.Execute(); err != nil {
		t.Fatal(err)
	}
	if !strings.HasPrefix(out.String(), "godwit ") || !strings.Contains(out.String(), "/") {
		t.Fatalf("version output %q", out.String())
	}
}

// Exit codes are a v1 contract (DESIGN.md): unknown flags are bad usage (2).
func TestBadUsageExitsTwo(t *testing.T) {
	if code := run([]string{"version", "--no-such-flag"}); code != exitUsage {
		t.Fatalf("exit %d, want %d", code, exitUsage)
	}
	if code := run([]string{"no-such-command"}); code != exitUsage {
		t.Fatalf("unknown command: exit %d, want %d", code, exitUsage)
	}
	if code := run([]string{"version", "extra-arg"}); code != exitUsage {
		t.Fatalf("extra argument: exit %d, want %d", code, exitUsage)
	}
}
