package transport

import (
	"bytes"
	"encoding/json"
	"errors"
	"math"
	"os"
	"os/exec"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// sampleTracks is an invented yard-tractor scene: two tracks, one with a
// class, and an ego estimate.
func sampleTracks(n int) *TracksMsg {
	m := &TracksMsg{V: 1, Vehicle: "yard-tractor-03", Seq: 88, TNs: 1764626400150000000, Frame: "site",
		Ego: &Ego{Pos: [2]float64{0.5, -2.25}, Yaw: 0.1, Vel: [2]float64{1.5, 0}, PosCov: [4]float64{0.04, 0.001, 0.001, 0.05}}}
	for i := range n {
		f := float64(i)
		st := []float64{12.1 + f, -3.4, 1.2, 0.1, 0.05}
		cov := make([]float64, 25)
		for j := range 5 {
			cov[j*5+j] = 0.01 * (1 + f)
		}
		cov[1], cov[5] = 0.002, 0.002
		t := Track{ID: uint64(17 + i), Status: []string{"tentative", "confirmed", "coasting"}[i%3],
			Pos: [2]float64{st[0], st[1]}, Vel: [2]float64{1.2, 0.1}, PosCov: [4]float64{0.04, 0.001, 0.001, 0.05},
			Model: "ctrv", State: st, StateCov: cov, UpdatedNs: 1764626400140000000, Hits: 31, Misses: i % 2}
		if i%2 == 0 {
			t.Class = "cart"
		}
		m.Tracks = append(m.Tracks, t)
	}
	return m
}

func sampleHealth() *HealthMsg {
	return &HealthMsg{V: 1, Vehicle: "yard-tractor-03", TNs: 1764626400150000000, State: "degraded",
		Alerts: []Alert{{Code: "sensor_silent", Severity: "warning", Sensor: "front_camera", SinceNs: 1764626399000000000,
			Detail: "no message for 480 ms (period 66 ms)"}, {Code: "track_diverged", Track: 17, SinceNs: 1, Detail: `NIS "high"`}},
		Sensors: []SensorHealth{
			{Name: "front_radar", RateHz: 19.9, AgeMS: 35, NISOK: true},
			{Name: "front_camera", RateHz: 0, AgeMS: 480, Lost: 3, Rejected: 1, LateDropped: 2},
			{Name: "gnss", RateHz: 10, AgeMS: 12.5, NISOK: true},
		},
		Counters:  Counters{Rejected: []ReasonCount{{"bad_json", 3}, {"bad_cov", 1}}, LateDropped: 2},
		LatencyMS: Latency{P50: 1.2, P99: 4.8}}
}

// decodeOrdered returns the keys of the top-level JSON object in order.
func objectKeys(t *testing.T, b []byte) []string {
	t.Helper()
	dec := json.NewDecoder(bytes.NewReader(b))
	if tok, err := dec.Token(); err != nil || tok != json.Delim('{') {
		t.Fatalf("not an object: %v", err)
	}
	var keys []string
	for dec.More() {
		k, err := dec.Token()
		if err != nil {
			t.Fatal(err)
		}
		keys = append(keys, k.(string))
		var skip json.RawMessage
		if err := dec.Decode(&skip); err != nil {
			t.Fatal(err)
		}
	}
	return keys
}

// The wire structs below follow DESIGN.md v1; encoding/json is the
// reference decoder for the round trips.
type wireTrack struct {
	ID        uint64    `json:"id"`
	Status    string    `json:"status"`
	Pos       []float64 `json:"pos"`
	Vel       []float64 `json:"vel"`
	PosCov    []float64 `json:"pos_cov"`
	Model     string    `json:"model"`
	State     []float64 `json:"state"`
	StateCov  []float64 `json:"state_cov"`
	UpdatedNs int64     `json:"updated_ns"`
	Hits      int       `json:"hits"`
	Misses    int       `json:"misses"`
	Class     *string   `json:"class"`
}

type wireTracks struct {
	V       int         `json:"v"`
	Vehicle string      `json:"vehicle"`
	Seq     uint64      `json:"seq"`
	TNs     int64       `json:"t_ns"`
	Frame   string      `json:"frame"`
	Tracks  []wireTrack `json:"tracks"`
	Ego     *struct {
		Pos    []float64 `json:"pos"`
		Yaw    float64   `json:"yaw"`
		Vel    []float64 `json:"vel"`
		PosCov []float64 `json:"pos_cov"`
	} `json:"ego"`
}

func TestTracksRoundTrip(t *testing.T) {
	m := sampleTracks(3)
	b, err := AppendTracks(nil, m)
	if err != nil {
		t.Fatal(err)
	}
	var w wireTracks
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&w); err != nil {
		t.Fatalf("%v\n%s", err, b)
	}
	if w.V != 1 || w.Vehicle != m.Vehicle || w.Seq != m.Seq || w.TNs != m.TNs || w.Frame != "site" {
		t.Errorf("header %+v", w)
	}
	for i, got := range w.Tracks {
		want := m.Tracks[i]
		if got.ID != want.ID || got.Status != want.Status || !reflect.DeepEqual(got.Pos, want.Pos[:]) ||
			!reflect.DeepEqual(got.Vel, want.Vel[:]) || !reflect.DeepEqual(got.PosCov, want.PosCov[:]) ||
			got.Model != want.Model || !reflect.DeepEqual(got.State, want.State) ||
			!reflect.DeepEqual(got.StateCov, want.StateCov) || got.UpdatedNs != want.UpdatedNs ||
			got.Hits != want.Hits || got.Misses != want.Misses {
			t.Errorf("track %d: %+v, want %+v", i, got, want)
		}
		if (got.Class == nil) != (want.Class == "") || got.Class != nil && *got.Class != want.Class {
			t.Errorf("track %d class %v, want %q (omitted when empty)", i, got.Class, want.Class)
		}
	}
	if w.Ego == nil || w.Ego.Yaw != 0.1 || !reflect.DeepEqual(w.Ego.Pos, m.Ego.Pos[:]) || !reflect.DeepEqual(w.Ego.PosCov, m.Ego.PosCov[:]) {
		t.Errorf("ego %+v", w.Ego)
	}
	// Field order as shown in DESIGN.md.
	if k := objectKeys(t, b); !reflect.DeepEqual(k, []string{"v", "vehicle", "seq", "t_ns", "frame", "tracks", "ego"}) {
		t.Errorf("keys %v", k)
	}
	m.Ego = nil
	b, _ = AppendTracks(b[:0], m)
	if k := objectKeys(t, b); !reflect.DeepEqual(k, []string{"v", "vehicle", "seq", "t_ns", "frame", "tracks"}) {
		t.Errorf("without ego: keys %v", k)
	}
	if k := objectKeys(t, mustMarshalRaw(t, b, 0)); !reflect.DeepEqual(k, []string{"id", "status", "pos", "vel", "pos_cov",
		"model", "state", "state_cov", "updated_ns", "hits", "misses", "class"}) {
		t.Errorf("track keys %v", k)
	}
}

// mustMarshalRaw returns the raw bytes of tracks[i] of a tracks message.
func mustMarshalRaw(t *testing.T, b []byte, i int) []byte {
	t.Helper()
	var top struct {
		Tracks []json.RawMessage `json:"tracks"`
	}
	if err := json.Unmarshal(b, &top); err != nil {
		t.Fatal(err)
	}
	return top.Tracks[i]
}

func TestHealthRoundTrip(t *testing.T) {
	m := sampleHealth()
	b, err := AppendHealth(nil, m)
	if err != nil {
		t.Fatal(err)
	}
	var w struct {
		V       int    `json:"v"`
		Vehicle string `json:"vehicle"`
		TNs     int64  `json:"t_ns"`
		State   string `json:"state"`
		Alerts  []struct {
			Code     string `json:"code"`
			Sensor   string `json:"sensor"`
			SinceNs  int64  `json:"since_ns"`
			Detail   string `json:"detail"`
			Track    uint64 `json:"track"`
			Severity string `json:"severity"`
		} `json:"alerts"`
		Sensors map[string]struct {
			RateHz      float64 `json:"rate_hz"`
			AgeMS       float64 `json:"age_ms"`
			Lost        uint64  `json:"lost"`
			Rejected    uint64  `json:"rejected"`
			LateDropped uint64  `json:"late_dropped"`
			NISOK       bool    `json:"nis_ok"`
		} `json:"sensors"`
		Counters struct {
			Rejected    map[string]uint64 `json:"rejected"`
			LateDropped uint64            `json:"late_dropped"`
		} `json:"counters"`
		LatencyMS struct {
			P50 float64 `json:"p50"`
			P99 float64 `json:"p99"`
		} `json:"latency_ms"`
	}
	dec := json.NewDecoder(bytes.NewReader(b))
	dec.DisallowUnknownFields()
	if err := dec.Decode(&w); err != nil {
		t.Fatalf("%v\n%s", err, b)
	}
	if w.V != 1 || w.State != "degraded" || len(w.Alerts) != 2 || w.Alerts[0].Detail != m.Alerts[0].Detail ||
		w.Alerts[1].Detail != `NIS "high"` || w.Alerts[1].Track != 17 || w.Alerts[0].Sensor != "front_camera" {
		t.Errorf("%+v", w)
	}
	for _, s := range m.Sensors {
		g := w.Sensors[s.Name]
		if g.RateHz != s.RateHz || g.AgeMS != s.AgeMS || g.Lost != s.Lost || g.Rejected != s.Rejected ||
			g.LateDropped != s.LateDropped || g.NISOK != s.NISOK {
			t.Errorf("sensor %s: %+v, want %+v", s.Name, g, s)
		}
	}
	if w.Counters.Rejected["bad_json"] != 3 || w.Counters.Rejected["bad_cov"] != 1 || w.Counters.LateDropped != 2 {
		t.Errorf("counters %+v", w.Counters)
	}
	if w.LatencyMS.P50 != 1.2 || w.LatencyMS.P99 != 4.8 {
		t.Errorf("latency %+v", w.LatencyMS)
	}
	// sensors in configuration order, top-level keys as in DESIGN.md.
	var top map[string]json.RawMessage
	json.Unmarshal(b, &top)
	if k := objectKeys(t, top["sensors"]); !reflect.DeepEqual(k, []string{"front_radar", "front_camera", "gnss"}) {
		t.Errorf("sensor order %v", k)
	}
	if k := objectKeys(t, b); !reflect.DeepEqual(k, []string{"v", "vehicle", "t_ns", "state", "alerts", "sensors", "counters", "latency_ms"}) {
		t.Errorf("keys %v", k)
	}
}

func TestMeasurementEncodeDecodeRoundTrip(t *testing.T) {
	m := &Measurement{V: 1, Sensor: "front_radar", Seq: 1042, TNs: tExample, Dets: []Detection{
		{Dim: 3, Z: [3]float64{23.4, 0.12, -1.5}},
		{Dim: 3, Z: [3]float64{41.0, -0.30, 0.2}, HasR: true, R: [9]float64{0.09, 0, 0, 0, 0.0001, 0, 0, 0, 0.04},
			Class: "cart", Score: 0.8, HasScore: true},
		{Dim: 3, Z: [3]float64{math.SmallestNonzeroFloat64, math.MaxFloat64, -0.0}},
	}}
	b, err := AppendMeasurement(nil, m)
	if err != nil {
		t.Fatal(err)
	}
	d := newTestDecoder(t)
	var got Measurement
	if err := d.Decode(b, tArrival, &got); err != nil {
		t.Fatalf("%v\n%s", err, b)
	}
	got.SensorIdx = 0
	if !reflect.DeepEqual(&got, m) {
		t.Errorf("round trip:\n got %+v\nwant %+v", got, *m)
	}
	// encoding/json reads the same numbers (shortest round-trip formatting).
	var w struct {
		Dets []struct {
			Z []float64 `json:"z"`
		} `json:"dets"`
	}
	if err := json.Unmarshal(b, &w); err != nil {
		t.Fatal(err)
	}
	if w.Dets[2].Z[0] != math.SmallestNonzeroFloat64 || w.Dets[2].Z[1] != math.MaxFloat64 {
		t.Errorf("extremes %v", w.Dets[2].Z)
	}
}

func TestEncodersStayValidJSON(t *testing.T) {
	m := sampleTracks(2)
	m.Tracks[0].Pos[0] = math.NaN()
	m.Tracks[1].StateCov[3] = math.Inf(-1)
	m.Vehicle = "bad\x00name\xff\u2028\"\\"
	b, err := AppendTracks(nil, m)
	if !errors.Is(err, ErrNonFinite) {
		t.Errorf("err = %v, want ErrNonFinite", err)
	}
	if !json.Valid(b) {
		t.Fatalf("invalid JSON: %s", b)
	}
	var w wireTracks
	json.Unmarshal(b, &w)
	// encoding/json's own encoding of the same string is the reference.
	ref, _ := json.Marshal(m.Vehicle)
	var refStr string
	json.Unmarshal(ref, &refStr)
	if w.Vehicle != refStr {
		t.Errorf("vehicle %q, want %q", w.Vehicle, refStr)
	}
	h := sampleHealth()
	h.LatencyMS.P99 = math.Inf(1)
	hb, err := AppendHealth(nil, h)
	if !errors.Is(err, ErrNonFinite) || !json.Valid(hb) {
		t.Errorf("health: %v %s", err, hb)
	}
}

func TestEncodersNoAllocs(t *testing.T) {
	m := sampleTracks(50)
	h := sampleHealth()
	buf, _ := AppendTracks(nil, m)
	hbuf, _ := AppendHealth(nil, h)
	if a := testing.AllocsPerRun(100, func() { buf, _ = AppendTracks(buf[:0], m) }); a != 0 {
		t.Errorf("AppendTracks allocates %.1f", a)
	}
	if a := testing.AllocsPerRun(100, func() { hbuf, _ = AppendHealth(hbuf[:0], h) }); a != 0 {
		t.Errorf("AppendHealth allocates %.1f", a)
	}
}

// TestCheckV1 runs the project's contract checker on files the encoders and
// the recording writer produce.
func TestCheckV1(t *testing.T) {
	py, err := exec.LookPath("python3")
	if err != nil {
		t.Skip("python3 not found: check-v1 not run")
	}
	tool := filepath.Join("..", "..", "shared", "tools", "check-v1")
	if _, err := os.Stat(tool); err != nil {
		tool = "/work/shared/tools/check-v1"
		if _, err := os.Stat(tool); err != nil {
			t.Skip("check-v1 not found")
		}
	}
	dir := t.TempDir()
	var tracks, health, meas []byte
	for i := range 5 {
		m := sampleTracks(i * 3)
		if i == 4 {
			m.Ego = nil
		}
		tracks, _ = AppendTracks(tracks, m)
		tracks = append(tracks, '\n')
	}
	health, _ = AppendHealth(health, sampleHealth())
	health = append(health, '\n')
	h := sampleHealth()
	h.Alerts, h.Sensors, h.Counters.Rejected = nil, nil, nil
	health, _ = AppendHealth(health, h)
	health = append(health, '\n')
	meas, _ = AppendMeasurement(meas, &Measurement{Sensor: "front_radar", Seq: 1, TNs: tExample,
		Dets: []Detection{{Dim: 3, Z: [3]float64{1, 2, 3}, HasR: true, R: [9]float64{1, 0, 0, 0, 1, 0, 0, 0, 1}}}})
	meas = append(meas, '\n')
	meas, _ = AppendMeasurement(meas, &Measurement{Sensor: "gnss", Seq: 2, TNs: tExample})
	meas = append(meas, '\n')

	rec := filepath.Join(dir, "recording.jsonl")
	rw, err := CreateRecording(rec, RecordOptions{Note: "campus shuttle bench run"})
	if err != nil {
		t.Fatal(err)
	}
	rw.Write(tArrival, "shuttle-07/sensors/front_radar", 1, false, []byte(radarJSON))
	rw.Write(tArrival+1, "shuttle-07/sensors/front_radar", 0, true, []byte("not json"))
	rw.Write(tArrival+2, "shuttle-07/status", 1, true, []byte("online"))
	if err := rw.Close(); err != nil {
		t.Fatal(err)
	}

	for kind, data := range map[string][]byte{"tracks": tracks, "health": health, "measurement": meas} {
		p := filepath.Join(dir, kind+".jsonl")
		os.WriteFile(p, data, 0o644)
		runCheck(t, py, tool, kind, p)
	}
	runCheck(t, py, tool, "recording", rec)
}

func runCheck(t *testing.T, py, tool, kind, path string) {
	t.Helper()
	out, err := exec.Command(py, tool, kind, path).CombinedOutput()
	if err != nil || !strings.Contains(string(out), "conforms to v1") {
		t.Errorf("check-v1 %s: %v\n%s", kind, err, out)
	}
}

func BenchmarkEncodeTracks50(b *testing.B) {
	m := sampleTracks(50)
	buf, _ := AppendTracks(nil, m)
	b.SetBytes(int64(len(buf)))
	b.ReportAllocs()
	for b.Loop() {
		buf, _ = AppendTracks(buf[:0], m)
	}
}

func BenchmarkEncodeHealth(b *testing.B) {
	m := sampleHealth()
	buf, _ := AppendHealth(nil, m)
	b.ReportAllocs()
	for b.Loop() {
		buf, _ = AppendHealth(buf[:0], m)
	}
}
