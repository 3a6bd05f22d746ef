package configs

import (
	"reflect"
	"strings"
	"testing"

	"github.com/godwit-fusion/godwit/configs/yamlstrict"
)

const minimal = `vehicle: yt-3
sensors:
  - {name: lidar, kind: position_xy, noise_sd: [0.1, 0.1], period_ms: 100}
`

// TestDefaults: a minimal file gets the defaults the design fixes. The
// expected values are DESIGN.md's v1 configuration example (qos 1, ctrv
// srukf, accel_sd 1.5, yaw_accel_sd 0.6, gate_prob 0.999, confirm 3 of 5,
// delete_misses 6, max_tracks 512, lag 300 ms synced, godwit/<vehicle>/...
// topics, rate_hz 20, metrics 127.0.0.1:9464, health 3 / 500 / 2000), the
// loopback MQTT port 1883 (IANA registration for MQTT), and the health keys
// this project adds beyond DESIGN.md (REFERENCE.md: event hold 1000 ms,
// position s.d. bound 10 m, step budget 25 ms, clock jump 50 ms).
func TestDefaults(t *testing.T) {
	c, err := Parse("min.yaml", []byte(minimal))
	if err != nil {
		t.Fatal(err)
	}
	want := Config{
		Vehicle:  "yt-3",
		Broker:   Broker{URL: "tcp://127.0.0.1:1883", ClientID: "godwit-yt-3", QoS: 1},
		Platform: Platform{Motion: "fixed"},
		Sensors: []Sensor{{
			Name: "lidar", Kind: "position_xy", Topic: "yt-3/sensors/lidar",
			NoiseSD: []float64{0.1, 0.1}, PeriodMS: 100, MaxAgeMS: 500,
			FOVDeg: 360, PDetect: 0.9, ClutterPerScan: 1,
		}},
		Tracker: Tracker{Motion: "ctrv", Filter: "srukf", AccelSD: 1.5, YawAccelSD: 0.6,
			GateProb: 0.999, Confirm: Confirm{Hits: 3, Of: 5}, DeleteMisses: 6, MaxTracks: 512},
		Timing: Timing{LagMS: 300, Clock: "synced"},
		Output: Output{TracksTopic: "godwit/yt-3/tracks", HealthTopic: "godwit/yt-3/health",
			StatusTopic: "godwit/yt-3/status", RateHz: 20},
		Metrics: Metrics{Listen: "127.0.0.1:9464"},
		Health: Health{SilentPeriods: 3, RaiseMS: 500, ClearMS: 2000, EventHoldMS: 1000, MaxPosSDM: 10,
			StepBudgetMS: 25, ClockJumpMS: 50},
		Limits: Limits{MaxPayloadBytes: 65536, QueueLength: 1024, TimeWindowMS: 10000},
	}
	if !reflect.DeepEqual(*c, want) {
		t.Errorf("defaults:\n got %+v\nwant %+v", *c, want)
	}
}

// TestExplicitZeroKept: a key given as 0 or "" is the user's choice, not a
// missing value (QoS 0 is valid MQTT; rate_hz 0 means after every scan;
// an empty metrics.listen turns metrics off).
func TestExplicitZeroKept(t *testing.T) {
	text := minimal + `broker: {qos: 0}
output: {rate_hz: 0}
metrics: {listen: ""}
timing: {lag_ms: 0}
`
	c, err := Parse("zero.yaml", []byte(text))
	if err != nil {
		t.Fatal(err)
	}
	if c.Broker.QoS != 0 || c.Output.RateHz != 0 || c.Metrics.Listen != "" || c.Timing.LagMS != 0 {
		t.Errorf("explicit zeros overwritten: qos %d rate %g listen %q lag %g",
			c.Broker.QoS, c.Output.RateHz, c.Metrics.Listen, c.Timing.LagMS)
	}
}

// TestNullMeansDefault: an empty YAML value (key: or key: ~) is "not
// given" (YAML 1.2 §10.2.1.1: null), so the default applies.
func TestNullMeansDefault(t *testing.T) {
	c, err := Parse("null.yaml", []byte(minimal+"broker: {qos: ~}\ntiming:\n"))
	if err != nil {
		t.Fatal(err)
	}
	if c.Broker.QoS != 1 || c.Timing.LagMS != 300 {
		t.Errorf("qos %d lag %g, want the defaults 1 and 300", c.Broker.QoS, c.Timing.LagMS)
	}
}

// TestDerivedDefaults: max_age_ms follows each sensor's period, topics
// follow vehicle and sensor name; ego sensors get no tracking defaults.
func TestDerivedDefaults(t *testing.T) {
	text := `vehicle: cart-2
platform: {motion: moving}
sensors:
  - {name: radar, kind: range_bearing, noise_sd: [0.5, 0.02], period_ms: 40}
  - {name: odo, kind: odometry, noise_sd: [0.05, 0.01], period_ms: 10}
`
	c, err := Parse("d.yaml", []byte(text))
	if err != nil {
		t.Fatal(err)
	}
	r, o := c.Sensors[0], c.Sensors[1]
	if r.MaxAgeMS != 200 || o.MaxAgeMS != 50 {
		t.Errorf("max_age_ms %g, %g; want 5 × period = 200, 50", r.MaxAgeMS, o.MaxAgeMS)
	}
	if r.Topic != "cart-2/sensors/radar" || o.Topic != "cart-2/sensors/odo" {
		t.Errorf("topics %q, %q", r.Topic, o.Topic)
	}
	if o.FOVDeg != 0 || o.PDetect != 0 || o.ClutterPerScan != 0 {
		t.Errorf("ego sensor got tracking defaults: %+v", o)
	}
}

// TestMergeKeys: YAML merge keys (yaml.org/type/merge.html) share settings
// between sensors; keys written beside the merge win.
func TestMergeKeys(t *testing.T) {
	text := `vehicle: yt-3
sensors:
  - &lidar {name: left_lidar, kind: position_xy, noise_sd: [0.1, 0.1], period_ms: 100, fov_deg: 180}
  - <<: *lidar
    name: right_lidar
    mount: {yaw_deg: 180}
`
	c, err := Parse("merge.yaml", []byte(text))
	if err != nil {
		t.Fatal(err)
	}
	s := c.Sensors[1]
	if s.Name != "right_lidar" || s.Kind != "position_xy" || s.FOVDeg != 180 || s.Mount.YawDeg != 180 || len(s.NoiseSD) != 2 {
		t.Errorf("merged sensor %+v", s)
	}
}

// TestWithDefaults: configurations built in code get the same table.
func TestWithDefaults(t *testing.T) {
	in := Config{Vehicle: "yt-3", Sensors: []Sensor{{Name: "lidar", Kind: "position_xy", NoiseSD: []float64{0.1, 0.1}, PeriodMS: 100}}}
	got := WithDefaults(in)
	want, err := Parse("min.yaml", []byte(minimal))
	if err != nil {
		t.Fatal(err)
	}
	if !reflect.DeepEqual(got, *want) {
		t.Errorf("WithDefaults:\n got %+v\nwant %+v", got, *want)
	}
	if in.Sensors[0].FOVDeg != 0 {
		t.Error("WithDefaults changed its argument's sensors")
	}
}

// TestDefaultsTableKeys: every Defaults key names a real field, so the
// table cannot silently drift from the schema.
func TestDefaultsTableKeys(t *testing.T) {
	keys := map[string]bool{}
	for _, k := range schemaKeys(reflect.TypeOf(Config{}), "") {
		keys[k] = true
	}
	for _, d := range Defaults {
		if !keys[d.Key] {
			t.Errorf("Defaults key %q is not a schema key", d.Key)
		}
	}
}

// schemaKeys lists every leaf key path of the schema, sensors as
// "sensors[].name".
func schemaKeys(t reflect.Type, prefix string) []string {
	var out []string
	for i := 0; i < t.NumField(); i++ {
		f := t.Field(i)
		k := yamlstrict.Join(prefix, yamlKey(f))
		switch {
		case f.Type.Kind() == reflect.Struct:
			out = append(out, schemaKeys(f.Type, k)...)
		case f.Type.Kind() == reflect.Slice && f.Type.Elem().Kind() == reflect.Struct:
			out = append(out, schemaKeys(f.Type.Elem(), k+"[]")...)
		default:
			out = append(out, k)
		}
	}
	return out
}

func TestMeasDim(t *testing.T) {
	// DESIGN.md, measurement models: position_xy [x,y], range_bearing [r,b],
	// range_bearing_rate [r,b,ṙ], pinhole [u,r], gnss [lat,lon], odometry [v,ω].
	want := map[string]int{"position_xy": 2, "range_bearing": 2, "range_bearing_rate": 3,
		"pinhole": 2, "gnss": 2, "odometry": 2, "lidar": 0, "": 0}
	for k, n := range want {
		if got := MeasDim(k); got != n {
			t.Errorf("MeasDim(%q) = %d, want %d", k, got, n)
		}
	}
	for _, k := range Kinds {
		if IsEgoKind(k) != (k == "gnss" || k == "odometry") {
			t.Errorf("IsEgoKind(%q) = %v", k, IsEgoKind(k))
		}
	}
	if strings.Join(Kinds, " ") != "position_xy range_bearing range_bearing_rate pinhole gnss odometry" {
		t.Errorf("Kinds = %v", Kinds)
	}
}
