package daemon

import (
	"bytes"
	"encoding/json"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"strconv"
	"strings"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/runtime/daemon/gatesim"
)

// The rule is check-v1's recording(): a payload that is a JSON object
// (Python dict) with t_ns a JSON integer (Python int, bool excluded) and
// dets a JSON array (Python list); a repeated key keeps its last value
// (Python's json module, from memory: the dict keeps the last pair).
func TestMeasurementTNsFollowsTheChecker(t *testing.T) {
	cases := []struct {
		payload string
		want    int64
		ok      bool
	}{
		{`{"v":1,"sensor":"a","seq":1,"t_ns":1900000000000000000,"dets":[]}`, 1900000000000000000, true},
		{`{"dets":[{"z":[1,2]}],"t_ns":-5}`, -5, true},                   // order and sign do not matter
		{` {"t_ns" : 7 , "dets" : [ ] } `, 7, true},                      // JSON whitespace
		{`{"t\u005fns":8,"dets":[]}`, 8, true},                           // escaped name is the same key
		{`{"t_ns":1,"dets":[],"t_ns":9}`, 9, true},                       // last value wins
		{`{"t_ns":1,"dets":[],"t_ns":"9"}`, 0, false},                    // last value is a string
		{`{"t_ns":9223372036854775807,"dets":[]}`, math.MaxInt64, true},  // int64 edge
		{`{"t_ns":-9223372036854775808,"dets":[]}`, math.MinInt64, true}, // int64 edge
		{`{"t_ns":9223372036854775808,"dets":[]}`, 0, false},             // integer, but no int64 stamp
		{`{"t_ns":-0,"dets":[]}`, 0, true},                               // Python: int 0
		{`{"t_ns":7.0,"dets":[]}`, 0, false},                             // Python: float
		{`{"t_ns":7e3,"dets":[]}`, 0, false},                             // Python: float
		{`{"t_ns":true,"dets":[]}`, 0, false},                            // bool is excluded
		{`{"t_ns":7,"dets":{}}`, 0, false},                               // dets not a list
		{`{"t_ns":7,"dets":null}`, 0, false},                             // dets not a list
		{`{"t_ns":7}`, 0, false},                                         // no dets
		{`{"x":{"t_ns":7,"dets":[]}}`, 0, false},                         // nested object does not count
		{`{"s":"\"t_ns\":7,","dets":[],"t_ns":3}`, 3, true},              // key inside a string value
		{`[{"t_ns":7,"dets":[]}]`, 0, false},                             // not an object
		{`{"t_ns":7,"dets":[]`, 0, false},                                // not JSON
		{`{"t_ns":7,"dets":[NaN]}`, 0, false},                            // not strict JSON (written as payload_b64)
		{"", 0, false},
	}
	for _, c := range cases {
		got, ok := measurementTNs([]byte(c.payload))
		if got != c.want || ok != c.ok {
			t.Errorf("%s: got %d, %v; want %d, %v", c.payload, got, ok, c.want, c.ok)
		}
	}
}

// Not a panic on any prefix of a payload (bad input is an error value).
func TestMeasurementTNsPrefixes(t *testing.T) {
	p := `{"a":[1,{"b":"x\"y"}],"t_ns":12,"dets":[{"z":[1,2]}]}`
	for i := range len(p) {
		if _, ok := measurementTNs([]byte(p[:i])); ok {
			t.Errorf("prefix %q taken as a measurement", p[:i])
		}
	}
}

// checkV1ReplayOut writes a replay's output folder and runs the project's
// contract checker on it, skipping when python3 or the checker is absent.
func checkV1ReplayOut(t *testing.T, rec, tracks, health []byte, sum *Summary) {
	t.Helper()
	py, err := exec.LookPath("python3")
	if err != nil {
		t.Skip("python3 is not installed: skipping /work/shared/tools/check-v1 replay-out")
	}
	tool := "/work/shared/tools/check-v1"
	if _, err := os.Stat(tool); err != nil {
		t.Skipf("%s not found: skipping the v1 contract check", tool)
	}
	dir := t.TempDir()
	sj, err := json.Marshal(sum)
	if err != nil {
		t.Fatal(err)
	}
	for name, b := range map[string][]byte{"recording.jsonl": rec, "out/tracks.jsonl": tracks,
		"out/health.jsonl": health, "out/summary.json": sj} {
		path := filepath.Join(dir, name)
		if err := os.MkdirAll(filepath.Dir(path), 0o755); err != nil {
			t.Fatal(err)
		}
		if err := os.WriteFile(path, b, 0o644); err != nil {
			t.Fatal(err)
		}
	}
	res, err := exec.Command(py, tool, "replay-out", filepath.Join(dir, "out"), "--in", filepath.Join(dir, "recording.jsonl")).CombinedOutput()
	if err != nil || !strings.Contains(string(res), "conforms to v1") {
		t.Fatalf("check-v1 replay-out: %v\n%s", err, res)
	}
}

// DESIGN.md: "one final tracks message stamped at the latest measurement
// time", judged as check-v1 judges it: over every measurement-shaped
// payload of the recording. Here the newest one is refused by the decoder
// (bad_dims: a position_xy det with three values), or comes from a sensor
// the configuration does not have, on a topic nobody listens to.
func TestReplayFinalStampCountsRefusedMeasurements(t *testing.T) {
	cfg := dockPost(t)
	msgs := gatesim.Gate(cfg, 4*time.Second, 21)
	var latest, lastRx int64
	for _, m := range msgs {
		latest, lastRx = max(latest, m.TNs), max(lastRx, m.RxNs)
	}
	lidar, lidarTopic := "", ""
	for _, s := range cfg.Sensors {
		if s.Kind == "position_xy" {
			lidar, lidarTopic = s.Name, s.Topic
		}
	}
	if lidar == "" {
		t.Fatal("the dock post has no position_xy sensor")
	}
	late := latest + 70_000_000 // 70 ms after the newest accepted scan
	cases := []struct {
		name, topic, body, reason string
	}{
		{"bad_dims", lidarTopic,
			`{"v":1,"sensor":"` + lidar + `","seq":999,"t_ns":%T,"dets":[{"z":[1,2,3]}]}`, "bad_dims"},
		{"unconfigured sensor", "dock-post/sensors/roof_camera",
			`{"v":1,"sensor":"roof_camera","seq":1,"t_ns":%T,"dets":[]}`, ""},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			body := strings.ReplaceAll(c.body, "%T", strconv.FormatInt(late, 10))
			all := append(append([]gatesim.Msg(nil), msgs...),
				gatesim.Msg{RxNs: max(lastRx, late) + 3_000_000, Topic: c.topic, Payload: []byte(body)})
			rec := gatesim.Recording(all)
			tr, he, sum := replayBytes(t, cfg, rec)
			if c.reason != "" && sum.Rejected[c.reason] != 1 {
				t.Fatalf("the newest payload was not rejected as %s: %v", c.reason, sum.Rejected)
			}
			if c.reason == "" && sum.OtherTopic != 1 {
				t.Fatalf("the newest payload was not on an unheard topic: %+v", sum)
			}
			lines := jsonLines(t, tr)
			if got, _ := lines[len(lines)-1]["t_ns"].(json.Number).Int64(); got != late || sum.FinalTNs != late {
				t.Fatalf("final message at %d (summary %d), newest measurement-shaped payload at %d", got, sum.FinalTNs, late)
			}
			tr2, he2, _ := replayBytes(t, cfg, rec)
			if !bytes.Equal(tr, tr2) || !bytes.Equal(he, he2) {
				t.Fatal("two replays of the same recording differ")
			}
			checkV1ReplayOut(t, rec, tr, he, sum)
		})
	}
}

// Any bytes: measurementTNs never panics and agrees with encoding/json
// (the standard library's reader, as reference) read into a map, where a
// repeated key also keeps its last value. Seed corpus in
// testdata/fuzz/FuzzMeasurementTNs.
func FuzzMeasurementTNs(f *testing.F) {
	f.Add([]byte(`{"v":1,"sensor":"gate_lidar","seq":1,"t_ns":1900000000000000000,"dets":[{"z":[1,2]}]}`))
	f.Add([]byte(`{"t\u005fns":8,"dets":[],"t_ns":-9223372036854775808}`))
	f.Add([]byte(`{"s":"\"t_ns\":7,","dets":[[],{}],"t_ns":3e2}`))
	f.Fuzz(func(t *testing.T, b []byte) {
		got, ok := measurementTNs(b)
		want, wok := referenceTNs(b)
		if got != want || ok != wok {
			t.Fatalf("%q: got %d, %v; encoding/json reads %d, %v", b, got, ok, want, wok)
		}
	})
}

func referenceTNs(b []byte) (int64, bool) {
	var m map[string]json.RawMessage
	if !json.Valid(b) || json.Unmarshal(b, &m) != nil || m == nil {
		return 0, false
	}
	d := bytes.TrimSpace(m["dets"])
	if len(d) == 0 || d[0] != '[' {
		return 0, false
	}
	raw := string(bytes.TrimSpace(m["t_ns"]))
	if strings.ContainsAny(raw, ".eE") {
		return 0, false
	}
	v, err := strconv.ParseInt(raw, 10, 64)
	if err != nil {
		return 0, false
	}
	return v, true
}

// The cost the final stamp adds per recorded message (one radar scan of
// the dock post scene).
func BenchmarkMeasurementTNs(b *testing.B) {
	cfg := dockPost(b)
	msgs := gatesim.Gate(cfg, time.Second, 3)
	payload := msgs[len(msgs)/2].Payload
	b.SetBytes(int64(len(payload)))
	b.ReportAllocs()
	for b.Loop() {
		if _, ok := measurementTNs(payload); !ok {
			b.Fatal("not a measurement")
		}
	}
}
