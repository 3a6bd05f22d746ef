package configs

import (
	"errors"
	"fmt"
	"strings"
	"testing"
)

// base is a small valid configuration; the cases below break one thing
// each, so the expected line numbers refer to these lines.
const base = `vehicle: yt-3
platform: {motion: fixed}
sensors:
  - name: front_radar
    kind: range_bearing_rate
    noise_sd: [0.3, 0.01, 0.15]
    period_ms: 50
  - name: lidar
    kind: position_xy
    noise_sd: [0.1, 0.1]
    period_ms: 100
tracker: {motion: cv, filter: srekf}
`

// edit replaces old (which must occur exactly once) by new in base.
func edit(t *testing.T, old, new string) string {
	t.Helper()
	if strings.Count(base, old) != 1 {
		t.Fatalf("edit: %q occurs %d times in base", old, strings.Count(base, old))
	}
	return strings.Replace(base, old, new, 1)
}

func errorLines(t *testing.T, err error) []string {
	t.Helper()
	var list *ErrorList
	if !errors.As(err, &list) {
		t.Fatalf("error is %T, want *ErrorList: %v", err, err)
	}
	return strings.Split(list.Error(), "\n")
}

func TestBaseIsValid(t *testing.T) {
	if _, err := Parse("t.yaml", []byte(base)); err != nil {
		t.Fatalf("base config: %v", err)
	}
}

// TestBrokenConfigs pins the exact message for each kind of mistake. The
// expectations come from outside this package where a rule has a source:
// measurement dimensions from DESIGN.md (measurement models), MQTT topic
// and QoS rules from the MQTT 3.1.1 standard (OASIS 2014), WGS 84 latitude
// bounds, M-of-N and gate probabilities from common practice.
func TestBrokenConfigs(t *testing.T) {
	cases := []struct {
		name      string
		old, new  string // edit of base; old "" appends new
		wantLines []string
	}{
		{"noise length (DESIGN.md: range_bearing_rate z=[r,b,ṙ])", "[0.3, 0.01, 0.15]", "[0.3, 0.01]",
			[]string{"configs: t.yaml:6: sensors[0].noise_sd has 2 values, kind range_bearing_rate needs 3"}},
		{"noise length (DESIGN.md: position_xy z=[x,y])", "[0.1, 0.1]", "[0.1, 0.1, 0.1]",
			[]string{"configs: t.yaml:10: sensors[1].noise_sd has 3 values, kind position_xy needs 2"}},
		{"noise missing", "    noise_sd: [0.1, 0.1]\n", "",
			[]string{"configs: t.yaml:8: sensors[1].noise_sd is required: kind position_xy needs 2 values (x m, y m)"}},
		{"noise not positive (a standard deviation is > 0)", "[0.1, 0.1]", "[0.1, 0]",
			[]string{"configs: t.yaml:10: sensors[1].noise_sd[1] is 0; a standard deviation must be > 0"}},
		{"noise NaN", "[0.1, 0.1]", "[0.1, .nan]",
			[]string{"configs: t.yaml:10: sensors[1].noise_sd[1] must be a finite number, got .nan"}},
		{"typo key", "    period_ms: 100", "    perod_ms: 100",
			[]string{"configs: t.yaml:11: sensors[1].perod_ms is not a known key; did you mean period_ms?"}},
		{"unknown top-level key", "", "colour: blue\n",
			[]string{"configs: t.yaml:13: colour is not a known key; expected one of vehicle, site, broker, platform, sensors, tracker, timing, output, metrics, health, limits"}},
		{"duplicate key", "    period_ms: 50\n", "    period_ms: 50\n    period_ms: 60\n",
			[]string{"configs: t.yaml:8: sensors[0].period_ms is given twice (first at line 7)"}},
		{"kind typo", "kind: position_xy", "kind: postion_xy",
			[]string{`configs: t.yaml:9: sensors[1].kind "postion_xy" is unknown; did you mean position_xy?`}},
		{"kind unknown", "kind: position_xy", "kind: sonar",
			[]string{`configs: t.yaml:9: sensors[1].kind "sonar" is unknown; expected one of position_xy, range_bearing, range_bearing_rate, pinhole, gnss, odometry`}},
		{"number expected", "period_ms: 50", "period_ms: fast",
			[]string{`configs: t.yaml:7: sensors[0].period_ms must be a number, got "fast"`}},
		{"period not positive", "period_ms: 50", "period_ms: 0",
			[]string{"configs: t.yaml:7: sensors[0].period_ms is 0; it must be > 0 ms"}},
		{"period missing", "    period_ms: 50\n", "",
			[]string{"configs: t.yaml:4: sensors[0].period_ms is required: the nominal time between the sensor's messages, in ms"}},
		{"list expected", "noise_sd: [0.1, 0.1]", "noise_sd: 0.1",
			[]string{"configs: t.yaml:10: sensors[1].noise_sd must be a list, got 0.1"}},
		{"mapping expected", "platform: {motion: fixed}", "platform: fixed",
			[]string{"configs: t.yaml:2: platform must be a mapping, got \"fixed\""}},
		{"duplicate sensor name", "name: lidar", "name: front_radar",
			[]string{`configs: t.yaml:8: sensors[1].name "front_radar" is already used by sensors[0]; sensor names must be unique`}},
		{"sensor name with a space", "name: lidar", "name: roof lidar",
			[]string{`configs: t.yaml:8: sensors[1].name "roof lidar" may hold only letters, digits, '-', '_' and '.' (at most 64)`}},
		{"control character (MQTT 3.1.1 §1.5.3)", "name: lidar", `name: "li\tdar"`,
			[]string{"configs: t.yaml:8: sensors[1].name holds a control character (U+0009); write plain text"}},
		{"invalid UTF-8 via !!binary (MQTT 3.1.1 §1.5.3)", "vehicle: yt-3", "vehicle: !!binary /w==",
			[]string{"configs: t.yaml:1: vehicle holds invalid UTF-8; write plain text"}},
		{"vehicle missing", "vehicle: yt-3\n", "",
			[]string{"configs: t.yaml:1: vehicle is required: a name for this vehicle, used in topics (e.g. shuttle-07)"}},
		{"vehicle not topic-safe (MQTT 3.1.1 §4.7.1: / separates levels)", "vehicle: yt-3", "vehicle: yard/3",
			[]string{`configs: t.yaml:1: vehicle "yard/3" may hold only letters, digits, '-', '_' and '.' (at most 64)`}},
		{"fov above 360", "    period_ms: 100\n", "    period_ms: 100\n    fov_deg: 400\n",
			[]string{"configs: t.yaml:12: sensors[1].fov_deg is 400; it must be in (0, 360] degrees"}},
		{"p_detect zero (a probability of detection in (0,1])", "    period_ms: 100\n", "    period_ms: 100\n    p_detect: 0\n",
			[]string{"configs: t.yaml:12: sensors[1].p_detect is 0; a detection probability must be in (0, 1]"}},
		{"srkf with a nonlinear sensor (Kalman 1960 needs linear h)", "filter: srekf", "filter: srkf",
			[]string{"configs: t.yaml:12: tracker.filter srkf needs every tracking sensor to be position_xy, but sensors[0] (front_radar) is range_bearing_rate; use srekf or srukf"}},
		{"srkf with ctrv (nonlinear f)", "tracker: {motion: cv, filter: srekf}", "tracker: {motion: ctrv, filter: srkf}",
			[]string{
				"configs: t.yaml:12: tracker.filter srkf needs a linear motion model (cv or ca), not ctrv; use srekf or srukf",
				"configs: t.yaml:12: tracker.filter srkf needs every tracking sensor to be position_xy, but sensors[0] (front_radar) is range_bearing_rate; use srekf or srukf",
			}},
		{"unknown motion model", "motion: cv,", "motion: cvv,",
			[]string{`configs: t.yaml:12: tracker.motion "cvv" is unknown; expected cv, ca or ctrv`}},
		{"yaw_accel_sd without ctrv", "filter: srekf}", "filter: srekf, yaw_accel_sd: 0.5}",
			[]string{"configs: t.yaml:12: tracker.yaw_accel_sd applies only to tracker.motion ctrv, not cv"}},
		{"M-of-N with M > N (common practice: M ≤ N)", "filter: srekf}", "filter: srekf, confirm: {hits: 6, of: 5}}",
			[]string{"configs: t.yaml:12: tracker.confirm.hits is 6, more than confirm.of 5; M-of-N confirmation needs M ≤ N"}},
		{"gate probability 1 (common practice: an infinite gate)", "filter: srekf}", "filter: srekf, gate_prob: 1}",
			[]string{"configs: t.yaml:12: tracker.gate_prob is 1; a gate probability must be in (0, 1), e.g. 0.999"}},
		{"whole number for max_tracks", "filter: srekf}", "filter: srekf, max_tracks: 1.5}",
			[]string{"configs: t.yaml:12: tracker.max_tracks must be a whole number, got 1.5"}},
		{"QoS 3 (MQTT 3.1.1 §4.3: QoS 0, 1, 2)", "", "broker: {qos: 3}\n",
			[]string{"configs: t.yaml:13: broker.qos 3 is not an MQTT QoS; expected 0, 1 or 2"}},
		{"broker scheme", "", "broker: {url: 'mqtt://10.0.0.2:1883'}\n",
			[]string{`configs: t.yaml:13: broker.url "mqtt://10.0.0.2:1883" has scheme "mqtt"; expected tcp, ssl, ws or wss`}},
		{"broker without port", "", "broker: {url: 'tcp://10.0.0.2'}\n",
			[]string{`configs: t.yaml:13: broker.url "tcp://10.0.0.2" has no port; expected e.g. tcp://10.0.0.2:1883`}},
		{"TLS files on tcp", "", "broker: {url: 'tcp://10.0.0.2:1883', tls: {ca: ca.pem}}\n",
			[]string{"configs: t.yaml:13: broker.tls.ca is set but broker.url uses tcp://; TLS needs ssl:// or wss://"}},
		{"client cert without key", "", "broker: {url: 'ssl://10.0.0.2:8883', tls: {cert: c.pem}}\n",
			[]string{"configs: t.yaml:13: broker.tls.cert is set without broker.tls.key; a client certificate needs its private key"}},
		{"password without user (MQTT 3.1.1 §3.1.2.9)", "", "broker: {password_file: /run/secrets/mqtt}\n",
			[]string{"configs: t.yaml:13: broker.password_file is set without broker.username; MQTT 3.1.1 sends a password only with a user name"}},
		{"wildcard topic (MQTT 3.1.1 §4.7.1)", "    period_ms: 100\n", "    period_ms: 100\n    topic: yt-3/lidar/#\n",
			[]string{`configs: t.yaml:12: sensors[1].topic "yt-3/lidar/#" has an MQTT wildcard (+ or #); it must name one topic`}},
		{"$ topic (MQTT 3.1.1 §4.7.2)", "", "output: {health_topic: $SYS/godwit}\n",
			[]string{`configs: t.yaml:13: output.health_topic "$SYS/godwit" starts with $, which MQTT reserves for the broker`}},
		{"topic used twice", "", "output: {tracks_topic: yt-3/sensors/lidar}\n",
			[]string{`configs: t.yaml:13: output.tracks_topic "yt-3/sensors/lidar" is already used by sensors[1].topic; every topic must be distinct`}},
		{"clock", "", "timing: {clock: gps}\n",
			[]string{`configs: t.yaml:13: timing.clock "gps" is unknown; expected synced or estimate`}},
		{"negative lag", "", "timing: {lag_ms: -10}\n",
			[]string{"configs: t.yaml:13: timing.lag_ms is -10; it must be in 0..60000 ms (0: no out-of-sequence handling)"}},
		{"metrics address", "", "metrics: {listen: 'localhost'}\n",
			[]string{`configs: t.yaml:13: metrics.listen "localhost" is not host:port; expected e.g. 127.0.0.1:9464, or "" to turn metrics off`}},
		{"latitude beyond the pole (WGS 84: -90..90)", "", "site: {lat: 95, lon: 10}\n",
			[]string{"configs: t.yaml:13: site.lat is 95; a WGS 84 latitude must be in -90..90 degrees"}},
		{"payload limit beyond MQTT (MQTT 3.1.1 §2.2.3: 268435455)", "", "limits: {max_payload_bytes: 300000000}\n",
			[]string{"configs: t.yaml:13: limits.max_payload_bytes is 300000000; it must be in 1..268435455 bytes (the MQTT maximum)"}},
		{"ego sensor on a fixed platform", "tracker:", "  - {name: odo, kind: odometry, noise_sd: [0.1, 0.01], period_ms: 20}\ntracker:",
			[]string{"configs: t.yaml:12: sensors[2].kind odometry needs platform.motion moving; a fixed platform has no motion to measure"}},
		{"moving platform without ego sensors", "motion: fixed", "motion: moving",
			[]string{"configs: t.yaml:2: platform.motion moving needs at least one gnss or odometry sensor to estimate the platform's own motion"}},
		{"pinhole without fx", "kind: position_xy\n    noise_sd: [0.1, 0.1]", "kind: pinhole\n    noise_sd: [3, 1]",
			[]string{"configs: t.yaml:8: sensors[1].fx is required for kind pinhole: the focal length in pixels"}},
		{"fx on a radar", "    period_ms: 50\n", "    period_ms: 50\n    fx: 800\n",
			[]string{"configs: t.yaml:8: sensors[0].fx applies only to kind pinhole, not range_bearing_rate"}},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			var text string
			if tc.old == "" {
				text = base + tc.new
			} else {
				text = edit(t, tc.old, tc.new)
			}
			cfg, err := Parse("t.yaml", []byte(text))
			if err == nil {
				t.Fatalf("no error; config %+v", cfg)
			}
			if cfg != nil {
				t.Errorf("config returned alongside the error")
			}
			got := errorLines(t, err)
			if strings.Join(got, "\n") != strings.Join(tc.wantLines, "\n") {
				t.Errorf("errors:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(tc.wantLines, "\n"))
			}
		})
	}
}

// TestMovingPlatformErrors covers the ego-sensor rules on a whole file:
// gnss needs the site origin (WGS 84 conversion, DESIGN.md), tracking-only
// keys are refused on ego sensors, and a list of only ego sensors has
// nothing to track.
func TestMovingPlatformErrors(t *testing.T) {
	text := `vehicle: shuttle-9
platform: {motion: moving}
sensors:
  - name: gnss
    kind: gnss
    noise_sd: [1.5, 1.5]
    period_ms: 100
    fov_deg: 90
  - name: odo
    kind: odometry
    noise_sd: [0.05, 0.01]
    period_ms: 20
`
	_, err := Parse("m.yaml", []byte(text))
	want := []string{
		"configs: m.yaml:4: sensors has no tracking sensor; add one of kind position_xy, range_bearing, range_bearing_rate, pinhole",
		"configs: m.yaml:5: sensors[0].kind gnss needs site.lat and site.lon: the WGS 84 origin of the site frame",
		"configs: m.yaml:8: sensors[0].fov_deg applies only to tracking sensors, not kind gnss",
	}
	if got := errorLines(t, err); strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("errors:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
}

// TestAllErrorsAtOnce: one file with many independent mistakes reports
// every one of them, ordered by line, in a single ErrorList.
func TestAllErrorsAtOnce(t *testing.T) {
	text := `vehicle: yt-3
broker: {qos: 5}
sensors:
  - name: front_radar
    kind: range_bearing_rate
    noise_sd: [0.3, 0.01]
    period_ms: 50
    p_detect: 1.2
  - name: front_radar
    kind: position_xy
    noise_sd: [0.1, 0.1]
    period_ms: -1
tracker: {gate_prob: 0, confirm: {hits: 4, of: 2}}
timing: {clock: ntp}
`
	_, err := Parse("many.yaml", []byte(text))
	want := []string{
		"configs: many.yaml:2: broker.qos 5 is not an MQTT QoS; expected 0, 1 or 2",
		"configs: many.yaml:6: sensors[0].noise_sd has 2 values, kind range_bearing_rate needs 3",
		"configs: many.yaml:8: sensors[0].p_detect is 1.2; a detection probability must be in (0, 1]",
		`configs: many.yaml:9: sensors[1].name "front_radar" is already used by sensors[0]; sensor names must be unique`,
		"configs: many.yaml:12: sensors[1].period_ms is -1; it must be > 0 ms",
		"configs: many.yaml:13: tracker.gate_prob is 0; a gate probability must be in (0, 1), e.g. 0.999",
		"configs: many.yaml:13: tracker.confirm.hits is 4, more than confirm.of 2; M-of-N confirmation needs M ≤ N",
		`configs: many.yaml:14: timing.clock "ntp" is unknown; expected synced or estimate`,
	}
	got := errorLines(t, err)
	if strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("errors:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
	var list *ErrorList
	errors.As(err, &list)
	if len(list.Errors) != len(want) {
		t.Errorf("ErrorList holds %d errors, want %d", len(list.Errors), len(want))
	}
	// Each entry is reachable on its own (errors.As through Unwrap []error).
	var one *Error
	if !errors.As(err, &one) || one.Line != 2 || one.Path != "broker.qos" {
		t.Errorf("first *Error = %+v, want line 2 broker.qos", one)
	}
}

// TestDecodeErrorsAllAtOnce: key and type mistakes are collected across the
// whole file too, before validation runs.
func TestDecodeErrorsAllAtOnce(t *testing.T) {
	text := `vehicle: yt-3
sensors:
  - name: a
    knd: position_xy
    noise_sd: [x, 0.1]
    period_ms: 100
tracker: {max_tracks: lots, delete_mises: 4}
`
	_, err := Parse("d.yaml", []byte(text))
	want := []string{
		"configs: d.yaml:4: sensors[0].knd is not a known key; did you mean kind?",
		`configs: d.yaml:5: sensors[0].noise_sd[0] must be a number, got "x"`,
		`configs: d.yaml:7: tracker.max_tracks must be a whole number, got "lots"`,
		"configs: d.yaml:7: tracker.delete_mises is not a known key; did you mean delete_misses?",
	}
	if got := errorLines(t, err); strings.Join(got, "\n") != strings.Join(want, "\n") {
		t.Errorf("errors:\n%s\nwant:\n%s", strings.Join(got, "\n"), strings.Join(want, "\n"))
	}
}

// TestDocumentErrors covers problems with the file as a whole.
func TestDocumentErrors(t *testing.T) {
	cases := []struct{ name, text, want string }{
		{"empty", "", "configs: e.yaml: empty configuration; it needs at least vehicle and sensors"},
		{"only a comment", "# nothing yet\n", "configs: e.yaml: empty configuration; it needs at least vehicle and sensors"},
		{"scalar document", "hello\n", `configs: e.yaml:1: the top level must be a mapping of keys (vehicle, sensors, ...), got "hello"`},
		// yaml.v3's own parser message, passed through with its line.
		{"syntax", "vehicle: a\nsensors: [\n", "configs: e.yaml:2: not valid YAML: did not find expected node content"},
		{"two documents", base + "---\nvehicle: b\n", "configs: e.yaml:13: a second YAML document (---) starts here; put one configuration per file"},
		{"tab indentation", "vehicle: a\n\tsensors: []\n", "configs: e.yaml:2: not valid YAML: found a tab character that violates indentation"},
	}
	for _, tc := range cases {
		t.Run(tc.name, func(t *testing.T) {
			_, err := Parse("e.yaml", []byte(tc.text))
			if err == nil {
				t.Fatal("no error")
			}
			if err.Error() != tc.want {
				t.Errorf("error:\n%s\nwant:\n%s", err, tc.want)
			}
		})
	}
}

// TestAliasExpansionBounded: a "billion laughs" document (each level
// merges the previous mapping ten times, YAML merge keys) is refused with an
// error instead of being expanded 10⁸ times.
func TestAliasExpansionBounded(t *testing.T) {
	var b strings.Builder
	b.WriteString("vehicle: x\nsensors:\n  - &m0 {period_ms: 1}\n")
	for i := 1; i <= 8; i++ {
		fmt.Fprintf(&b, "  - &m%d {<<: [", i)
		for j := 0; j < 10; j++ {
			if j > 0 {
				b.WriteString(", ")
			}
			fmt.Fprintf(&b, "*m%d", i-1)
		}
		b.WriteString("]}\n")
	}
	_, err := Parse("bomb.yaml", []byte(b.String()))
	want := "configs: bomb.yaml: more than 100000 YAML values (alias expansion?); refusing to decode"
	if err == nil || strings.Split(err.Error(), "\n")[0] != want {
		t.Fatalf("error = %v, want first %q", err, want)
	}
}

func TestLoadMissingFile(t *testing.T) {
	_, err := Load("/nonexistent/godwit.yaml")
	want := "configs: /nonexistent/godwit.yaml: cannot read: no such file or directory"
	if err == nil || err.Error() != want {
		t.Fatalf("error = %v, want %q", err, want)
	}
}
