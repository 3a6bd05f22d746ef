package daemon

import (
	"bytes"
	"context"
	"encoding/json"
	"errors"
	"strings"
	"testing"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/examples/scenario"
	"github.com/godwit-fusion/godwit/runtime/daemon/gatesim"
	"github.com/godwit-fusion/godwit/transport"
)

func dockPost(t testing.TB) *configs.Config {
	t.Helper()
	cfg, err := configs.Example("dock-post")
	if err != nil {
		t.Fatal(err)
	}
	return cfg
}

func replayBytes(t *testing.T, cfg *configs.Config, rec []byte) (tracks, health []byte, sum *Summary) {
	t.Helper()
	var tb, hb bytes.Buffer
	sum, err := Replay(context.Background(), cfg, bytes.NewReader(rec), ReplayOutput{Tracks: &tb, Health: &hb}, ReplayOptions{})
	if err != nil {
		t.Fatal(err)
	}
	return tb.Bytes(), hb.Bytes(), sum
}

func jsonLines(t *testing.T, b []byte) []map[string]any {
	t.Helper()
	var out []map[string]any
	for i, line := range strings.Split(strings.TrimRight(string(b), "\n"), "\n") {
		var m map[string]any
		d := json.NewDecoder(strings.NewReader(line))
		d.UseNumber()
		if err := d.Decode(&m); err != nil {
			t.Fatalf("line %d is not JSON (encoding/json): %v\n%s", i+1, err, line)
		}
		out = append(out, m)
	}
	return out
}

// DESIGN.md: the engine sees only recorded times, so a replay is
// bit-for-bit repeatable.
func TestReplayTwiceIsByteIdentical(t *testing.T) {
	cfg := dockPost(t)
	rec := gatesim.Recording(gatesim.Gate(cfg, 8*time.Second, 7))
	t1, h1, s1 := replayBytes(t, cfg, rec)
	t2, h2, s2 := replayBytes(t, cfg, rec)
	if len(t1) == 0 || !bytes.Equal(t1, t2) {
		t.Fatalf("tracks differ between two replays (%d and %d bytes)", len(t1), len(t2))
	}
	if !bytes.Equal(h1, h2) {
		t.Fatal("health differs between two replays")
	}
	if s1.String() != s2.String() {
		t.Fatalf("summaries differ:\n%s\n%s", s1, s2)
	}
}

// DESIGN.md: "a rejected message changes no track", and a reader reports a
// malformed line and goes on. Every decoder reason code is mixed in.
func TestReplayDirtyRecordingGivesCleanTracks(t *testing.T) {
	cfg := dockPost(t)
	msgs := gatesim.Gate(cfg, 8*time.Second, 3)
	clean, _, cs := replayBytes(t, cfg, gatesim.Recording(msgs))
	rec, mixed := gatesim.DirtyRecording(cfg, msgs, 7)
	dirty, health, ds := replayBytes(t, cfg, rec)
	if !bytes.Equal(clean, dirty) {
		t.Fatalf("tracks from the dirty recording differ from the clean one (%d vs %d bytes)", len(dirty), len(clean))
	}
	if ds.MalformedLines != int(mixed["malformed_line"]) || ds.MalformedLines == 0 {
		t.Errorf("malformed lines %d, mixed in %d", ds.MalformedLines, mixed["malformed_line"])
	}
	for _, code := range []string{"bad_json", "unknown_sensor", "bad_dims", "non_finite", "bad_cov",
		"time_implausible", "too_large", "bad_version"} {
		if mixed[code] == 0 {
			t.Fatalf("fixture mixes in no %s", code)
		}
		if ds.Rejected[code] != mixed[code] {
			t.Errorf("rejected %s: %d, mixed in %d", code, ds.Rejected[code], mixed[code])
		}
	}
	var bad uint64
	for code, n := range mixed {
		if code != "malformed_line" {
			bad += n
		}
	}
	if ds.Accepted != cs.Accepted || ds.Messages != cs.Messages+bad {
		t.Errorf("accepted %d of %d, clean %d of %d, %d bad mixed in", ds.Accepted, ds.Messages, cs.Accepted, cs.Messages, bad)
	}
	// The health message reports the same counts (DESIGN.md counters.rejected),
	// and, since gatesim sends every bad payload on the radar's own topic,
	// sensors.gate_radar.rejected is their total.
	hl := jsonLines(t, health)
	radar := hl[len(hl)-1]["sensors"].(map[string]any)["gate_radar"].(map[string]any)
	if got, _ := radar["rejected"].(json.Number).Int64(); uint64(got) != bad {
		t.Errorf("sensors.gate_radar.rejected = %v, want %d", radar["rejected"], bad)
	}
	last := hl[len(hl)-1]["counters"].(map[string]any)["rejected"].(map[string]any)
	for code, n := range mixed {
		if code == "malformed_line" {
			continue
		}
		if got, _ := last[code].(json.Number).Int64(); uint64(got) != n {
			t.Errorf("health counters.rejected.%s = %v, want %d", code, last[code], n)
		}
	}
}

// The final message is stamped at the latest measurement time (DESIGN.md
// replay contract), and the tracks follow the invented tractors.
func TestReplayFinalMessage(t *testing.T) {
	cfg := dockPost(t)
	msgs := gatesim.Gate(cfg, 8*time.Second, 11)
	var latest int64
	for _, m := range msgs {
		latest = max(latest, m.TNs)
	}
	tr, _, sum := replayBytes(t, cfg, gatesim.Recording(msgs))
	lines := jsonLines(t, tr)
	final := lines[len(lines)-1]
	if got, _ := final["t_ns"].(json.Number).Int64(); got != latest || sum.FinalTNs != latest {
		t.Fatalf("final message at %v (summary %d), latest measurement %d", final["t_ns"], sum.FinalTNs, latest)
	}
	// Seq counts the messages one by one (DESIGN.md tracks message).
	for i, l := range lines {
		if s, _ := l["seq"].(json.Number).Int64(); s != int64(i+1) {
			t.Fatalf("line %d has seq %d", i+1, s)
		}
	}
	// Truth of gatesim at the final stamp: tractor A from (−3, 8) at
	// (0.2, 4) m/s, tractor B from (4, 60) at (−0.1, −3.5) m/s.
	ts := float64(latest-gatesim.T0) * 1e-9
	truth := [][2]float64{gatesim.Tractors[0].At(ts), gatesim.Tractors[1].At(ts)}
	tracks := final["tracks"].([]any)
	for _, want := range truth {
		found := false
		for _, x := range tracks {
			tk := x.(map[string]any)
			pos := tk["pos"].([]any)
			px, _ := pos[0].(json.Number).Float64()
			py, _ := pos[1].(json.Number).Float64()
			// 1.5 m: several times the 0.2 m lidar s.d. (common practice
			// for a loose consistency check).
			if tk["status"] == "confirmed" && (px-want[0])*(px-want[0])+(py-want[1])*(py-want[1]) < 1.5*1.5 {
				found = true
			}
		}
		if !found {
			t.Errorf("no confirmed track within 1.5 m of the tractor at %v: %v", want, tracks)
		}
	}
	if sum.TracksConfirmed != 2 {
		t.Errorf("tracks confirmed %d, want the 2 tractors", sum.TracksConfirmed)
	}
	// With output.rate_hz 10 the stamps fall on multiples of 100 ms of the
	// recorded arrival clock (DESIGN.md output.rate_hz), before the final.
	for _, l := range lines[:len(lines)-1] {
		if s, _ := l["t_ns"].(json.Number).Int64(); s%100_000_000 != 0 {
			t.Fatalf("periodic message stamped %d, not on the 100 ms grid", s)
		}
	}
}

// rate_hz 0: one tracks message after every processed scan (DESIGN.md).
func TestReplayPerScanOutput(t *testing.T) {
	cfg := dockPost(t)
	cfg.Output.RateHz = 0
	msgs := gatesim.Gate(cfg, 3*time.Second, 5)
	tr, _, sum := replayBytes(t, cfg, gatesim.Recording(msgs))
	n := len(jsonLines(t, tr))
	want := int(sum.Accepted-sum.LateDropped) + 1 // one per scan, plus the final message
	if n != want {
		t.Fatalf("%d tracks messages for %d processed scans (+1 final)", n, want-1)
	}
}

// Entries on topics no sensor listens to are ignored, as live, not rejected.
func TestReplayIgnoresOtherTopics(t *testing.T) {
	cfg := dockPost(t)
	msgs := gatesim.Gate(cfg, 2*time.Second, 9)
	withTracks := append([]gatesim.Msg(nil), msgs...)
	withTracks = append(withTracks, gatesim.Msg{RxNs: msgs[len(msgs)-1].RxNs, Topic: cfg.Output.TracksTopic,
		Payload: []byte(`{"v":1,"vehicle":"dock-post-2","seq":1,"t_ns":1,"frame":"site","tracks":[]}`)})
	a, _, _ := replayBytes(t, cfg, gatesim.Recording(msgs))
	b, _, sum := replayBytes(t, cfg, gatesim.Recording(withTracks))
	if !bytes.Equal(a, b) || sum.OtherTopic != 1 || len(sum.Rejected) != 0 {
		t.Fatalf("other-topic entry changed the output or was counted as rejected: %+v", sum)
	}
}

func TestReplayBadRecording(t *testing.T) {
	cfg := dockPost(t)
	_, err := Replay(context.Background(), cfg, strings.NewReader(`{"godwit_recording":9,"created":"x"}`+"\n"), ReplayOutput{}, ReplayOptions{})
	if !errors.Is(err, transport.ErrRecordingVersion) {
		t.Fatalf("a recording of an unknown version: error %v", err)
	}
}

// TestReplayCountsWhatTheSceneLost: the simulator knows which messages it
// never delivered (the lidar's 1 % loss, the GNSS dropout); the health
// report's lost counts must add up to exactly that, while the radar and the
// camera, whose scans are only reordered by jitter, lose nothing and raise
// no messages_lost.
func TestReplayCountsWhatTheSceneLost(t *testing.T) {
	sc, err := scenario.Open("campus-shuttle")
	if err != nil {
		t.Fatal(err)
	}
	var rec, truth bytes.Buffer
	st, err := sc.Write(&rec, &truth, scenario.Options{})
	if err != nil {
		t.Fatal(err)
	}
	if st.Lost == 0 || st.OutOfOrder == 0 {
		t.Fatalf("scene stats %+v: the test needs both losses and reordering", st)
	}
	_, health, _ := replayBytes(t, sc.Config, rec.Bytes())
	lines := bytes.Split(bytes.TrimSpace(health), []byte("\n"))
	var last struct {
		Sensors map[string]struct {
			Lost uint64 `json:"lost"`
		} `json:"sensors"`
	}
	if err := json.Unmarshal(lines[len(lines)-1], &last); err != nil {
		t.Fatal(err)
	}
	var total uint64
	for name, s := range last.Sensors {
		total += s.Lost
		if (name == "front_radar" || name == "front_camera") && s.Lost != 0 {
			t.Errorf("%s: %d lost, but the scene only reorders its scans", name, s.Lost)
		}
	}
	if total != uint64(st.Lost) {
		t.Errorf("health counts %d lost in all, the scene lost %d (%+v)", total, st.Lost, last.Sensors)
	}
	for _, line := range lines {
		var h struct {
			Alerts []struct {
				Code   string `json:"code"`
				Sensor string `json:"sensor"`
			} `json:"alerts"`
		}
		if err := json.Unmarshal(line, &h); err != nil {
			t.Fatal(err)
		}
		for _, a := range h.Alerts {
			if a.Code == "messages_lost" && (a.Sensor == "front_radar" || a.Sensor == "front_camera") {
				t.Fatalf("messages_lost raised for %s, whose scans are only reordered: %+v", a.Sensor, a)
			}
		}
	}
}
