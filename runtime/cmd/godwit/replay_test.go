package main

import (
	"bytes"
	"encoding/json"
	"os"
	"os/exec"
	"path/filepath"
	"strings"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/daemon/gatesim"
)

const dockPostPath = "../../../configs/dock-post.yaml"

// writeGateRecording writes a gatesim recording of the dock-post example.
func writeGateRecording(t *testing.T, dir string, dirty bool) string {
	t.Helper()
	cfg, err := configs.Load(dockPostPath)
	if err != nil {
		t.Fatal(err)
	}
	msgs := gatesim.Gate(cfg, 6*time.Second, 21)
	rec := gatesim.Recording(msgs)
	name := "clean.jsonl"
	if dirty {
		rec, _ = gatesim.DirtyRecording(cfg, msgs, 5)
		name = "dirty.jsonl"
	}
	path := filepath.Join(dir, name)
	if err := os.WriteFile(path, rec, 0o644); err != nil {
		t.Fatal(err)
	}
	return path
}

// checkV1 runs the project's contract checker (standard-library Python) on
// a replay's output folder.
func checkV1(t *testing.T, out, rec string) {
	t.Helper()
	py, err := exec.LookPath("python3")
	if err != nil {
		t.Skip("python3 is not installed: skipping /work/shared/tools/check-v1 replay-out")
	}
	tool := "/work/shared/tools/check-v1"
	if _, err := os.Stat(tool); err != nil {
		t.Skipf("%s not found: skipping the v1 contract check", tool)
	}
	res, err := exec.Command(py, tool, "replay-out", out, "--in", rec).CombinedOutput()
	if err != nil {
		t.Fatalf("check-v1 replay-out %s --in %s: %v\n%s", out, rec, err, res)
	}
	if !strings.Contains(string(res), "conforms to v1") {
		t.Fatalf("check-v1: %s", res)
	}
}

func TestReplayCommand(t *testing.T) {
	dir := t.TempDir()
	clean := writeGateRecording(t, dir, false)
	dirty := writeGateRecording(t, dir, true)
	outs := map[string]string{}
	for _, run := range []struct{ name, rec string }{{"a", clean}, {"b", clean}, {"dirty", dirty}} {
		out := filepath.Join(dir, run.name)
		code, stdout, stderr := runCmd(t, nil, "replay", "--config", dockPostPath, "--in", run.rec, "--out", out)
		if code != exitOK {
			t.Fatalf("replay %s: exit %d\n%s", run.name, code, stderr)
		}
		if !strings.Contains(stdout, "tracks messages") || !strings.Contains(stdout, "rejected:") {
			t.Fatalf("replay printed no summary: %q", stdout)
		}
		outs[run.name] = out
		checkV1(t, out, run.rec)
	}
	read := func(name string) []byte {
		b, err := os.ReadFile(filepath.Join(outs[name], "tracks.jsonl"))
		if err != nil {
			t.Fatal(err)
		}
		return b
	}
	if a, b := read("a"), read("b"); len(a) == 0 || !bytes.Equal(a, b) {
		t.Fatal("two replays of one recording wrote different tracks.jsonl")
	}
	if !bytes.Equal(read("a"), read("dirty")) {
		t.Fatal("the dirty recording gave other tracks than the clean one")
	}
	var sum struct {
		Rejected       map[string]uint64 `json:"rejected"`
		MalformedLines int               `json:"malformed_lines"`
	}
	b, err := os.ReadFile(filepath.Join(outs["dirty"], "summary.json"))
	if err != nil {
		t.Fatal(err)
	}
	if err := json.Unmarshal(b, &sum); err != nil {
		t.Fatal(err)
	}
	if sum.MalformedLines == 0 || sum.Rejected["bad_json"] == 0 || sum.Rejected["too_large"] != 1 {
		t.Fatalf("dirty summary does not count the rejects: %s", b)
	}
}

// --speed 1 paces by the recorded arrival times but writes the same bytes.
func TestReplayCommandPaced(t *testing.T) {
	if testing.Short() {
		t.Skip("paced replay takes the recording's length in real time")
	}
	dir := t.TempDir()
	cfg, err := configs.Load(dockPostPath)
	if err != nil {
		t.Fatal(err)
	}
	rec := filepath.Join(dir, "short.jsonl")
	if err := os.WriteFile(rec, gatesim.Recording(gatesim.Gate(cfg, 700*time.Millisecond, 4)), 0o644); err != nil {
		t.Fatal(err)
	}
	fast, paced := filepath.Join(dir, "fast"), filepath.Join(dir, "paced")
	if code, _, e := runCmd(t, nil, "replay", "--config", dockPostPath, "--in", rec, "--out", fast); code != exitOK {
		t.Fatal(e)
	}
	if code, _, e := runCmd(t, nil, "replay", "--config", dockPostPath, "--in", rec, "--out", paced, "--speed", "1"); code != exitOK {
		t.Fatal(e)
	}
	a, _ := os.ReadFile(filepath.Join(fast, "tracks.jsonl"))
	b, _ := os.ReadFile(filepath.Join(paced, "tracks.jsonl"))
	if len(a) == 0 || !bytes.Equal(a, b) {
		t.Fatal("paced replay wrote other tracks than the fast one")
	}
}

func TestReplayCommandUsage(t *testing.T) {
	dir := t.TempDir()
	rec := writeGateRecording(t, dir, false)
	for _, args := range [][]string{
		{"replay", "--in", rec},              // no config
		{"replay", "--config", dockPostPath}, // no recording
		{"replay", "--config", dockPostPath, "--in", rec, "--speed", "-1"},
		{"replay", "--config", dockPostPath, "--in", filepath.Join(dir, "absent.jsonl")},
		{"replay", "--config", filepath.Join(dir, "absent.yaml"), "--in", rec},
	} {
		if code, _, _ := runCmd(t, nil, args...); code != exitUsage {
			t.Errorf("%v: exit %d, want %d", args, code, exitUsage)
		}
	}
	// A recording that cannot be read through is a runtime failure (exit 1).
	bad := filepath.Join(dir, "v9.jsonl")
	if err := os.WriteFile(bad, []byte(`{"godwit_recording":9,"created":"x"}`+"\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	if code, _, _ := runCmd(t, nil, "replay", "--config", dockPostPath, "--in", bad, "--out", filepath.Join(dir, "o")); code != exitRuntime {
		t.Errorf("unknown recording version: exit %d, want %d", code, exitRuntime)
	}
}

// Every shipped scenario of `godwit simulate` (its own faults included)
// replays with the configuration it names into output that conforms to v1,
// judged by the project's contract checker.
func TestReplaySimulatedScenarios(t *testing.T) {
	root := newRootCmd()
	if c, _, err := root.Find([]string{"simulate"}); err != nil || c.Name() != "simulate" {
		t.Skip("no simulate command in this build")
	}
	for _, sc := range []string{"dock-post", "campus-shuttle", "crossing", "dense"} {
		t.Run(sc, func(t *testing.T) {
			if testing.Short() && sc == "dense" {
				t.Skip("dense takes seconds of engine time")
			}
			dir := t.TempDir()
			if code, _, e := runCmd(t, nil, "simulate", "--scenario", sc, "--out", dir, "--seconds", "5"); code != exitOK {
				t.Skipf("simulate %s: exit %d: %s", sc, code, e)
			}
			rec := filepath.Join(dir, "recording.jsonl")
			head, err := os.ReadFile(rec)
			if err != nil {
				t.Fatal(err)
			}
			// The header note names the configuration the scenario is for.
			cfg := ""
			if i := bytes.Index(head, []byte("config ")); i >= 0 {
				cfg = strings.FieldsFunc(string(head[i+len("config "):]), func(r rune) bool { return r == ',' || r == '"' || r == ' ' })[0]
			}
			if cfg == "" {
				t.Skip("the recording header names no configuration")
			}
			out := filepath.Join(dir, "out")
			code, stdout, e := runCmd(t, nil, "replay", "--config", filepath.Join("..", "..", "..", "configs", cfg+".yaml"), "--in", rec, "--out", out)
			if code != exitOK {
				t.Fatalf("replay: exit %d: %s", code, e)
			}
			if strings.Contains(e, "no measurement") {
				t.Fatalf("nothing accepted: %s", stdout)
			}
			checkV1(t, out, rec)
		})
	}
}

// replay --truth on the shipped sample (examples/sample: 15 s of the
// campus-shuttle scene and its truth): the output still conforms to v1
// (check-v1 replay-out), summary.json keeps the replay's fields and adds the
// evaluation, the report is written, and the tracks beat the raw
// detections on GOSPA (the point of fusing them).
func TestReplayTruthSample(t *testing.T) {
	const rec, truth = "../../../examples/sample/recording.jsonl", "../../../examples/sample/truth.jsonl"
	out := filepath.Join(t.TempDir(), "out")
	code, stdout, stderr := runCmd(t, nil, "replay", "--config", "../../../configs/campus-shuttle.yaml",
		"--in", rec, "--truth", truth, "--out", out, "--log-level", "error")
	if code != exitOK {
		t.Fatalf("replay --truth: exit %d\n%s", code, stderr)
	}
	for _, row := range []string{"GOSPA mean", "position RMSE", "NEES mean", "latency p50 / p99", "report: "} {
		if !strings.Contains(stdout, row) {
			t.Errorf("no %q in the output:\n%s", row, stdout)
		}
	}
	checkV1(t, out, rec)
	checkPageFiles(t, out)
	b, err := os.ReadFile(filepath.Join(out, "summary.json"))
	if err != nil {
		t.Fatal(err)
	}
	var sum struct {
		TracksMessages *int `json:"tracks_messages"`
		Evaluation     *struct {
			Epochs int `json:"epochs"`
			GOSPA  struct {
				Mean *float64 `json:"mean"`
			} `json:"gospa"`
			Baseline []struct {
				Sensor string   `json:"sensor"`
				Mean   *float64 `json:"mean"`
			} `json:"baseline"`
			NIS []struct {
				Sensor string `json:"sensor"`
			} `json:"nis"`
		} `json:"evaluation"`
	}
	if err := json.Unmarshal(b, &sum); err != nil {
		t.Fatal(err)
	}
	if sum.TracksMessages == nil || sum.Evaluation == nil || sum.Evaluation.GOSPA.Mean == nil || sum.Evaluation.Epochs < 250 {
		t.Fatalf("summary.json lacks the replay fields or the evaluation:\n%s", b)
	}
	// Three tracking sensors (front_radar, front_camera, roof_lidar): each
	// has a baseline and NIS samples.
	if len(sum.Evaluation.Baseline) != 3 || len(sum.Evaluation.NIS) < 3 {
		t.Errorf("baseline %+v, NIS %+v: want the three tracking sensors", sum.Evaluation.Baseline, sum.Evaluation.NIS)
	}
	g := *sum.Evaluation.GOSPA.Mean
	for _, bl := range sum.Evaluation.Baseline {
		if bl.Mean == nil || !(g < *bl.Mean) {
			t.Errorf("tracks GOSPA %.3g m, raw %s detections %v: tracks must be lower", g, bl.Sensor, bl.Mean)
		}
	}
}

func TestReplayBadTruth(t *testing.T) {
	dir := t.TempDir()
	bad := filepath.Join(dir, "truth.jsonl")
	if err := os.WriteFile(bad, []byte("{\"t_ns\":5,\"objects\":[]}\n{\"t_ns\":4,\"objects\":[]}\n"), 0o644); err != nil {
		t.Fatal(err)
	}
	for _, truth := range []string{bad, filepath.Join(dir, "missing.jsonl")} {
		code, _, stderr := runCmd(t, nil, "replay", "--config", "../../../configs/campus-shuttle.yaml",
			"--in", "../../../examples/sample/recording.jsonl", "--truth", truth, "--out", filepath.Join(dir, "out"))
		if code != exitUsage || !strings.Contains(stderr, "truth") {
			t.Errorf("--truth %s: exit %d, want %d with the file named\n%s", truth, code, exitUsage, stderr)
		}
	}
}
