package transport

import (
	"errors"
	"math"
	"strconv"
	"unicode/utf8"
)

// ErrNonFinite reports that an encoder met NaN or ±Inf and wrote null in its
// place. The output is still valid JSON; the caller should count this, since
// it means an estimate upstream has broken.
var ErrNonFinite = errors.New("transport: non-finite number encoded as null")

// jsonWriter appends JSON text to a caller-owned buffer and remembers whether
// a non-finite number had to be replaced.
type jsonWriter struct {
	b         []byte
	nonFinite bool
}

func (w *jsonWriter) raw(s string) { w.b = append(w.b, s...) }

func (w *jsonWriter) float(f float64) {
	if math.IsNaN(f) || math.IsInf(f, 0) {
		w.b = append(w.b, "null"...)
		w.nonFinite = true
		return
	}
	// Shortest representation that parses back to the same float64.
	w.b = strconv.AppendFloat(w.b, f, 'g', -1, 64)
}

// memoWriter is a jsonWriter that writes a float it has just written by
// copying the earlier text. A tracks message repeats most of its numbers bit
// for bit (pos is the head of state, pos_cov a block of state_cov, and
// state_cov is symmetric): 16 of each track's 38 floats, whose formatting is
// the encoder's main cost. Equal bits give equal shortest text, so the
// output is the same byte for byte.
type memoWriter struct {
	jsonWriter
	off  bool // format every float (the tests' reference)
	memo [64]struct {
		bits       uint64
		start, end int32 // the text in b; end 0: empty slot
	}
}

func (w *memoWriter) float(f float64) {
	if w.off || math.IsNaN(f) || math.IsInf(f, 0) {
		w.jsonWriter.float(f)
		return
	}
	bits := math.Float64bits(f)
	// Multiplicative hash (Knuth's golden-ratio constant), top 6 bits.
	e := &w.memo[(bits*0x9E3779B97F4A7C15)>>58]
	if e.end > 0 && e.bits == bits {
		w.b = append(w.b, w.b[e.start:e.end]...)
		return
	}
	start := len(w.b)
	w.jsonWriter.float(f)
	if len(w.b) <= math.MaxInt32 {
		e.bits, e.start, e.end = bits, int32(start), int32(len(w.b))
	}
}

func (w *memoWriter) floats(fs []float64) {
	w.b = append(w.b, '[')
	for i, f := range fs {
		if i > 0 {
			w.b = append(w.b, ',')
		}
		w.float(f)
	}
	w.b = append(w.b, ']')
}

func (w *jsonWriter) floats(fs []float64) {
	w.b = append(w.b, '[')
	for i, f := range fs {
		if i > 0 {
			w.b = append(w.b, ',')
		}
		w.float(f)
	}
	w.b = append(w.b, ']')
}

func (w *jsonWriter) int(i int64)   { w.b = strconv.AppendInt(w.b, i, 10) }
func (w *jsonWriter) uint(u uint64) { w.b = strconv.AppendUint(w.b, u, 10) }

func (w *jsonWriter) bool(v bool) {
	if v {
		w.raw("true")
	} else {
		w.raw("false")
	}
}

func (w *jsonWriter) done() ([]byte, error) {
	if w.nonFinite {
		return w.b, ErrNonFinite
	}
	return w.b, nil
}

const hexDigits = "0123456789abcdef"

// str appends s as a JSON string. Invalid UTF-8 becomes U+FFFD and U+2028/9
// are escaped, as encoding/json does, so any consumer can parse the output.
func (w *jsonWriter) str(s string) {
	b := append(w.b, '"')
	start := 0
	for i := 0; i < len(s); {
		c := s[i]
		if c < utf8.RuneSelf {
			if c >= 0x20 && c != '"' && c != '\\' {
				i++
				continue
			}
			b = append(b, s[start:i]...)
			switch c {
			case '"', '\\':
				b = append(b, '\\', c)
			case '\n':
				b = append(b, '\\', 'n')
			case '\r':
				b = append(b, '\\', 'r')
			case '\t':
				b = append(b, '\\', 't')
			default:
				b = append(b, '\\', 'u', '0', '0', hexDigits[c>>4], hexDigits[c&0xf])
			}
			i++
			start = i
			continue
		}
		r, size := utf8.DecodeRuneInString(s[i:])
		if r == utf8.RuneError && size == 1 {
			b = append(b, s[start:i]...)
			b = append(b, `\ufffd`...)
			i += size
			start = i
			continue
		}
		if r == '\u2028' || r == '\u2029' {
			b = append(b, s[start:i]...)
			b = append(b, '\\', 'u', '2', '0', '2', hexDigits[r&0xf])
			i += size
			start = i
			continue
		}
		i += size
	}
	b = append(b, s[start:]...)
	w.b = append(b, '"')
}

// AppendMeasurement appends m as a v1 measurement message (DESIGN.md) to dst.
// Only z[:Dim] and, when HasR, r[:Dim²] are written; class is omitted when
// empty and score unless HasScore. The error is ErrNonFinite or nil; the
// bytes are valid JSON either way.
func AppendMeasurement(dst []byte, m *Measurement) ([]byte, error) {
	w := jsonWriter{b: dst}
	w.raw(`{"v":1,"sensor":`)
	w.str(m.Sensor)
	w.raw(`,"seq":`)
	w.uint(m.Seq)
	w.raw(`,"t_ns":`)
	w.int(m.TNs)
	w.raw(`,"dets":[`)
	for i := range m.Dets {
		d := &m.Dets[i]
		if i > 0 {
			w.raw(",")
		}
		n := min(max(d.Dim, 0), MaxMeasDim)
		w.raw(`{"z":`)
		w.floats(d.Z[:n])
		if d.HasR {
			w.raw(`,"r":`)
			w.floats(d.R[:n*n])
		}
		if d.Class != "" {
			w.raw(`,"class":`)
			w.str(d.Class)
		}
		if d.HasScore {
			w.raw(`,"score":`)
			w.float(d.Score)
		}
		w.raw("}")
	}
	w.raw("]}")
	return w.done()
}

// AppendTracks appends m as a v1 tracks message (DESIGN.md; field order as
// shown there) to dst. frame is always "site"; a track's class is omitted
// when empty and ego when nil. The error is ErrNonFinite or nil; the bytes
// are valid JSON either way.
func AppendTracks(dst []byte, m *TracksMsg) ([]byte, error) {
	return appendTracks(dst, m, true)
}

func appendTracks(dst []byte, m *TracksMsg, memo bool) ([]byte, error) {
	w := memoWriter{jsonWriter: jsonWriter{b: dst}, off: !memo}
	w.raw(`{"v":1,"vehicle":`)
	w.str(m.Vehicle)
	w.raw(`,"seq":`)
	w.uint(m.Seq)
	w.raw(`,"t_ns":`)
	w.int(m.TNs)
	w.raw(`,"frame":"site","tracks":[`)
	for i := range m.Tracks {
		t := &m.Tracks[i]
		if i > 0 {
			w.raw(",")
		}
		w.raw(`{"id":`)
		w.uint(t.ID)
		w.raw(`,"status":`)
		w.str(t.Status)
		w.raw(`,"pos":`)
		w.floats(t.Pos[:])
		w.raw(`,"vel":`)
		w.floats(t.Vel[:])
		w.raw(`,"pos_cov":`)
		w.floats(t.PosCov[:])
		w.raw(`,"model":`)
		w.str(t.Model)
		w.raw(`,"state":`)
		w.floats(t.State)
		w.raw(`,"state_cov":`)
		w.floats(t.StateCov)
		w.raw(`,"updated_ns":`)
		w.int(t.UpdatedNs)
		w.raw(`,"hits":`)
		w.int(int64(t.Hits))
		w.raw(`,"misses":`)
		w.int(int64(t.Misses))
		if t.Class != "" {
			w.raw(`,"class":`)
			w.str(t.Class)
		}
		w.raw("}")
	}
	w.raw("]")
	if e := m.Ego; e != nil {
		w.raw(`,"ego":{"pos":`)
		w.floats(e.Pos[:])
		w.raw(`,"yaw":`)
		w.float(e.Yaw)
		w.raw(`,"vel":`)
		w.floats(e.Vel[:])
		w.raw(`,"pos_cov":`)
		w.floats(e.PosCov[:])
		w.raw("}")
	}
	w.raw("}")
	return w.done()
}

// AppendHealth appends m as a v1 health message (DESIGN.md) to dst. sensors
// is an object keyed by name in the order of m.Sensors (configuration order),
// counters.rejected an object in the order of m.Counters.Rejected. An alert's
// sensor is omitted when empty; track and severity, extensions of the
// example, are omitted when zero. The error is ErrNonFinite or nil; the bytes
// are valid JSON either way.
func AppendHealth(dst []byte, m *HealthMsg) ([]byte, error) {
	w := jsonWriter{b: dst}
	w.raw(`{"v":1,"vehicle":`)
	w.str(m.Vehicle)
	w.raw(`,"t_ns":`)
	w.int(m.TNs)
	w.raw(`,"state":`)
	w.str(m.State)
	w.raw(`,"alerts":[`)
	for i := range m.Alerts {
		a := &m.Alerts[i]
		if i > 0 {
			w.raw(",")
		}
		w.raw(`{"code":`)
		w.str(a.Code)
		if a.Sensor != "" {
			w.raw(`,"sensor":`)
			w.str(a.Sensor)
		}
		w.raw(`,"since_ns":`)
		w.int(a.SinceNs)
		w.raw(`,"detail":`)
		w.str(a.Detail)
		if a.Track != 0 {
			w.raw(`,"track":`)
			w.uint(a.Track)
		}
		if a.Severity != "" {
			w.raw(`,"severity":`)
			w.str(a.Severity)
		}
		w.raw("}")
	}
	w.raw(`],"sensors":{`)
	for i := range m.Sensors {
		s := &m.Sensors[i]
		if i > 0 {
			w.raw(",")
		}
		w.str(s.Name)
		w.raw(`:{"rate_hz":`)
		w.float(s.RateHz)
		w.raw(`,"age_ms":`)
		w.float(s.AgeMS)
		w.raw(`,"lost":`)
		w.uint(s.Lost)
		w.raw(`,"rejected":`)
		w.uint(s.Rejected)
		w.raw(`,"late_dropped":`)
		w.uint(s.LateDropped)
		w.raw(`,"nis_ok":`)
		w.bool(s.NISOK)
		w.raw("}")
	}
	w.raw(`},"counters":{"rejected":{`)
	for i, rc := range m.Counters.Rejected {
		if i > 0 {
			w.raw(",")
		}
		w.str(rc.Reason)
		w.raw(":")
		w.uint(rc.Count)
	}
	w.raw(`},"late_dropped":`)
	w.uint(m.Counters.LateDropped)
	w.raw(`},"latency_ms":{"p50":`)
	w.float(m.LatencyMS.P50)
	w.raw(`,"p99":`)
	w.float(m.LatencyMS.P99)
	w.raw("}}")
	return w.done()
}
