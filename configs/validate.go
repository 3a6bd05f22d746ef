package configs

import (
	"fmt"
	"net"
	"net/url"
	"strconv"
	"strings"
)

// validator checks a decoded, defaulted Config. Every message names the
// field, says what was found and what is expected; it is located at the
// line of that field, or of the nearest enclosing one when the field is
// missing.
type validator struct {
	c *Config
	d *decoder
	// vehicleOK is false when vehicle is missing or unusable; defaults
	// derived from it are then not judged again, to avoid follow-on noise.
	vehicleOK bool
	topics    map[string]string // topic -> path of its first use
}

func (v *validator) given(path string) bool { return v.d.set[path] }

// place is the line and column of a field, or of its nearest enclosing
// field when it is not in the file.
func (v *validator) place(path string) (line, col int) {
	for {
		if l, ok := v.d.lines[path]; ok {
			return l, v.d.cols[path]
		}
		if path == "" {
			return 0, 0
		}
		path = parentPath(path)
	}
}

func parentPath(p string) string {
	i := max(strings.LastIndexByte(p, '.'), strings.LastIndexByte(p, '['))
	if i < 0 {
		return ""
	}
	return p[:i]
}

func (v *validator) fail(path, format string, args ...any) {
	line, col := v.place(path)
	v.d.Add(line, col, path, format, args...)
}

func sensorPath(i int, key string) string {
	if key == "" {
		return fmt.Sprintf("sensors[%d]", i)
	}
	return fmt.Sprintf("sensors[%d].%s", i, key)
}

func num(f float64) string { return strconv.FormatFloat(f, 'g', -1, 64) }

func (v *validator) run() {
	v.topics = map[string]string{}
	v.vehicle()
	v.site()
	v.broker()
	v.platform()
	v.sensors()
	v.tracker()
	v.timing()
	v.output()
	v.metrics()
	v.health()
	v.limits()
}

// isNameChar is the alphabet of vehicle and sensor names: they become MQTT
// topic levels, JSON keys and Prometheus label values, so keep them plain.
func isNameChar(r rune) bool {
	return r >= 'a' && r <= 'z' || r >= 'A' && r <= 'Z' || r >= '0' && r <= '9' || r == '-' || r == '_' || r == '.'
}

func badName(s string) bool {
	if len(s) > 64 {
		return true
	}
	for _, r := range s {
		if !isNameChar(r) {
			return true
		}
	}
	return false
}

const nameRule = "may hold only letters, digits, '-', '_' and '.' (at most 64)"

func (v *validator) vehicle() {
	switch {
	case v.c.Vehicle == "":
		v.fail("vehicle", "is required: a name for this vehicle, used in topics (e.g. shuttle-07)")
	case badName(v.c.Vehicle):
		v.fail("vehicle", "%s %s", clip(v.c.Vehicle), nameRule)
	default:
		v.vehicleOK = true
	}
}

func (v *validator) site() {
	if lat := v.c.Site.Lat; lat < -90 || lat > 90 {
		v.fail("site.lat", "is %s; a WGS 84 latitude must be in -90..90 degrees", num(lat))
	}
	if lon := v.c.Site.Lon; lon < -180 || lon > 180 {
		v.fail("site.lon", "is %s; a WGS 84 longitude must be in -180..180 degrees", num(lon))
	}
}

func (v *validator) broker() {
	b := &v.c.Broker
	u, err := url.Parse(b.URL)
	scheme := ""
	switch {
	case b.URL == "":
		v.fail("broker.url", "is empty; expected e.g. tcp://127.0.0.1:1883")
	case err != nil:
		v.fail("broker.url", "%s is not a URL; expected e.g. tcp://127.0.0.1:1883", clip(b.URL))
	case u.Scheme != "tcp" && u.Scheme != "ssl" && u.Scheme != "ws" && u.Scheme != "wss":
		v.fail("broker.url", "%s has scheme %q; expected tcp, ssl, ws or wss", clip(b.URL), u.Scheme)
	case u.Hostname() == "":
		v.fail("broker.url", "%s has no host; expected e.g. %s://127.0.0.1:1883", clip(b.URL), u.Scheme)
	case (u.Scheme == "tcp" || u.Scheme == "ssl") && u.Port() == "":
		// paho dials tcp/ssl URLs as given; MQTT has no implied port there.
		v.fail("broker.url", "%s has no port; expected e.g. %s://%s:%s", clip(b.URL), u.Scheme, u.Hostname(), map[string]string{"tcp": "1883", "ssl": "8883"}[u.Scheme])
	default:
		scheme = u.Scheme
	}
	if v.vehicleOK || v.given("broker.client_id") {
		if b.ClientID == "" {
			v.fail("broker.client_id", "is empty; the broker needs a client id (default godwit-<vehicle>)")
		} else if len(b.ClientID) > 65535 || strings.ContainsFunc(b.ClientID, func(r rune) bool { return r < ' ' }) {
			v.fail("broker.client_id", "%s must be printable text of at most 65535 bytes (MQTT 3.1.1 §1.5.3)", clip(b.ClientID))
		}
	}
	if b.QoS < 0 || b.QoS > 2 {
		v.fail("broker.qos", "%d is not an MQTT QoS; expected 0, 1 or 2", b.QoS)
	}
	if b.PasswordFile != "" && b.Username == "" {
		// MQTT 3.1.1 §3.1.2.9: no password flag without the user name flag.
		v.fail("broker.password_file", "is set without broker.username; MQTT 3.1.1 sends a password only with a user name")
	}
	tls := scheme == "ssl" || scheme == "wss"
	for _, f := range []struct{ key, val string }{{"ca", b.TLS.CA}, {"cert", b.TLS.Cert}, {"key", b.TLS.Key}} {
		if f.val != "" && scheme != "" && !tls {
			v.fail("broker.tls."+f.key, "is set but broker.url uses %s://; TLS needs ssl:// or wss://", scheme)
		}
	}
	if (b.TLS.Cert == "") != (b.TLS.Key == "") {
		if b.TLS.Cert != "" {
			v.fail("broker.tls.cert", "is set without broker.tls.key; a client certificate needs its private key")
		} else {
			v.fail("broker.tls.key", "is set without broker.tls.cert; a private key needs its client certificate")
		}
	}
}

func (v *validator) platform() {
	p := &v.c.Platform
	switch p.Motion {
	case MotionFixed, MotionMoving:
	default:
		v.fail("platform.motion", "%s is unknown; expected fixed or moving", clip(p.Motion))
		return
	}
	ego := false
	for _, s := range v.c.Sensors {
		ego = ego || IsEgoKind(s.Kind)
	}
	if p.Motion == MotionMoving && !ego {
		v.fail("platform.motion", "moving needs at least one gnss or odometry sensor to estimate the platform's own motion")
	}
}

// kindNoise describes noise_sd per kind, for messages: what each value is.
var kindNoise = map[string]string{
	KindPositionXY:       "x m, y m",
	KindRangeBearing:     "range m, bearing rad",
	KindRangeBearingRate: "range m, bearing rad, range rate m/s",
	KindPinhole:          "image column px, range m",
	KindGNSS:             "east m, north m",
	KindOdometry:         "speed m/s, yaw rate rad/s",
}

func (v *validator) sensors() {
	ss := v.c.Sensors
	if len(ss) == 0 {
		v.fail("sensors", "is required: list at least one tracking sensor (%s)", strings.Join(Kinds[:4], ", "))
		return
	}
	names := map[string]int{}
	tracking := 0
	for i := range ss {
		v.sensor(i, names)
		if MeasDim(ss[i].Kind) > 0 && !IsEgoKind(ss[i].Kind) {
			tracking++
		}
	}
	if tracking == 0 {
		v.fail("sensors", "has no tracking sensor; add one of kind %s", strings.Join(Kinds[:4], ", "))
	}
}

func (v *validator) sensor(i int, names map[string]int) {
	s := &v.c.Sensors[i]
	p := func(key string) string { return sensorPath(i, key) }
	nameOK := false
	switch {
	case s.Name == "":
		v.fail(p("name"), "is required: a unique name that measurement messages give in \"sensor\"")
	case badName(s.Name):
		v.fail(p("name"), "%s %s", clip(s.Name), nameRule)
	default:
		if j, dup := names[s.Name]; dup {
			v.fail(p("name"), "%q is already used by sensors[%d]; sensor names must be unique", s.Name, j)
		} else {
			names[s.Name] = i
			nameOK = true
		}
	}

	dim := MeasDim(s.Kind)
	switch {
	case s.Kind == "":
		v.fail(p("kind"), "is required; expected one of %s", strings.Join(Kinds, ", "))
	case dim == 0:
		msg := fmt.Sprintf("%s is unknown; expected one of %s", clip(s.Kind), strings.Join(Kinds, ", "))
		if g := suggest(s.Kind, Kinds); g != "" {
			msg = fmt.Sprintf("%s is unknown; did you mean %s?", clip(s.Kind), g)
		}
		v.fail(p("kind"), "%s", msg)
	}

	if v.given(p("topic")) || (v.vehicleOK && nameOK) {
		v.topic(p("topic"), s.Topic)
	}

	if dim > 0 {
		switch {
		case len(s.NoiseSD) == 0:
			v.fail(p("noise_sd"), "is required: kind %s needs %d values (%s)", s.Kind, dim, kindNoise[s.Kind])
		case len(s.NoiseSD) != dim:
			v.fail(p("noise_sd"), "has %d values, kind %s needs %d", len(s.NoiseSD), s.Kind, dim)
		default:
			for k, sd := range s.NoiseSD {
				if sd <= 0 {
					v.fail(fmt.Sprintf("%s[%d]", p("noise_sd"), k), "is %s; a standard deviation must be > 0", num(sd))
				}
			}
		}
	}

	switch {
	case !v.given(p("period_ms")):
		v.fail(p("period_ms"), "is required: the nominal time between the sensor's messages, in ms")
	case s.PeriodMS <= 0:
		v.fail(p("period_ms"), "is %s; it must be > 0 ms", num(s.PeriodMS))
	}
	// Not given, it follows period_ms, whose own message then suffices.
	if v.given(p("max_age_ms")) && s.MaxAgeMS <= 0 {
		v.fail(p("max_age_ms"), "is %s; it must be > 0 ms", num(s.MaxAgeMS))
	}

	if IsEgoKind(s.Kind) {
		v.egoSensor(i)
	} else if dim > 0 {
		if s.MaxRange < 0 {
			v.fail(p("max_range"), "is %s; it must be ≥ 0 m (0: no limit)", num(s.MaxRange))
		}
		if s.FOVDeg <= 0 || s.FOVDeg > 360 {
			v.fail(p("fov_deg"), "is %s; it must be in (0, 360] degrees", num(s.FOVDeg))
		}
		if s.PDetect <= 0 || s.PDetect > 1 {
			v.fail(p("p_detect"), "is %s; a detection probability must be in (0, 1]", num(s.PDetect))
		}
		if s.ClutterPerScan < 0 {
			v.fail(p("clutter_per_scan"), "is %s; it must be ≥ 0", num(s.ClutterPerScan))
		}
	}

	if s.Kind == KindPinhole {
		switch {
		case !v.given(p("fx")):
			v.fail(p("fx"), "is required for kind pinhole: the focal length in pixels")
		case s.FX <= 0:
			v.fail(p("fx"), "is %s; a focal length must be > 0 px", num(s.FX))
		}
		if s.CX < 0 {
			v.fail(p("cx"), "is %s; the principal point column must be ≥ 0 px", num(s.CX))
		}
		if s.RangeSDFrac < 0 {
			v.fail(p("range_sd_frac"), "is %s; it must be ≥ 0", num(s.RangeSDFrac))
		}
	} else if dim > 0 {
		for _, key := range []string{"fx", "cx", "range_sd_frac"} {
			if v.given(p(key)) {
				v.fail(p(key), "applies only to kind pinhole, not %s", s.Kind)
			}
		}
	}
}

func (v *validator) egoSensor(i int) {
	s := &v.c.Sensors[i]
	p := func(key string) string { return sensorPath(i, key) }
	for _, key := range []string{"max_range", "fov_deg", "p_detect", "clutter_per_scan"} {
		if v.given(p(key)) {
			v.fail(p(key), "applies only to tracking sensors, not kind %s", s.Kind)
		}
	}
	if v.c.Platform.Motion == MotionFixed {
		v.fail(p("kind"), "%s needs platform.motion moving; a fixed platform has no motion to measure", s.Kind)
	}
	if s.Kind == KindGNSS {
		if !v.given("site.lat") || !v.given("site.lon") {
			v.fail(p("kind"), "gnss needs site.lat and site.lon: the WGS 84 origin of the site frame")
		}
	}
}

func (v *validator) tracker() {
	t := &v.c.Tracker
	switch t.Motion {
	case "cv", "ca", "ctrv":
	default:
		v.fail("tracker.motion", "%s is unknown; expected cv, ca or ctrv", clip(t.Motion))
	}
	switch t.Filter {
	case "srekf", "srukf", "pf":
	case "srkf":
		// A linear Kalman filter is exact only for linear f and h.
		if t.Motion == "ctrv" {
			v.fail("tracker.filter", "srkf needs a linear motion model (cv or ca), not ctrv; use srekf or srukf")
		}
		for i, s := range v.c.Sensors {
			if !IsEgoKind(s.Kind) && MeasDim(s.Kind) > 0 && s.Kind != KindPositionXY {
				v.fail("tracker.filter", "srkf needs every tracking sensor to be position_xy, but sensors[%d] (%s) is %s; use srekf or srukf", i, s.Name, s.Kind)
				break
			}
		}
	default:
		v.fail("tracker.filter", "%s is unknown; expected srkf, srekf, srukf or pf", clip(t.Filter))
	}
	if t.AccelSD <= 0 {
		v.fail("tracker.accel_sd", "is %s; it must be > 0 m/s²", num(t.AccelSD))
	}
	if t.Motion != "ctrv" && v.given("tracker.yaw_accel_sd") {
		v.fail("tracker.yaw_accel_sd", "applies only to tracker.motion ctrv, not %s", t.Motion)
	} else if t.YawAccelSD <= 0 {
		v.fail("tracker.yaw_accel_sd", "is %s; it must be > 0 rad/s²", num(t.YawAccelSD))
	}
	if t.GateProb <= 0 || t.GateProb >= 1 {
		v.fail("tracker.gate_prob", "is %s; a gate probability must be in (0, 1), e.g. 0.999", num(t.GateProb))
	}
	c := t.Confirm
	switch {
	case c.Hits < 1:
		v.fail("tracker.confirm.hits", "is %d; it must be ≥ 1", c.Hits)
	case c.Of < 1 || c.Of > 64:
		v.fail("tracker.confirm.of", "is %d; it must be in 1..64 scans", c.Of)
	case c.Hits > c.Of:
		v.fail("tracker.confirm.hits", "is %d, more than confirm.of %d; M-of-N confirmation needs M ≤ N", c.Hits, c.Of)
	}
	if t.DeleteMisses < 1 {
		v.fail("tracker.delete_misses", "is %d; it must be ≥ 1", t.DeleteMisses)
	}
	if t.MaxTracks < 1 || t.MaxTracks > 100000 {
		v.fail("tracker.max_tracks", "is %d; it must be in 1..100000", t.MaxTracks)
	}
}

func (v *validator) timing() {
	t := &v.c.Timing
	if t.LagMS < 0 || t.LagMS > 60000 {
		v.fail("timing.lag_ms", "is %s; it must be in 0..60000 ms (0: no out-of-sequence handling)", num(t.LagMS))
	}
	switch t.Clock {
	case ClockSynced, ClockEstimate:
	default:
		v.fail("timing.clock", "%s is unknown; expected synced or estimate", clip(t.Clock))
	}
}

func (v *validator) output() {
	o := &v.c.Output
	for _, f := range []struct{ key, val string }{
		{"output.tracks_topic", o.TracksTopic},
		{"output.health_topic", o.HealthTopic},
		{"output.status_topic", o.StatusTopic},
	} {
		if v.given(f.key) || v.vehicleOK {
			v.topic(f.key, f.val)
		}
	}
	if o.RateHz < 0 || o.RateHz > 1000 {
		v.fail("output.rate_hz", "is %s; it must be in 0..1000 Hz (0: after every scan)", num(o.RateHz))
	}
}

// topic checks an MQTT topic godwit subscribes or publishes to by name:
// MQTT 3.1.1 §4.7 (wildcards, $-topics, at most 65535 bytes, no NUL).
func (v *validator) topic(path, t string) {
	switch {
	case t == "":
		v.fail(path, "is empty; it needs an MQTT topic")
		return
	case strings.ContainsAny(t, "+#"):
		v.fail(path, "%s has an MQTT wildcard (+ or #); it must name one topic", clip(t))
		return
	case strings.HasPrefix(t, "$"):
		v.fail(path, "%s starts with $, which MQTT reserves for the broker", clip(t))
		return
	case len(t) > 65535 || strings.ContainsRune(t, 0):
		v.fail(path, "is not a valid MQTT topic (NUL byte or longer than 65535 bytes)")
		return
	}
	if first, dup := v.topics[t]; dup {
		v.fail(path, "%q is already used by %s; every topic must be distinct", t, first)
		return
	}
	v.topics[t] = path
}

func (v *validator) metrics() {
	l := v.c.Metrics.Listen
	if l == "" {
		return // metrics off
	}
	_, port, err := net.SplitHostPort(l)
	if err == nil {
		_, err = strconv.ParseUint(port, 10, 16)
	}
	if err != nil {
		v.fail("metrics.listen", "%s is not host:port; expected e.g. 127.0.0.1:9464, or \"\" to turn metrics off", clip(l))
	}
}

func (v *validator) health() {
	h := &v.c.Health
	if h.SilentPeriods <= 0 {
		v.fail("health.silent_periods", "is %s; it must be > 0 sensor periods", num(h.SilentPeriods))
	}
	if h.RaiseMS < 0 {
		v.fail("health.raise_ms", "is %s; it must be ≥ 0 ms", num(h.RaiseMS))
	}
	if h.ClearMS < 0 {
		v.fail("health.clear_ms", "is %s; it must be ≥ 0 ms", num(h.ClearMS))
	}
	if h.EventHoldMS <= 0 {
		v.fail("health.event_hold_ms", "is %s; it must be > 0 ms", num(h.EventHoldMS))
	}
	if h.MaxPosSDM <= 0 {
		v.fail("health.max_pos_sd_m", "is %s; it must be > 0 m", num(h.MaxPosSDM))
	}
	if h.StepBudgetMS <= 0 {
		v.fail("health.step_budget_ms", "is %s; it must be > 0 ms", num(h.StepBudgetMS))
	}
	if h.ClockJumpMS <= 0 {
		v.fail("health.clock_jump_ms", "is %s; it must be > 0 ms", num(h.ClockJumpMS))
	}
}

func (v *validator) limits() {
	l := &v.c.Limits
	// 268435455 bytes is the largest MQTT packet (MQTT 3.1.1 §2.2.3).
	if l.MaxPayloadBytes < 1 || l.MaxPayloadBytes > 268435455 {
		v.fail("limits.max_payload_bytes", "is %d; it must be in 1..268435455 bytes (the MQTT maximum)", l.MaxPayloadBytes)
	}
	if l.QueueLength < 1 || l.QueueLength > 1<<20 {
		v.fail("limits.queue_length", "is %d; it must be in 1..1048576 messages", l.QueueLength)
	}
	if l.TimeWindowMS <= 0 {
		v.fail("limits.time_window_ms", "is %s; it must be > 0 ms", num(l.TimeWindowMS))
	}
}

// clip quotes a user value for a message, cut short so a pasted blob does
// not drown the message.
func clip(s string) string {
	if len(s) > 60 {
		s = s[:60] + "…"
	}
	return strconv.Quote(s)
}
