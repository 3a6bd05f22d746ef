package main

import (
	"bytes"
	"os"
	"path/filepath"
	"strings"
	"testing"
)

func readOut(t *testing.T, dir string) (rec, truth []byte) {
	t.Helper()
	rec, err := os.ReadFile(filepath.Join(dir, "recording.jsonl"))
	if err != nil {
		t.Fatal(err)
	}
	truth, err = os.ReadFile(filepath.Join(dir, "truth.jsonl"))
	if err != nil {
		t.Fatal(err)
	}
	return rec, truth
}

// simulate writes both files, the same bytes for the same seed and other
// bytes for another (DESIGN.md: replay is deterministic; so is its input).
func TestSimulateWritesDeterministicFiles(t *testing.T) {
	a, b, c := t.TempDir(), t.TempDir(), t.TempDir()
	code, out, errs := runCmd(t, nil, "simulate", "--scenario", "crossing", "--out", a, "--seconds", "2")
	if code != exitOK {
		t.Fatalf("exit %d: %s", code, errs)
	}
	// crossing.yaml: step_ms 50, so 2 s make 40 truth lines.
	if !strings.Contains(out, "truth.jsonl: 40 lines") || !strings.Contains(out, "godwit replay --config configs/dock-post.yaml") {
		t.Fatalf("summary:\n%s", out)
	}
	runCmd(t, nil, "simulate", "--scenario", "crossing", "--out", b, "--seconds", "2")
	runCmd(t, nil, "simulate", "--scenario", "crossing", "--out", c, "--seconds", "2", "--seed", "99")
	ra, ta := readOut(t, a)
	rb, tb := readOut(t, b)
	rc, tc := readOut(t, c)
	if !bytes.Equal(ra, rb) || !bytes.Equal(ta, tb) {
		t.Fatal("two runs with the scenario's seed differ")
	}
	if bytes.Equal(ra, rc) || !bytes.Equal(ta, tc) {
		t.Fatal("--seed 99 should change the recording and keep the truth")
	}
	if !bytes.HasPrefix(ra, []byte(`{"godwit_recording":1,"created":"2026-03-02T08:00:00Z"`)) {
		t.Fatalf("header %q", ra[:min(len(ra), 80)])
	}
}

// A broken scenario file is bad usage: exit 2 with every file:line problem.
func TestSimulateBadScenarioExitsTwo(t *testing.T) {
	dir := t.TempDir()
	p := filepath.Join(dir, "yard.yaml")
	text := "config: dock-post\nduration_s: 5\nwind_ms: 3\ntargets:\n  - {id: t1, motion: cv, pos: [1, 2]}\n"
	if err := os.WriteFile(p, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	code, _, errs := runCmd(t, nil, "simulate", "--scenario", p, "--out", filepath.Join(dir, "out"))
	if code != exitUsage {
		t.Fatalf("exit %d, want %d", code, exitUsage)
	}
	for _, want := range []string{
		p + `:3: unknown key "wind_ms"`,
		p + ":5: targets[0] motion cv needs vel",
	} {
		if !strings.Contains(errs, want) {
			t.Errorf("stderr lacks %q:\n%s", want, errs)
		}
	}
	if _, err := os.Stat(filepath.Join(dir, "out")); err == nil {
		t.Error("a rejected scenario still created the output folder")
	}
}

func TestSimulateUsage(t *testing.T) {
	dir := t.TempDir()
	for _, args := range [][]string{
		{"simulate", "--out", dir},
		{"simulate", "--scenario", "crossing"},
		{"simulate", "--scenario", "no-such-scene", "--out", dir},
		{"simulate", "--scenario", "crossing", "--out", dir, "--seconds", "-3"},
		{"simulate", "--scenario", "crossing", "--out", dir, "--seconds", "7200"},
		{"simulate", "--scenario", "crossing", "--out", dir, "extra"},
	} {
		if code, _, errs := runCmd(t, nil, args...); code != exitUsage {
			t.Errorf("%v: exit %d, want %d (%s)", args, code, exitUsage, errs)
		}
	}
	// A run longer than a scenario may last is refused before anything is
	// written.
	long := filepath.Join(dir, "long")
	if code, _, _ := runCmd(t, nil, "simulate", "--scenario", "crossing", "--out", long, "--seconds", "7200"); code != exitUsage {
		t.Fatalf("--seconds 7200: exit %d", code)
	}
	if _, err := os.Stat(long); err == nil {
		t.Error("--seconds 7200 created the output folder")
	}
	code, out, _ := runCmd(t, nil, "simulate", "--help")
	if code != exitOK || !strings.Contains(out, "Examples:") || !strings.Contains(out, "campus-shuttle, crossing, dense, dock-post") {
		t.Fatalf("help (exit %d):\n%s", code, out)
	}
}
