package main

import (
	"encoding/json"
	"strings"
	"testing"

	"github.com/godwit-fusion/godwit/runtime/bench"
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

// The MQTT rows on the embedded broker: both paths deliver every message of
// the latency phase and report p50 ≤ p99.
func TestBenchMQTTEmbedded(t *testing.T) {
	if testing.Short() {
		t.Skip("MQTT bench skipped with -short")
	}
	code, out, errs := runCmd(t, nil, "bench", "--only", "mqtt", "--latency-time", "500ms", "--rate", "500", "--flood", "2000")
	if code != exitOK {
		t.Fatalf("exit %d, stderr %s", code, errs)
	}
	if n := strings.Count(out, "250/250"); n != 2 {
		t.Errorf("%d paths delivered 250 of 250 messages, want both:\n%s", n, out)
	}
	for _, want := range []string{"embedded tcp://", "raw paho pub → sub", "pub → godwit (rate_hz 0) → sub", "start→first msg"} {
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
