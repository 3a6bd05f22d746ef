package scenario

import (
	"errors"
	"strings"
	"testing"
)

// Broken scenario files give exact, located messages (the same shape as the
// configs loader: "FILE:LINE: PATH what is wrong").
func TestBrokenScenarioMessages(t *testing.T) {
	cases := []struct {
		name, text string
		want       []string
	}{
		{"not yaml", "config: [dock-post\n", []string{
			"scenario: bad.yaml:1: is not valid YAML: did not find expected ',' or ']'"}},
		{"top level list", "- 1\n- 2\n", []string{
			"scenario: bad.yaml:1: the top level must be a mapping of keys (config, duration_s, targets, ...), got a list"}},
		{"empty", "", []string{
			"scenario: bad.yaml: is empty; a scenario needs at least config and duration_s"}},
		{"missing keys", "description: nothing\n", []string{
			"scenario: bad.yaml:1: duration_s is missing (seconds of simulated time)",
			"scenario: bad.yaml:1: config is missing (a shipped config name such as campus-shuttle, dock-post, or a path)"}},
		{"unknown key typo", "config: dock-post\nduration_s: 5\nduraton_s: 5\n", []string{
			`scenario: bad.yaml:3: unknown key "duraton_s" (did you mean duration_s?)`}},
		{"unknown key far", "config: dock-post\nduration_s: 5\nweather: rain\n", []string{
			`scenario: bad.yaml:3: unknown key "weather" (known: description, config, start, duration_s, step_ms, seed, ego, targets, crowds, sensors)`}},
		{"repeated key", "config: dock-post\nduration_s: 5\nduration_s: 6\n", []string{
			"scenario: bad.yaml:3: duration_s is given twice"}},
		{"bad duration", "config: dock-post\nduration_s: -1\n", []string{
			"scenario: bad.yaml:2: duration_s is -1, must be above 0 and at most 3600 s"}},
		{"duration text", "config: dock-post\nduration_s: long\n", []string{
			`scenario: bad.yaml:2: duration_s must be a number, got "long"`}},
		{"bad start", "config: dock-post\nduration_s: 5\nstart: yesterday\n", []string{
			`scenario: bad.yaml:3: start must be an RFC 3339 time such as 2026-03-02T08:00:00Z, got "yesterday"`}},
		{"unknown config", "config: no-such\nduration_s: 5\n", []string{
			`scenario: bad.yaml:1: config is "no-such": neither a shipped config (campus-shuttle, dock-post) nor a readable file: stat testdata/no-such: no such file or directory`}},
		{"moving without ego", "config: campus-shuttle\nduration_s: 5\n", []string{
			"scenario: bad.yaml:1: ego is missing: config campus-shuttle has a moving platform, so the scenario must give its route (ego.waypoints, ego.speed)"}},
		{"ego on fixed", "config: dock-post\nduration_s: 5\nego: {speed: 2}\n", []string{
			"scenario: bad.yaml:3: ego is given, but config dock-post has a fixed platform: the post stands at its platform.pose"}},
		// An ego route loops by default, so the corner back at (0, 0) turns
		// 135° and needs 20·tan(67.5°) = 48.28 m besides the 20·tan(45°) =
		// 20 m of the corner at (10, 0) (hand-worked).
		{"ego corner too big", "config: campus-shuttle\nduration_s: 5\nego:\n  waypoints: [[0, 0], [10, 0], [10, 10]]\n  corner_radius: 20\n  speed: 2\n", []string{
			"scenario: bad.yaml:4: ego.waypoints corner_radius 20 does not fit between waypoints[0] and waypoints[1]: the corners need 68.28 m of a 10.00 m leg"}},
		{"ego repeated point", "config: campus-shuttle\nduration_s: 5\nego:\n  waypoints: [[0, 0], [0, 0], [10, 10]]\n  speed: 2\n", []string{
			"scenario: bad.yaml:4: ego.waypoints waypoints[1] repeats waypoints[0]"}},
		{"point of three", "config: campus-shuttle\nduration_s: 5\nego:\n  waypoints: [[0, 0, 1], [10, 0]]\n  speed: 2\n", []string{
			"scenario: bad.yaml:4: ego.waypoints[0] has 3 values, a point [x, y] needs 2"}},
		{"target without motion", "config: dock-post\nduration_s: 5\ntargets:\n  - id: t1\n", []string{
			"scenario: bad.yaml:4: targets[0] needs motion: path, cv or turn"}},
		{"target unknown motion", "config: dock-post\nduration_s: 5\ntargets:\n  - {id: t1, motion: hop}\n", []string{
			`scenario: bad.yaml:4: targets[0].motion is "hop", must be path, cv or turn`}},
		{"target key of another motion", "config: dock-post\nduration_s: 5\ntargets:\n  - id: t1\n    motion: cv\n    pos: [1, 2]\n    vel: [0, 1]\n    speed: 3\n", []string{
			"scenario: bad.yaml:8: targets[0].speed does not apply to motion cv (it uses pos, vel)"}},
		{"target missing vel", "config: dock-post\nduration_s: 5\ntargets:\n  - {id: t1, motion: cv, pos: [1, 2]}\n", []string{
			"scenario: bad.yaml:4: targets[0] motion cv needs vel"}},
		{"duplicate ids", "config: dock-post\nduration_s: 5\ntargets:\n  - {id: t1, motion: cv, pos: [1, 2], vel: [0, 0]}\n  - {id: t1, motion: cv, pos: [3, 2], vel: [0, 0]}\n", []string{
			`scenario: bad.yaml:5: targets[1].id "t1" is already used by targets[0]`}},
		{"end before start", "config: dock-post\nduration_s: 5\ntargets:\n  - {id: t1, motion: cv, pos: [1, 2], vel: [0, 0], start_s: 3, end_s: 2}\n", []string{
			"scenario: bad.yaml:4: targets[0].end_s is 2, must be after start_s 3"}},
		{"unknown sensor", "config: dock-post\nduration_s: 5\nsensors:\n  gate_radr: {latency_ms: 3}\n", []string{
			"scenario: bad.yaml:4: sensors.gate_radr is not a sensor of config dock-post (its sensors: gate_radar, gate_lidar)"}},
		{"sensor key typo", "config: dock-post\nduration_s: 5\nsensors:\n  gate_radar:\n    latency: 3\n", []string{
			`scenario: bad.yaml:5: sensors.gate_radar has unknown key "latency" (did you mean latency_ms?)`}},
		{"noise dims", "config: dock-post\nduration_s: 5\nsensors:\n  gate_radar: {noise_sd: [0.1, 0.2]}\n", []string{
			"scenario: bad.yaml:4: sensors.gate_radar.noise_sd has 2 values, kind range_bearing_rate needs 3"}},
		{"p_detect range", "config: dock-post\nduration_s: 5\nsensors:\n  gate_lidar: {p_detect: 1.5}\n", []string{
			"scenario: bad.yaml:4: sensors.gate_lidar.p_detect is 1.5, must be 0..1"}},
		{"p_detect on gnss", "config: campus-shuttle\nduration_s: 5\nego: {waypoints: [[0, 0], [50, 0]], speed: 2}\nsensors:\n  gnss: {p_detect: 0.5}\n", []string{
			"scenario: bad.yaml:5: sensors.gnss.p_detect does not apply to gnss sensor gnss (it measures the platform itself)"}},
		{"dropout backwards", "config: dock-post\nduration_s: 5\nsensors:\n  gate_lidar:\n    dropouts: [[3, 2]]\n", []string{
			"scenario: bad.yaml:5: sensors.gate_lidar.dropouts[0] must be [from_s, to_s] with 0 ≤ from_s < to_s"}},
		{"burst after end", "config: dock-post\nduration_s: 5\nsensors:\n  gate_lidar:\n    malformed: {at_s: 9, count: 3}\n", []string{
			"scenario: bad.yaml:5: sensors.gate_lidar.malformed.at_s is 9 s, after the end of the scenario (5 s)"}},
		{"crowd without area", "config: dock-post\nduration_s: 5\ncrowds:\n  - {prefix: w, count: 3}\n", []string{
			"scenario: bad.yaml:4: crowds[0] needs area: [x_min, y_min, x_max, y_max]"}},
		{"several at once", "config: dock-post\nduration_s: 0\nseed: -4\nsensors:\n  gate_lidar: {loss: 2}\n", []string{
			"scenario: bad.yaml:2: duration_s is 0, must be above 0 and at most 3600 s",
			"scenario: bad.yaml:3: seed is -4, must be ≥ 0",
			"scenario: bad.yaml:5: sensors.gate_lidar.loss is 2, must be 0..1 (probability a message is lost)"}},
	}
	for _, c := range cases {
		t.Run(c.name, func(t *testing.T) {
			sc, err := Parse("bad.yaml", []byte(c.text), "testdata")
			if err == nil {
				t.Fatalf("accepted: %+v", sc)
			}
			var list *ErrorList
			if !errors.As(err, &list) {
				t.Fatalf("error %T %v, want *ErrorList", err, err)
			}
			got := strings.Split(err.Error(), "\n")
			if strings.Join(got, "\n") != strings.Join(c.want, "\n") {
				t.Fatalf("got\n  %s\nwant\n  %s", strings.Join(got, "\n  "), strings.Join(c.want, "\n  "))
			}
		})
	}
}

// A config given as a path is read relative to the scenario file, and a
// broken one is reported at the scenario's config line.
func TestConfigPathRelativeToScenario(t *testing.T) {
	sc, err := Load("testdata/yard-lane.yaml")
	if err != nil {
		t.Fatal(err)
	}
	if sc.Config.Vehicle != "lane-post-1" || len(sc.Sensors) != 1 || sc.Sensors[0].Cfg.Name != "lane_lidar" {
		t.Fatalf("loaded %+v", sc.Config)
	}
	_, err = Load("testdata/bad-config-ref.yaml")
	if err == nil || !strings.HasPrefix(err.Error(), "scenario: testdata/bad-config-ref.yaml:1: config is \"no-such-config.yaml\": neither a shipped config") {
		t.Fatalf("err %v", err)
	}
	if _, err := Open("no-such-scenario"); err == nil || !strings.Contains(err.Error(), "shipped: campus-shuttle, crossing, dense, dock-post") {
		t.Fatalf("Open of an unknown name: %v", err)
	}
}
