package demo

import (
	"math"
	"testing"

	"github.com/valyala/fastjson"
)

// Health messages come off the broker: any bytes must be read or counted
// as malformed, never panic, and an alert is listed once.
func FuzzHealthLog(f *testing.F) {
	f.Add([]byte(`{"v":1,"state":"degraded","alerts":[{"code":"sensor_silent","sensor":"front_camera"}],"latency_ms":{"p50":1,"p99":2}}`))
	f.Add([]byte(`{"alerts":[{"code":1},{"sensor":"x"},null,[]],"latency_ms":[]}`))
	f.Add([]byte(`[{"state":"ok"}]`))
	f.Fuzz(func(t *testing.T, b []byte) {
		var h HealthLog
		h.Add(b)
		h.Add(b)
		if h.Messages+h.Malformed != 2 {
			t.Fatalf("%d read + %d malformed, want 2", h.Messages, h.Malformed)
		}
		seen := map[string]bool{}
		for _, a := range h.Alerts() {
			if seen[a] {
				t.Fatalf("alert %q listed twice", a)
			}
			seen[a] = true
		}
	})
}

// shiftTNs rewrites what the demo publishes: it must shift exactly t_ns by
// the offset, or leave the payload alone.
func FuzzShiftTNs(f *testing.F) {
	f.Add([]byte(`{"v":1,"sensor":"front_radar","seq":1,"t_ns":1772438400000000000,"dets":[]}`), int64(5))
	f.Add([]byte(`{"t_ns":9223372036854775807}`), int64(1))
	f.Add([]byte(`{"t_ns":-9223372036854775808}`), int64(-1))
	f.Add([]byte(`{"t_ns":1e3,"t_ns":7}`), int64(3))
	f.Fuzz(func(t *testing.T, b []byte, off int64) {
		var p fastjson.Parser
		var a fastjson.Arena
		out, tNs, ok := shiftTNs(&p, &a, nil, b, off)
		if !ok {
			return
		}
		v, err := fastjson.ParseBytes(out)
		if err != nil {
			t.Fatalf("shifted payload %q is not JSON: %v", out, err)
		}
		got, err := v.Get("t_ns").Int64()
		if err != nil || got != tNs {
			t.Fatalf("t_ns %d (%v), reported %d", got, err, tNs)
		}
		orig, _ := fastjson.ParseBytes(b)
		o, _ := orig.Get("t_ns").Int64()
		// The true sum, in floating point, must match: no wrap-around.
		if o+off != tNs || math.Abs(float64(o)+float64(off)-float64(tNs)) > 1e-6*math.Abs(float64(tNs))+1 {
			t.Fatalf("t_ns %d + %d gave %d", o, off, tNs)
		}
	})
}
