package configs

import (
	"fmt"
	"reflect"
	"strings"
	"testing"
	"unicode"

	"pgregory.net/rapid"
)

// text draws printable Unicode: letters, digits, punctuation, symbols and
// spaces from every script (control characters are refused by design).
func text() *rapid.Generator[string] { return textN(0) }

func textN(min int) *rapid.Generator[string] {
	return rapid.StringOfN(rapid.RuneFrom(nil, unicode.L, unicode.M, unicode.N, unicode.P, unicode.S, unicode.Zs), min, 20, -1)
}

// genConfig draws a random valid configuration: every rule of the
// validator is respected, strings include arbitrary Unicode where the
// schema allows it (user names, file paths, topics).
func genConfig(t *rapid.T) Config {
	f := func(lo, hi float64, label string) float64 { return rapid.Float64Range(lo, hi).Draw(t, label) }
	c := Config{Vehicle: rapid.StringMatching(`[a-zA-Z0-9][a-zA-Z0-9_.-]{0,20}`).Draw(t, "vehicle")}

	scheme := rapid.SampledFrom([]string{"tcp", "ssl", "ws", "wss"}).Draw(t, "scheme")
	c.Broker.URL = fmt.Sprintf("%s://host%d:%d", scheme, rapid.IntRange(0, 99).Draw(t, "host"), rapid.IntRange(1, 65535).Draw(t, "port"))
	c.Broker.ClientID = rapid.StringMatching(`[ -~]{1,30}`).Draw(t, "client_id")
	c.Broker.QoS = rapid.IntRange(0, 2).Draw(t, "qos")
	c.Broker.Username = text().Draw(t, "username")
	if c.Broker.Username != "" {
		c.Broker.PasswordFile = text().Draw(t, "password_file")
	}
	if scheme == "ssl" || scheme == "wss" {
		c.Broker.TLS.CA = text().Draw(t, "ca")
		if rapid.Bool().Draw(t, "client_cert") {
			c.Broker.TLS.Cert = textN(1).Draw(t, "cert")
			c.Broker.TLS.Key = textN(1).Draw(t, "key")
		}
	}
	c.Broker.PersistentSession = rapid.Bool().Draw(t, "persistent")

	moving := rapid.Bool().Draw(t, "moving")
	c.Platform.Motion = map[bool]string{false: MotionFixed, true: MotionMoving}[moving]
	c.Platform.Pose = Pose{f(-1e6, 1e6, "px"), f(-1e6, 1e6, "py"), f(-720, 720, "pyaw")}

	kinds := rapid.SliceOfN(rapid.SampledFrom(Kinds[:4]), 1, 4).Draw(t, "tracking")
	if moving {
		kinds = append(kinds, rapid.SliceOfN(rapid.SampledFrom(Kinds[4:]), 1, 2).Draw(t, "ego")...)
	}
	linear := true
	for i, k := range kinds {
		s := Sensor{
			Name:     fmt.Sprintf("s%d", i),
			Kind:     k,
			Topic:    "in/" + textN(0).Filter(func(s string) bool { return !strings.ContainsAny(s, "+#") }).Draw(t, "topic") + fmt.Sprintf("/%d", i),
			Mount:    Pose{f(-10, 10, "mx"), f(-10, 10, "my"), f(-180, 180, "myaw")},
			PeriodMS: f(0.1, 1e4, "period"),
			MaxAgeMS: f(0.1, 1e4, "max_age"),
		}
		for range MeasDim(k) {
			s.NoiseSD = append(s.NoiseSD, f(1e-9, 1e3, "sd"))
		}
		if !IsEgoKind(k) {
			s.MaxRange = f(0, 1e4, "range")
			s.FOVDeg = f(1e-6, 360, "fov")
			s.PDetect = f(1e-6, 1, "pd")
			s.ClutterPerScan = f(0, 100, "clutter")
			linear = linear && k == KindPositionXY
		}
		if k == KindGNSS {
			c.Site = Site{f(-90, 90, "lat"), f(-180, 180, "lon"), f(-500, 9000, "alt")}
		}
		if k == KindPinhole {
			s.FX, s.CX, s.RangeSDFrac = f(1e-3, 1e4, "fx"), f(0, 1e4, "cx"), f(0, 1, "frac")
		}
		c.Sensors = append(c.Sensors, s)
	}

	filters := []string{"srekf", "srukf", "pf"}
	motion := rapid.SampledFrom([]string{"cv", "ca", "ctrv"}).Draw(t, "motion")
	if linear && motion != "ctrv" {
		filters = append(filters, "srkf")
	}
	hits := rapid.IntRange(1, 64).Draw(t, "hits")
	c.Tracker = Tracker{
		Motion: motion, Filter: rapid.SampledFrom(filters).Draw(t, "filter"),
		AccelSD: f(1e-6, 100, "accel"), YawAccelSD: 0.6, GateProb: f(1e-9, 0.999999, "gate"),
		Confirm:      Confirm{Hits: hits, Of: rapid.IntRange(hits, 64).Draw(t, "of")},
		DeleteMisses: rapid.IntRange(1, 1000).Draw(t, "misses"), MaxTracks: rapid.IntRange(1, 100000).Draw(t, "tracks"),
	}
	if motion == "ctrv" {
		c.Tracker.YawAccelSD = f(1e-6, 100, "yaw_accel")
	}
	c.Timing = Timing{LagMS: f(0, 60000, "lag"), Clock: rapid.SampledFrom([]string{ClockSynced, ClockEstimate}).Draw(t, "clock")}
	c.Output = Output{TracksTopic: "out/tracks", HealthTopic: "out/health", StatusTopic: "out/status", RateHz: f(0, 1000, "rate")}
	c.Metrics.Listen = rapid.SampledFrom([]string{"", "127.0.0.1:9464", "[::1]:0", ":8080"}).Draw(t, "listen")
	c.Health = Health{f(1e-3, 100, "silent"), f(0, 1e5, "raise"), f(0, 1e5, "clear"), f(1e-3, 1e5, "hold"),
		f(1e-3, 1e4, "pos_sd"), f(1e-3, 1e5, "budget"), f(1e-3, 1e5, "jump")}
	c.Limits = Limits{rapid.IntRange(1, 268435455).Draw(t, "payload"), rapid.IntRange(1, 1<<20).Draw(t, "queue"), f(1e-3, 1e7, "window")}
	return c
}

// TestPropertyRoundTrip: any valid configuration, printed by Marshal, parses
// back to itself — what `godwit check` prints is a working config file.
func TestPropertyRoundTrip(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		c := genConfig(t)
		out, err := Marshal(&c)
		if err != nil {
			t.Fatal(err)
		}
		back, err := Parse("gen.yaml", out)
		if err != nil {
			t.Fatalf("valid config rejected:\n%v\n%s", err, out)
		}
		if !reflect.DeepEqual(&c, back) {
			t.Fatalf("round trip differs:\n%+v\n%+v\n%s", c, *back, out)
		}
	})
}

// TestPropertyOneBreakOneError: breaking one rule in a valid configuration
// makes Parse fail with exactly one message, and it names that field.
func TestPropertyOneBreakOneError(t *testing.T) {
	breaks := []struct {
		path  string
		apply func(c *Config)
	}{
		{"broker.qos", func(c *Config) { c.Broker.QoS = 3 }},
		{"sensors[0].noise_sd", func(c *Config) { c.Sensors[0].NoiseSD = append(c.Sensors[0].NoiseSD, 1) }},
		{"sensors[0].noise_sd[0]", func(c *Config) { c.Sensors[0].NoiseSD[0] = -1 }},
		{"sensors[0].period_ms", func(c *Config) { c.Sensors[0].PeriodMS = 0 }},
		{"sensors[0].fov_deg", func(c *Config) { c.Sensors[0].FOVDeg = 361 }},
		{"sensors[0].p_detect", func(c *Config) { c.Sensors[0].PDetect = 0 }},
		{"sensors[0].topic", func(c *Config) { c.Sensors[0].Topic = "in/+/x" }},
		{"sensors[1].name", func(c *Config) { c.Sensors[1].Name = c.Sensors[0].Name }},
		{"tracker.gate_prob", func(c *Config) { c.Tracker.GateProb = 1 }},
		{"tracker.confirm.hits", func(c *Config) { c.Tracker.Confirm.Hits = c.Tracker.Confirm.Of + 1 }},
		{"tracker.delete_misses", func(c *Config) { c.Tracker.DeleteMisses = 0 }},
		{"timing.lag_ms", func(c *Config) { c.Timing.LagMS = -1 }},
		{"timing.clock", func(c *Config) { c.Timing.Clock = "gps" }},
		{"output.status_topic", func(c *Config) { c.Output.StatusTopic = c.Output.TracksTopic }},
		{"output.rate_hz", func(c *Config) { c.Output.RateHz = -1 }},
		{"limits.queue_length", func(c *Config) { c.Limits.QueueLength = 0 }},
	}
	rapid.Check(t, func(t *rapid.T) {
		c := genConfig(t)
		if len(c.Sensors) < 2 {
			c.Sensors = append(c.Sensors, c.Sensors[0])
			c.Sensors[1].Name, c.Sensors[1].Topic = "extra", "in/extra"
			c.Sensors[1].NoiseSD = append([]float64(nil), c.Sensors[0].NoiseSD...)
		}
		b := rapid.SampledFrom(breaks).Draw(t, "break")
		b.apply(&c)
		out, err := Marshal(&c)
		if err != nil {
			t.Fatal(err)
		}
		_, err = Parse("gen.yaml", out)
		if err == nil {
			t.Fatalf("broken %s accepted:\n%s", b.path, out)
		}
		lines := strings.Split(err.Error(), "\n")
		if len(lines) != 1 || !strings.Contains(lines[0], " "+b.path+" ") {
			t.Fatalf("breaking %s gave:\n%v", b.path, err)
		}
	})
}
