package demo

import (
	"bufio"
	"io"

	"github.com/valyala/fastjson"
)

// HealthLog follows the health messages of a run: which alerts were
// raised, the last state and the daemon's own latency figures.
type HealthLog struct {
	Messages  int
	Malformed int // payloads that are not a health object (counted, skipped)
	LastState string
	// LastP50MS and LastP99MS are the latency_ms of the last message.
	LastP50MS, LastP99MS float64

	seen   map[alertKey]bool
	alerts []string
	p      fastjson.Parser
}

type alertKey struct{ code, sensor string }

// Add reads one health message.
func (h *HealthLog) Add(payload []byte) {
	v, err := h.p.ParseBytes(payload)
	if err != nil || v.Type() != fastjson.TypeObject {
		h.Malformed++
		return
	}
	h.Messages++
	if s := v.GetStringBytes("state"); s != nil {
		h.LastState = string(s)
	}
	if l := v.Get("latency_ms"); l != nil {
		h.LastP50MS, h.LastP99MS = l.GetFloat64("p50"), l.GetFloat64("p99")
	}
	for _, a := range v.GetArray("alerts") {
		k := alertKey{string(a.GetStringBytes("code")), string(a.GetStringBytes("sensor"))}
		if k.code == "" {
			continue
		}
		if h.seen == nil {
			h.seen = map[alertKey]bool{}
		}
		if !h.seen[k] {
			h.seen[k] = true
			name := k.code
			if k.sensor != "" {
				name += " " + k.sensor
			}
			h.alerts = append(h.alerts, name)
		}
	}
}

// ReadFrom reads a health file (one message a line).
func (h *HealthLog) ReadFrom(r io.Reader) (int64, error) {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 64<<10), 16<<20)
	var n int64
	for sc.Scan() {
		n += int64(len(sc.Bytes())) + 1
		if len(sc.Bytes()) > 0 {
			h.Add(sc.Bytes())
		}
	}
	return n, sc.Err()
}

// Alerts lists the distinct alerts raised ("code sensor"), first raised first.
func (h *HealthLog) Alerts() []string { return h.alerts }
