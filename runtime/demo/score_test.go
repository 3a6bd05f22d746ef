package demo

import (
	"encoding/json"
	"fmt"
	"math"
	"reflect"
	"testing"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/examples/scenario"
	"github.com/godwit-fusion/godwit/runtime/eval"
	"github.com/valyala/fastjson"
)

// sensorPoint must invert the simulator's forward measurement models
// (examples/scenario.Ideal, written from DESIGN.md's models independently
// of this package) for every tracking sensor kind of the shipped configs.
func TestSensorPointInvertsIdeal(t *testing.T) {
	for _, name := range []string{"campus-shuttle", "dock-post"} {
		cfg, err := configs.Example(name)
		if err != nil {
			t.Fatal(err)
		}
		for i := range cfg.Sensors {
			cs := &cfg.Sensors[i]
			if configs.IsEgoKind(cs.Kind) {
				continue
			}
			sp := scenario.SensorPose{Pos: scenario.Vec{X: 1, Y: -2}, Yaw: 0.3}
			for _, p := range []scenario.Vec{{X: 20, Y: 3}, {X: 8, Y: -4}, {X: 45, Y: 10}} {
				z, local := scenario.Ideal(cs, sp, p, scenario.Vec{X: 1, Y: 0.5})
				x, y := sensorPoint(cs, z[0], z[1])
				if math.Abs(x-local.X) > 1e-9 || math.Abs(y-local.Y) > 1e-9 {
					t.Errorf("%s %s (%s): z %v → (%g, %g), want the sensor-frame point (%g, %g)",
						name, cs.Name, cs.Kind, z[:2], x, y, local.X, local.Y)
				}
			}
		}
	}
}

// Linear interpolation of the ego pose between truth lines, the yaw along
// the shorter arc (common practice). Check values worked by hand.
func TestPlatformAt(t *testing.T) {
	cfg, err := configs.Example("campus-shuttle")
	if err != nil {
		t.Fatal(err)
	}
	truth := []eval.TruthLine{
		{TNs: 1000, Ego: &eval.TruthEgo{Pos: [2]float64{0, 0}, Yaw: 3.0}},
		{TNs: 1100, Ego: &eval.TruthEgo{Pos: [2]float64{1, 2}, Yaw: -3.0}},
	}
	x, y, yaw, ok := platformAt(cfg, truth, 1025)
	// A quarter of the way; the shorter arc from 3 to −3 rad crosses π and
	// is 2π − 6 rad long.
	if !ok || math.Abs(x-0.25) > 1e-12 || math.Abs(y-0.5) > 1e-12 || math.Abs(yaw-(3+0.25*(2*math.Pi-6))) > 1e-12 {
		t.Errorf("platformAt(1025) = %g, %g, %g, %v; want 0.25, 0.5, %g", x, y, yaw, ok, 3+0.25*(2*math.Pi-6))
	}
	if _, _, _, ok := platformAt(cfg, truth, 999); ok {
		t.Error("a time before the truth has a pose")
	}
	if _, _, _, ok := platformAt(cfg, truth, 1101); ok {
		t.Error("a time after the truth has a pose")
	}
	if x, _, _, ok := platformAt(cfg, truth, 1100); !ok || x != 1 {
		t.Errorf("platformAt at a truth line: %g, %v", x, ok)
	}
}

const tBase = int64(1_772_438_400_000_000_000) // 2026-03-02T08:00:00Z, a multiple of every output period

func lidarMsg(seq int, tNs int64, dets string) []byte {
	return fmt.Appendf(nil, `{"v":1,"sensor":"gate_lidar","seq":%d,"t_ns":%d,"dets":[%s]}`, seq, tNs, dets)
}

// The raw-detection baseline on the dock-post configuration (fixed post at
// the origin facing north, yaw 90°; gate_lidar position_xy mounted at
// (0, −0.5)): the lidar sits at site (0.5, 0) looking north, so an object at
// site (3, 20) is z = [20, −2.5] (20 m ahead, 2.5 m to the right). Worked by
// hand: a scan with exactly that detection has GOSPA 0; one with an extra
// detection 40 m ahead has one false point, GOSPA = (c^p/α)^(1/p) = √(25/2)
// with c = 5, p = 2, α = 2 (Rahmathullah, García-Fernández & Svensson 2017,
// eq. 2). The mean over the two scans is √12.5 / 2.
func TestBaselineHandWorked(t *testing.T) {
	cfg, err := configs.Example("dock-post")
	if err != nil {
		t.Fatal(err)
	}
	obj := []eval.TruthObject{{ID: "t1", Pos: [2]float64{3, 20}}}
	truth := []eval.TruthLine{{TNs: tBase, Objects: obj}, {TNs: tBase + 100e6, Objects: obj}}
	topic := cfg.Sensors[1].Topic
	recs := []Record{
		{Topic: topic, RxNs: tBase + 10e6, Payload: lidarMsg(1, tBase, `{"z":[20,-2.5]}`)},
		{Topic: topic, RxNs: tBase + 110e6, Payload: lidarMsg(2, tBase+100e6, `{"z":[20,-2.5]},{"z":[40,0]}`)},
		{Topic: topic, RxNs: tBase + 120e6, Payload: []byte(`{"v":1,"sensor":"gate_lidar","seq":3,"t_ns":`)}, // malformed: skipped
		{Topic: "elsewhere", RxNs: tBase + 130e6, Payload: lidarMsg(4, tBase+100e6, `{"z":[1,1]}`)},          // not the sensor's topic
	}
	ev, err := eval.New(truth, eval.Options{})
	if err != nil {
		t.Fatal(err)
	}
	var x Extras
	if err := AddBaseline(ev, cfg, truth, recs, &x); err != nil {
		t.Fatal(err)
	}
	s := ev.Summary()
	if x.BaselineScans != 2 || x.BaselineSkipped != 1 || len(s.Baseline) != 1 {
		t.Fatalf("scans %d, skipped %d, baseline %+v; want 2 scans of gate_lidar and 1 skipped", x.BaselineScans, x.BaselineSkipped, s.Baseline)
	}
	b := s.Baseline[0]
	if want := math.Sqrt(12.5) / 2; b.Sensor != "gate_lidar" || b.Scans != 2 || math.Abs(float64(b.Mean)-want) > 1e-9 {
		t.Errorf("baseline %+v, want gate_lidar, 2 scans, mean %g", b, want)
	}
	if want := 12.5 / 2; math.Abs(float64(b.False)-want) > 1e-9 || math.Abs(float64(b.Loc)) > 1e-9 {
		t.Errorf("false part %g, localisation %g; want %g and 0", float64(b.False), float64(b.Loc), want)
	}
}

// The recorded-time latency on dock-post (output.rate_hz 10, period 100 ms,
// ticks at the multiples of 100 ms): a message arriving at +10 ms is in the
// tracks message of the +100 ms tick, which replay runs when the next
// arrival (+130 ms) shows the clock has passed it: 90 ms. The +130 ms
// message waits for the +200 ms tick: 70 ms. The last message has no later
// arrival to run a tick, so no sample (worked by hand from the replay's
// clock rule, runtime/daemon.Replay).
func TestRecordedLatencyHandWorked(t *testing.T) {
	cfg, err := configs.Example("dock-post")
	if err != nil {
		t.Fatal(err)
	}
	topic := cfg.Sensors[1].Topic
	var recs []Record
	for i, rx := range []int64{10e6, 130e6, 260e6} {
		recs = append(recs, Record{Topic: topic, RxNs: tBase + rx, Payload: lidarMsg(i+1, tBase+rx-5e6, `{"z":[20,-2.5]}`)})
	}
	ev, err := eval.New([]eval.TruthLine{{TNs: tBase}}, eval.Options{})
	if err != nil {
		t.Fatal(err)
	}
	var x Extras
	if err := AddNISAndLatency(ev, cfg, recs, true, &x); err != nil {
		t.Fatal(err)
	}
	if got, want := ev.Latencies(), []float64{90, 70}; !reflect.DeepEqual(got, want) {
		t.Errorf("latencies %v ms, want %v", got, want)
	}
}

func TestShiftTNs(t *testing.T) {
	var p fastjson.Parser
	var a fastjson.Arena
	in := []byte(`{"v":1,"sensor":"front_radar","seq":7,"t_ns":1000,"dets":[{"z":[1.5,0.25,-3]}]}`)
	out, tNs, ok := shiftTNs(&p, &a, nil, in, 234)
	if !ok || tNs != 1234 {
		t.Fatalf("shift: %s, %d, %v", out, tNs, ok)
	}
	var got, want map[string]any
	if err := json.Unmarshal(out, &got); err != nil {
		t.Fatal(err)
	}
	_ = json.Unmarshal(in, &want)
	want["t_ns"] = 1234.0
	if !reflect.DeepEqual(got, want) {
		t.Errorf("shifted %s, want only t_ns changed", out)
	}
	for _, bad := range []string{`{"v":1,"t_ns":`, `[1,2]`, `{"v":1,"t_ns":"12"}`, `{"t_ns":9223372036854775800}`} {
		if _, _, ok := shiftTNs(&p, &a, nil, []byte(bad), 234); ok {
			t.Errorf("%s was shifted", bad)
		}
	}
}

func TestHealthLogDistinctAlerts(t *testing.T) {
	var h HealthLog
	h.Add([]byte(`{"v":1,"state":"degraded","alerts":[{"code":"sensor_silent","sensor":"front_camera","since_ns":5}],"latency_ms":{"p50":1.5,"p99":4}}`))
	h.Add([]byte(`{"v":1,"state":"degraded","alerts":[{"code":"sensor_silent","sensor":"front_camera","since_ns":5},{"code":"messages_lost","sensor":"gnss"}]}`))
	h.Add([]byte(`not json`))
	h.Add([]byte(`{"v":1,"state":"ok","alerts":[],"latency_ms":{"p50":2,"p99":6}}`))
	if want := []string{"sensor_silent front_camera", "messages_lost gnss"}; !reflect.DeepEqual(h.Alerts(), want) {
		t.Errorf("alerts %v, want %v", h.Alerts(), want)
	}
	if h.Messages != 3 || h.Malformed != 1 || h.LastState != "ok" || h.LastP50MS != 2 || h.LastP99MS != 6 {
		t.Errorf("log %+v", h)
	}
}
