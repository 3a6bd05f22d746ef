package transport

import "sync"

// stampScan is the reusable state of MeasurementTNs: the syntax check's
// stack and member list, and room for an escaped key.
type stampScan struct {
	syntax syntaxChecker
	key    []byte
}

// A pool keeps MeasurementTNs free of allocations and safe to call from
// any goroutine.
var stampScans = sync.Pool{New: func() any { return new(stampScan) }}

// MeasurementTNs reports the t_ns of a payload shaped like a measurement:
// a valid JSON object whose top level has an integer t_ns (no fraction or
// exponent, within int64) and a list dets, whatever else it holds or lacks
// (version, sensor) and whether Decode would accept it. A repeated key
// counts by its last value and an escaped key by its decoded name, as a
// JSON object read into a map does. This is the rule by which the v1
// contract's replay check stamps the final tracks message.
func MeasurementTNs(payload []byte) (int64, bool) {
	s := stampScans.Get().(*stampScan)
	defer stampScans.Put(s)
	if _, _, ok := s.syntax.check(payload); !ok || payload[skipSpace(payload, 0)] != '{' {
		return 0, false
	}
	var tns, dets []byte
	for _, sp := range s.syntax.top {
		k := payload[sp.k0:sp.k1]
		if hasEscape(k) {
			s.key = unquote(s.key[:0], k)
			k = s.key
		} else {
			k = k[1 : len(k)-1]
		}
		switch string(k) {
		case "t_ns":
			tns = payload[sp.v0:sp.v1]
		case "dets":
			dets = payload[sp.v0:sp.v1]
		}
	}
	if len(dets) == 0 || dets[0] != '[' {
		return 0, false
	}
	return parseInt64(tns)
}
