package fleet

import (
	"fmt"
	"math"
	"strconv"

	"github.com/godwit-fusion/godwit/transport"
	"github.com/valyala/fastjson"
)

// Reasons a received message is refused. They label
// godwit_fleet_messages_rejected_total and the store's counters.
const (
	ReasonTooLarge        = "too_large"        // payload over the size limit
	ReasonBadJSON         = "bad_json"         // not JSON, or not an object
	ReasonBadVersion      = "bad_version"      // "v" is not 1
	ReasonBadField        = "bad_field"        // a field is missing or of the wrong type or range
	ReasonVehicleMismatch = "vehicle_mismatch" // "vehicle" differs from the topic's vehicle
	ReasonBadStatus       = "bad_status"       // status payload is not online or offline
	ReasonTooManyVehicles = "too_many_vehicles"
)

// Reasons lists every rejection reason in a fixed order (metrics, API).
var Reasons = []string{ReasonTooLarge, ReasonBadJSON, ReasonBadVersion, ReasonBadField,
	ReasonVehicleMismatch, ReasonBadStatus, ReasonTooManyVehicles}

// MaxHealthBytes bounds a health message, as the decoder of the
// measurement messages bounds those (transport.DefaultMaxPayloadBytes).
const MaxHealthBytes = transport.DefaultMaxPayloadBytes

// Bounds on what one message may make the monitor keep, so a faulty or
// hostile publisher cannot grow its memory without limit.
const (
	maxAlertsPerMsg  = 256
	maxSensorsPerMsg = 256
	maxStringBytes   = 512
)

// RejectError says why a message was refused, in words a person can act on.
type RejectError struct {
	Reason string // one of Reasons
	Topic  string
	Detail string
}

func (e *RejectError) Error() string {
	return fmt.Sprintf("rejected message on %s: %s (%s)", e.Topic, e.Detail, e.Reason)
}

// Health is a decoded v1 health message (DESIGN.md). Numbers the vehicle
// could not state (encoded as null because they were not finite) are NaN.
type Health struct {
	Vehicle   string
	TNs       int64
	State     string // ok | degraded | failed
	Alerts    []transport.Alert
	Sensors   []transport.SensorHealth // in message order
	Rejected  []transport.ReasonCount
	Late      uint64
	LatencyMS transport.Latency
}

// healthDecoder validates health messages. It keeps a fastjson parser, so
// it is not safe for concurrent use; the store guards it with its lock.
type healthDecoder struct {
	p fastjson.Parser
}

func reject(topic, reason, format string, a ...any) *RejectError {
	return &RejectError{Reason: reason, Topic: topic, Detail: fmt.Sprintf(format, a...)}
}

// decode checks payload against the v1 health contract and copies it into a
// fresh Health (nothing refers to the parser's buffer afterwards). The whole
// message is refused when any part is invalid, as the engine does with
// measurements: a half-read report would show a state the vehicle never had.
func (d *healthDecoder) decode(topic string, payload []byte) (*Health, error) {
	if len(payload) > MaxHealthBytes {
		return nil, reject(topic, ReasonTooLarge, "%d bytes, limit %d", len(payload), MaxHealthBytes)
	}
	v, err := d.p.ParseBytes(payload)
	if err != nil {
		return nil, reject(topic, ReasonBadJSON, "%v", err)
	}
	if v.Type() != fastjson.TypeObject {
		return nil, reject(topic, ReasonBadJSON, "payload is a JSON %s, want an object", v.Type())
	}
	vv := v.Get("v")
	if vv == nil || vv.Type() != fastjson.TypeNumber || vv.String() != strconv.Itoa(transport.Version) {
		return nil, reject(topic, ReasonBadVersion, "v is %s, want %d", short(v.Get("v")), transport.Version)
	}
	h := &Health{}
	if h.Vehicle, err = str(v, "vehicle", true); err != nil {
		return nil, reject(topic, ReasonBadField, "%v", err)
	}
	if h.TNs, err = int64Field(v, "t_ns"); err != nil {
		return nil, reject(topic, ReasonBadField, "%v", err)
	}
	if h.TNs <= 0 {
		return nil, reject(topic, ReasonBadField, "t_ns is %d, want > 0", h.TNs)
	}
	if h.State, err = str(v, "state", true); err != nil {
		return nil, reject(topic, ReasonBadField, "%v", err)
	}
	if !validState(h.State) {
		return nil, reject(topic, ReasonBadField, "state is %q, want ok, degraded or failed", h.State)
	}
	if err := decodeAlerts(v, h); err != nil {
		return nil, reject(topic, ReasonBadField, "%v", err)
	}
	if err := decodeSensors(v, h); err != nil {
		return nil, reject(topic, ReasonBadField, "%v", err)
	}
	if err := decodeCounters(v, h); err != nil {
		return nil, reject(topic, ReasonBadField, "%v", err)
	}
	if lat := v.Get("latency_ms"); lat != nil {
		if lat.Type() != fastjson.TypeObject {
			return nil, reject(topic, ReasonBadField, "latency_ms is a %s, want an object", lat.Type())
		}
		if h.LatencyMS.P50, err = number(lat, "p50", "latency_ms.p50"); err != nil {
			return nil, reject(topic, ReasonBadField, "%v", err)
		}
		if h.LatencyMS.P99, err = number(lat, "p99", "latency_ms.p99"); err != nil {
			return nil, reject(topic, ReasonBadField, "%v", err)
		}
	}
	return h, nil
}

func validState(s string) bool { return s == "ok" || s == "degraded" || s == "failed" }

func decodeAlerts(v *fastjson.Value, h *Health) error {
	av := v.Get("alerts")
	if av == nil {
		return fmt.Errorf("alerts is missing")
	}
	arr, err := av.Array()
	if err != nil {
		return fmt.Errorf("alerts is a %s, want an array", av.Type())
	}
	if len(arr) > maxAlertsPerMsg {
		return fmt.Errorf("%d alerts, limit %d", len(arr), maxAlertsPerMsg)
	}
	h.Alerts = make([]transport.Alert, 0, len(arr))
	for i, a := range arr {
		if a.Type() != fastjson.TypeObject {
			return fmt.Errorf("alerts[%d] is a %s, want an object", i, a.Type())
		}
		var al transport.Alert
		if al.Code, err = str(a, "code", true); err != nil {
			return fmt.Errorf("alerts[%d].%v", i, err)
		}
		if al.Sensor, err = str(a, "sensor", false); err != nil {
			return fmt.Errorf("alerts[%d].%v", i, err)
		}
		if al.Detail, err = str(a, "detail", false); err != nil {
			return fmt.Errorf("alerts[%d].%v", i, err)
		}
		if al.Severity, err = str(a, "severity", false); err != nil {
			return fmt.Errorf("alerts[%d].%v", i, err)
		}
		if al.SinceNs, err = int64Field(a, "since_ns"); err != nil {
			return fmt.Errorf("alerts[%d].%v", i, err)
		}
		if tv := a.Get("track"); tv != nil {
			if al.Track, err = tv.Uint64(); err != nil {
				return fmt.Errorf("alerts[%d].track is %s, want a track id", i, short(tv))
			}
		}
		h.Alerts = append(h.Alerts, al)
	}
	return nil
}

func decodeSensors(v *fastjson.Value, h *Health) error {
	sv := v.Get("sensors")
	if sv == nil {
		return nil // a vehicle without configured sensors is legal
	}
	obj, err := sv.Object()
	if err != nil {
		return fmt.Errorf("sensors is a %s, want an object", sv.Type())
	}
	if obj.Len() > maxSensorsPerMsg {
		return fmt.Errorf("%d sensors, limit %d", obj.Len(), maxSensorsPerMsg)
	}
	var ferr error
	obj.Visit(func(key []byte, s *fastjson.Value) {
		if ferr != nil {
			return
		}
		name := string(key)
		if name == "" || len(name) > maxStringBytes {
			ferr = fmt.Errorf("sensors has a name of %d bytes, want 1 to %d", len(name), maxStringBytes)
			return
		}
		if s.Type() != fastjson.TypeObject {
			ferr = fmt.Errorf("sensors.%s is a %s, want an object", name, s.Type())
			return
		}
		sh := transport.SensorHealth{Name: name}
		var err error
		if sh.RateHz, err = number(s, "rate_hz", "sensors."+name+".rate_hz"); err != nil {
			ferr = err
			return
		}
		if sh.AgeMS, err = number(s, "age_ms", "sensors."+name+".age_ms"); err != nil {
			ferr = err
			return
		}
		for _, f := range []struct {
			key string
			dst *uint64
		}{{"lost", &sh.Lost}, {"rejected", &sh.Rejected}, {"late_dropped", &sh.LateDropped}} {
			if fv := s.Get(f.key); fv != nil {
				if *f.dst, err = fv.Uint64(); err != nil {
					ferr = fmt.Errorf("sensors.%s.%s is %s, want a count", name, f.key, short(fv))
					return
				}
			}
		}
		sh.NISOK = true
		if nv := s.Get("nis_ok"); nv != nil {
			if sh.NISOK, err = nv.Bool(); err != nil {
				ferr = fmt.Errorf("sensors.%s.nis_ok is %s, want true or false", name, short(nv))
				return
			}
		}
		h.Sensors = append(h.Sensors, sh)
	})
	return ferr
}

func decodeCounters(v *fastjson.Value, h *Health) error {
	cv := v.Get("counters")
	if cv == nil {
		return nil
	}
	if cv.Type() != fastjson.TypeObject {
		return fmt.Errorf("counters is a %s, want an object", cv.Type())
	}
	if lv := cv.Get("late_dropped"); lv != nil {
		var err error
		if h.Late, err = lv.Uint64(); err != nil {
			return fmt.Errorf("counters.late_dropped is %s, want a count", short(lv))
		}
	}
	rv := cv.Get("rejected")
	if rv == nil {
		return nil
	}
	obj, err := rv.Object()
	if err != nil {
		return fmt.Errorf("counters.rejected is a %s, want an object", rv.Type())
	}
	if obj.Len() > maxAlertsPerMsg {
		return fmt.Errorf("counters.rejected has %d reasons, limit %d", obj.Len(), maxAlertsPerMsg)
	}
	var ferr error
	obj.Visit(func(key []byte, n *fastjson.Value) {
		if ferr != nil {
			return
		}
		c, err := n.Uint64()
		if err != nil || len(key) == 0 || len(key) > maxStringBytes {
			ferr = fmt.Errorf("counters.rejected.%.40s is %s, want a count", key, short(n))
			return
		}
		h.Rejected = append(h.Rejected, transport.ReasonCount{Reason: string(key), Count: c})
	})
	return ferr
}

// str reads a string field; absent is an error only when required.
func str(v *fastjson.Value, key string, required bool) (string, error) {
	f := v.Get(key)
	if f == nil {
		if required {
			return "", fmt.Errorf("%s is missing", key)
		}
		return "", nil
	}
	b, err := f.StringBytes()
	if err != nil {
		return "", fmt.Errorf("%s is %s, want a string", key, short(f))
	}
	if required && len(b) == 0 {
		return "", fmt.Errorf("%s is empty", key)
	}
	if len(b) > maxStringBytes {
		return "", fmt.Errorf("%s has %d bytes, limit %d", key, len(b), maxStringBytes)
	}
	return string(b), nil
}

func int64Field(v *fastjson.Value, key string) (int64, error) {
	f := v.Get(key)
	if f == nil {
		return 0, fmt.Errorf("%s is missing", key)
	}
	n, err := f.Int64()
	if err != nil {
		return 0, fmt.Errorf("%s is %s, want an integer (ns since the Unix epoch)", key, short(f))
	}
	return n, nil
}

// number reads an optional number; null (how godwit encodes a non-finite
// value) and absence both read as NaN, "not known".
func number(v *fastjson.Value, key, path string) (float64, error) {
	f := v.Get(key)
	if f == nil || f.Type() == fastjson.TypeNull {
		return math.NaN(), nil
	}
	if f.Type() != fastjson.TypeNumber {
		return 0, fmt.Errorf("%s is %s, want a number", path, short(f))
	}
	// strconv rounds correctly; fastjson's own Float64 can miss the last
	// bit, and the monitor should show exactly what the vehicle sent.
	var buf [32]byte
	x, err := strconv.ParseFloat(string(f.MarshalTo(buf[:0])), 64)
	if err != nil || math.IsInf(x, 0) || math.IsNaN(x) {
		return 0, fmt.Errorf("%s is %s, want a number", path, short(f))
	}
	return x, nil
}

// short renders a value for an error message, cut to a readable length.
func short(v *fastjson.Value) string {
	if v == nil {
		return "missing"
	}
	s := v.String()
	if len(s) > 40 {
		s = s[:40] + "…"
	}
	return s
}
