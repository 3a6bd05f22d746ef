package configs

import (
	"reflect"
	"strconv"
	"strings"
)

// Default is one entry of the defaults table: the key it fills when the file
// does not give it, the value in words (as REFERENCE.md shows it), and how to
// fill it. Keys under "sensors[]." apply to every sensor.
type Default struct {
	Key   string
	Value string
	apply func(c *Config, s *Sensor)
}

// Defaults is the one place godwit's configuration defaults live. They are
// applied in this order before validation, so a derived default may use
// an earlier one (max_age_ms uses period_ms). A key given in the file, even
// as 0 or "", is never overwritten; an empty YAML value (key: ~) counts as
// not given.
var Defaults = []Default{
	{"broker.url", "tcp://127.0.0.1:1883", func(c *Config, _ *Sensor) { c.Broker.URL = "tcp://127.0.0.1:1883" }},
	{"broker.client_id", "godwit-<vehicle>", func(c *Config, _ *Sensor) { c.Broker.ClientID = "godwit-" + c.Vehicle }},
	// QoS 1 (at least once): detections survive a broker hiccup, and a
	// duplicate is harmless because the engine sees its seq again.
	{"broker.qos", "1", func(c *Config, _ *Sensor) { c.Broker.QoS = 1 }},
	{"platform.motion", "fixed", func(c *Config, _ *Sensor) { c.Platform.Motion = MotionFixed }},
	{"sensors[].topic", "<vehicle>/sensors/<name>", func(c *Config, s *Sensor) { s.Topic = c.Vehicle + "/sensors/" + s.Name }},
	{"sensors[].max_age_ms", "5 × period_ms", func(c *Config, s *Sensor) { s.MaxAgeMS = 5 * s.PeriodMS }},
	{"sensors[].fov_deg", "360", func(c *Config, s *Sensor) {
		if !IsEgoKind(s.Kind) {
			s.FOVDeg = 360
		}
	}},
	{"sensors[].p_detect", "0.9", func(c *Config, s *Sensor) {
		if !IsEgoKind(s.Kind) {
			s.PDetect = 0.9
		}
	}},
	{"sensors[].clutter_per_scan", "1", func(c *Config, s *Sensor) {
		if !IsEgoKind(s.Kind) {
			s.ClutterPerScan = 1
		}
	}},
	{"tracker.motion", "ctrv", func(c *Config, _ *Sensor) { c.Tracker.Motion = "ctrv" }},
	{"tracker.filter", "srukf", func(c *Config, _ *Sensor) { c.Tracker.Filter = "srukf" }},
	{"tracker.accel_sd", "1.5 m/s²", func(c *Config, _ *Sensor) { c.Tracker.AccelSD = 1.5 }},
	{"tracker.yaw_accel_sd", "0.6 rad/s²", func(c *Config, _ *Sensor) { c.Tracker.YawAccelSD = 0.6 }},
	{"tracker.gate_prob", "0.999", func(c *Config, _ *Sensor) { c.Tracker.GateProb = 0.999 }},
	{"tracker.confirm.hits", "3", func(c *Config, _ *Sensor) { c.Tracker.Confirm.Hits = 3 }},
	{"tracker.confirm.of", "5", func(c *Config, _ *Sensor) { c.Tracker.Confirm.Of = 5 }},
	{"tracker.delete_misses", "6", func(c *Config, _ *Sensor) { c.Tracker.DeleteMisses = 6 }},
	{"tracker.max_tracks", "512", func(c *Config, _ *Sensor) { c.Tracker.MaxTracks = 512 }},
	{"timing.lag_ms", "300 ms", func(c *Config, _ *Sensor) { c.Timing.LagMS = 300 }},
	{"timing.clock", "synced", func(c *Config, _ *Sensor) { c.Timing.Clock = ClockSynced }},
	{"output.tracks_topic", "godwit/<vehicle>/tracks", func(c *Config, _ *Sensor) { c.Output.TracksTopic = "godwit/" + c.Vehicle + "/tracks" }},
	{"output.health_topic", "godwit/<vehicle>/health", func(c *Config, _ *Sensor) { c.Output.HealthTopic = "godwit/" + c.Vehicle + "/health" }},
	{"output.status_topic", "godwit/<vehicle>/status", func(c *Config, _ *Sensor) { c.Output.StatusTopic = "godwit/" + c.Vehicle + "/status" }},
	{"output.rate_hz", "20 Hz", func(c *Config, _ *Sensor) { c.Output.RateHz = 20 }},
	// Loopback keeps the metrics private until the operator opens them.
	{"metrics.listen", "127.0.0.1:9464", func(c *Config, _ *Sensor) { c.Metrics.Listen = "127.0.0.1:9464" }},
	{"health.silent_periods", "3", func(c *Config, _ *Sensor) { c.Health.SilentPeriods = 3 }},
	{"health.raise_ms", "500 ms", func(c *Config, _ *Sensor) { c.Health.RaiseMS = 500 }},
	{"health.clear_ms", "2000 ms", func(c *Config, _ *Sensor) { c.Health.ClearMS = 2000 }},
	{"health.event_hold_ms", "1000 ms", func(c *Config, _ *Sensor) { c.Health.EventHoldMS = 1000 }},
	{"health.max_pos_sd_m", "10 m", func(c *Config, _ *Sensor) { c.Health.MaxPosSDM = 10 }},
	{"health.step_budget_ms", "25 ms", func(c *Config, _ *Sensor) { c.Health.StepBudgetMS = 25 }},
	{"health.clock_jump_ms", "50 ms", func(c *Config, _ *Sensor) { c.Health.ClockJumpMS = 50 }},
	{"limits.max_payload_bytes", "65536 bytes", func(c *Config, _ *Sensor) { c.Limits.MaxPayloadBytes = 65536 }},
	{"limits.queue_length", "1024 messages", func(c *Config, _ *Sensor) { c.Limits.QueueLength = 1024 }},
	{"limits.time_window_ms", "10000 ms", func(c *Config, _ *Sensor) { c.Limits.TimeWindowMS = 10000 }},
}

// applyDefaults fills every key the file did not give. given reports
// whether a field path (e.g. "sensors[2].fov_deg") was in the file.
func applyDefaults(c *Config, given func(path string) bool) {
	for _, d := range Defaults {
		if rest, ok := strings.CutPrefix(d.Key, "sensors[]."); ok {
			for i := range c.Sensors {
				if !given(sensorPath(i, rest)) {
					d.apply(c, &c.Sensors[i])
				}
			}
			continue
		}
		if !given(d.Key) {
			d.apply(c, nil)
		}
	}
}

// WithDefaults returns a copy of c with every zero-valued defaulted key
// filled, for configurations built in code rather than read from a file.
// Unlike Parse it cannot tell an explicit 0 from "not given", so a zero
// value always takes the default.
func WithDefaults(c Config) Config {
	c.Sensors = append([]Sensor(nil), c.Sensors...)
	probe := c
	probe.Sensors = append([]Sensor(nil), c.Sensors...)
	applyDefaults(&c, func(path string) bool { return !isZeroAt(&probe, path) })
	return c
}

// isZeroAt reports whether the field at a path like "sensors[2].fov_deg"
// holds its zero value; a path that does not resolve counts as zero.
func isZeroAt(c *Config, path string) bool {
	v := reflect.ValueOf(c).Elem()
	for _, part := range strings.Split(path, ".") {
		name, idx, indexed := strings.Cut(part, "[")
		if v.Kind() != reflect.Struct {
			return true
		}
		i, ok := yamlFields(v.Type())[name]
		if !ok {
			return true
		}
		v = v.Field(i)
		if indexed {
			n, err := strconv.Atoi(strings.TrimSuffix(idx, "]"))
			if err != nil || v.Kind() != reflect.Slice || n < 0 || n >= v.Len() {
				return true
			}
			v = v.Index(n)
		}
	}
	return v.IsZero()
}
