package main

import (
	"bytes"
	"image/png"
	"os"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"go.uber.org/goleak"
)

// The demo command end to end, shortened (8 s of scene at 8× real time):
// exit 0, the summary table printed, every output written.
func TestDemoCommand(t *testing.T) {
	defer goleak.VerifyNone(t, goleak.IgnoreCurrent())
	dir := filepath.Join(t.TempDir(), "demo")
	code, stdout, stderr := runCmd(t, nil, "demo", "--out", dir, "--seconds", "8", "--speed", "8", "--seed", "3")
	if code != exitOK {
		t.Fatalf("demo: exit %d\n%s\n%s", code, stdout, stderr)
	}
	for _, row := range []string{"tracks confirmed", "GOSPA mean", "localisation part", "missed part", "false part",
		"raw detections GOSPA", "position RMSE", "NEES mean", "latency p50 / p99", "alerts raised", "seed 3"} {
		if !strings.Contains(stdout, row) {
			t.Errorf("the summary has no %q:\n%s", row, stdout)
		}
	}
	// Not a terminal: no progress bar on standard error.
	if strings.Contains(stderr, "%|") {
		t.Errorf("progress drawn on a non-terminal:\n%s", stderr)
	}
	for _, f := range []string{"report.html", "plan.png", "gospa.png", "tracks.jsonl", "health.jsonl", "summary.json", "recording.jsonl", "truth.jsonl"} {
		if _, err := os.Stat(filepath.Join(dir, f)); err != nil {
			t.Error(err)
		}
	}
	checkPageFiles(t, dir)
}

func TestDemoBadUsage(t *testing.T) {
	for _, args := range [][]string{{"--seconds", "-1"}, {"--speed", "-3"}, {"--scenario", "no-such-scene"}, {"extra"}} {
		code, _, stderr := runCmd(t, nil, append([]string{"demo", "--out", t.TempDir()}, args...)...)
		if code != exitUsage {
			t.Errorf("demo %v: exit %d, want %d\n%s", args, code, exitUsage, stderr)
		}
	}
}

var pageRef = regexp.MustCompile(`(?i)(?:src|href)\s*=\s*["']([^"']*)["']`)

// checkPageFiles: the PNGs in dir decode as PNG, and report.html refers
// only to files in dir.
func checkPageFiles(t *testing.T, dir string) {
	t.Helper()
	page, err := os.ReadFile(filepath.Join(dir, "report.html"))
	if err != nil {
		t.Fatal(err)
	}
	pngs, _ := filepath.Glob(filepath.Join(dir, "*.png"))
	if len(pngs) == 0 {
		t.Fatal("no PNG written")
	}
	for _, p := range pngs {
		b, _ := os.ReadFile(p)
		if _, err := png.Decode(bytes.NewReader(b)); err != nil {
			t.Errorf("%s: %v", p, err)
		}
	}
	for _, m := range pageRef.FindAllSubmatch(page, -1) {
		ref := string(m[1])
		if ref == "" || strings.HasPrefix(ref, "#") {
			continue
		}
		if strings.Contains(ref, "/") || strings.Contains(ref, ":") {
			t.Errorf("report.html refers to %q, outside its folder", ref)
			continue
		}
		if _, err := os.Stat(filepath.Join(dir, ref)); err != nil {
			t.Errorf("report.html refers to %q, which was not written", ref)
		}
	}
}
