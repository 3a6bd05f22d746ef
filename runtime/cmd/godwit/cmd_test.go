package main

import (
	"bytes"
	"context"
	"testing"
)

// runCmd runs one command line as main would and returns the exit code and
// both output streams.
func runCmd(t *testing.T, ctx context.Context, args ...string) (int, string, string) {
	t.Helper()
	if ctx == nil {
		ctx = context.Background()
	}
	var out, errb bytes.Buffer
	code := runContext(ctx, args, &out, &errb)
	return code, out.String(), errb.String()
}
