package main

import (
	"encoding/json"
	"os/exec"
	"path/filepath"
	"regexp"
	"strings"
	"testing"

	"github.com/godwit-fusion/godwit/runtime/bench"
	"github.com/godwit-fusion/godwit/runtime/testlock"
)

// bench --json prints a report a machine can read; a short filter-only run
// keeps the test quick (the full run is for people, see BENCHMARKS.md).
func TestBenchJSON(t *testing.T) {
	code, out, errs := runCmd(t, nil, "bench", "--only", "filter", "--filter-time", "5ms", "--json")
	if code != exitOK {
		t.Fatalf("exit %d, stderr %s", code, errs)
	}
	var rep bench.Report
	if err := json.Unmarshal([]byte(out), &rep); err != nil {
		t.Fatalf("not JSON: %v\n%s", err, out)
	}
	if len(rep.Rows) != 3 || len(rep.Errors) != 0 {
		t.Fatalf("rows %d errors %v, want the 3 filter rows", len(rep.Rows), rep.Errors)
	}
	for _, r := range rep.Rows {
		if r.Section != "filter" {
			t.Errorf("row %q in section %q", r.Name, r.Section)
		}
		if v, ok := r.Get("ratio"); !ok || !(v > 0) {
			t.Errorf("row %q: ratio %v", r.Name, v)
		}
	}
	if rep.Broker != "" {
		t.Errorf("broker %q started for a run without the mqtt section", rep.Broker)
	}
}

// The MQTT rows on the embedded broker: every path delivers every message
// of the latency phase, and the sustained-rate search runs.
func TestBenchMQTTEmbedded(t *testing.T) {
	testlock.Exclusive(t) // floods the broker: not beside another package's live test
	if testing.Short() {
		t.Skip("MQTT bench skipped with -short")
	}
	code, out, errs := runCmd(t, nil, "bench", "--only", "mqtt", "--in-process", "--latency-time", "500ms", "--rate", "500", "--flood", "2000", "--trial-time", "100ms")
	if code != exitOK {
		t.Fatalf("exit %d, stderr %s", code, errs)
	}
	// The raw path, the godwit path (every scan reflected in a tracks
	// message) and the raw path at the tracks messages' size.
	if n := strings.Count(out, "250/250"); n != 3 {
		t.Errorf("%d paths delivered 250 of 250 messages, want all 3:\n%s", n, out)
	}
	for _, want := range []string{"embedded tcp://", "raw paho pub → sub", "pub → godwit (rate_hz 0) → sub", "start→first msg",
		"sustained", "ratio", "B msgs", "godwit ran in the bench's process"} {
		if !strings.Contains(out, want) {
			t.Errorf("output misses %q:\n%s", want, out)
		}
	}
}

func TestBenchBadUsage(t *testing.T) {
	for _, args := range [][]string{
		{"bench", "--only", "gpu"},
		{"bench", "--qos", "3"},
		{"bench", "--rate", "-1"},
		{"bench", "extra"},
	} {
		if code, _, _ := runCmd(t, nil, args...); code != exitUsage {
			t.Errorf("%v: exit %d, want %d", args, code, exitUsage)
		}
	}
}

// The built binary's bench runs the godwit path as "godwit run" in its own
// process (the default outside tests) and reads its counters from the
// child's /metrics; the process row starts it the same way.
func TestBenchMQTTOwnProcess(t *testing.T) {
	testlock.Exclusive(t) // floods the broker: not beside another package's live test
	if testing.Short() {
		t.Skip("builds the binary")
	}
	bin := filepath.Join(t.TempDir(), "godwit")
	if out, err := exec.Command("go", "build", "-o", bin, ".").CombinedOutput(); err != nil {
		t.Skipf("cannot build the binary here: %v\n%s", err, out)
	}
	out, err := exec.Command(bin, "bench", "--only", "mqtt,process", "--latency-time", "500ms", "--rate", "500",
		"--flood", "2000", "--trial-time", "100ms").CombinedOutput()
	if err != nil {
		t.Fatalf("bench: %v\n%s", err, out)
	}
	s := string(out)
	if n := strings.Count(s, "250/250"); n != 3 {
		t.Errorf("%d paths delivered 250 of 250 messages, want all 3:\n%s", n, s)
	}
	// The flood's count comes from the child's Prometheus counters.
	if m := regexp.MustCompile(`(\d+) ingested`).FindStringSubmatch(s); m == nil || m[1] == "0" {
		t.Errorf("no messages counted as ingested by the child:\n%s", s)
	}
	for _, want := range []string{"godwit ran in its own process (godwit run)", "ratio", "godwit run: start and memory", "RSS"} {
		if !strings.Contains(s, want) {
			t.Errorf("output misses %q:\n%s", want, s)
		}
	}
}
