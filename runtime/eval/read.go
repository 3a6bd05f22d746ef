package eval

import (
	"bufio"
	"errors"
	"fmt"
	"io"
	"math"

	"github.com/godwit-fusion/godwit/transport"
	"github.com/valyala/fastjson"
)

// TruthLine is one line of a truth file (DESIGN.md, "Recording file"):
// where every object really was at TNs, in the site frame.
type TruthLine struct {
	TNs     int64
	Objects []TruthObject
	Ego     *TruthEgo // nil when the line has no "ego"
}

// TruthObject is one true object. IDs are the scenario's names ("p1").
type TruthObject struct {
	ID       string
	Pos, Vel [2]float64
}

// TruthEgo is the platform's true pose.
type TruthEgo struct {
	Pos [2]float64
	Yaw float64
}

// maxLine bounds one JSON line of a truth or tracks file: the recording
// limit, far above any real line, so a corrupt file cannot exhaust memory.
const maxLine = transport.DefaultMaxLineBytes

// LineError is a problem at one line of an input file.
type LineError struct {
	File string // "truth" or "tracks"
	Line int    // 1-based
	Msg  string
}

func (e *LineError) Error() string { return fmt.Sprintf("eval: %s line %d: %s", e.File, e.Line, e.Msg) }

// ReadTruth reads a whole truth file. Blank lines are skipped; anything else
// that is not a valid truth line, or a t_ns not later than the line before,
// stops the read with a *LineError: a score against a partly read truth
// would mislead. Object velocities are optional (0 when absent).
func ReadTruth(r io.Reader) ([]TruthLine, error) {
	var out []TruthLine
	var p fastjson.Parser
	err := eachLine(r, "truth", func(n int, b []byte) error {
		v, err := p.ParseBytes(b)
		if err != nil {
			return &LineError{"truth", n, "not JSON: " + err.Error()}
		}
		tl, msg := parseTruth(v)
		if msg != "" {
			return &LineError{"truth", n, msg}
		}
		if k := len(out); k > 0 && tl.TNs <= out[k-1].TNs {
			return &LineError{"truth", n, fmt.Sprintf("t_ns %d is not after the previous line's %d", tl.TNs, out[k-1].TNs)}
		}
		out = append(out, tl)
		return nil
	})
	return out, err
}

// ReadTracks reads a tracks file (one v1 tracks message a line, as the
// replay command writes it). A track whose pos is null (the encoder's
// spelling of a non-finite number) is kept with NaN there and is left out
// of scoring by the Evaluator, which counts it. Messages are returned in
// file order (see Evaluator.AddTracks on the final message); state and
// state_cov are not kept.
func ReadTracks(r io.Reader) ([]transport.TracksMsg, error) {
	var out []transport.TracksMsg
	var p fastjson.Parser
	err := eachLine(r, "tracks", func(n int, b []byte) error {
		v, err := p.ParseBytes(b)
		if err != nil {
			return &LineError{"tracks", n, "not JSON: " + err.Error()}
		}
		m, msg := parseTracks(v)
		if msg != "" {
			return &LineError{"tracks", n, msg}
		}
		out = append(out, m)
		return nil
	})
	return out, err
}

func eachLine(r io.Reader, file string, fn func(n int, b []byte) error) error {
	sc := bufio.NewScanner(r)
	sc.Buffer(make([]byte, 0, 64<<10), maxLine)
	n := 0
	for sc.Scan() {
		n++
		b := sc.Bytes()
		if len(trimSpace(b)) == 0 {
			continue
		}
		if err := fn(n, b); err != nil {
			return err
		}
	}
	if err := sc.Err(); err != nil {
		if errors.Is(err, bufio.ErrTooLong) {
			return &LineError{file, n + 1, fmt.Sprintf("longer than %d bytes", maxLine)}
		}
		return fmt.Errorf("eval: reading %s: %w", file, err)
	}
	return nil
}

func trimSpace(b []byte) []byte {
	for len(b) > 0 && (b[0] == ' ' || b[0] == '\t' || b[0] == '\r') {
		b = b[1:]
	}
	for len(b) > 0 && (b[len(b)-1] == ' ' || b[len(b)-1] == '\t' || b[len(b)-1] == '\r') {
		b = b[:len(b)-1]
	}
	return b
}

func parseTruth(v *fastjson.Value) (TruthLine, string) {
	var tl TruthLine
	if v.Type() != fastjson.TypeObject {
		return tl, "want a JSON object"
	}
	t := v.Get("t_ns")
	if t == nil {
		return tl, "t_ns missing"
	}
	var err error
	if tl.TNs, err = int64v(t); err != nil {
		return tl, "t_ns is not an integer: " + err.Error()
	}
	objs := v.Get("objects")
	if objs == nil {
		return tl, "objects missing"
	}
	arr, err := array(objs)
	if err != nil {
		return tl, "objects is not an array"
	}
	tl.Objects = make([]TruthObject, len(arr))
	seen := make(map[string]bool, len(arr))
	for i, o := range arr {
		ob := &tl.Objects[i]
		if o.Type() != fastjson.TypeObject {
			return tl, fmt.Sprintf("objects[%d] is not an object", i)
		}
		id, err := str(o.Get("id"))
		if err != nil || len(id) == 0 {
			return tl, fmt.Sprintf("objects[%d].id must be a non-empty string", i)
		}
		ob.ID = string(id)
		if seen[ob.ID] {
			return tl, fmt.Sprintf("objects[%d].id %q repeats", i, ob.ID)
		}
		seen[ob.ID] = true
		if msg := vec2(o.Get("pos"), &ob.Pos, false); msg != "" {
			return tl, fmt.Sprintf("objects[%d].pos %s", i, msg)
		}
		if vel := o.Get("vel"); vel != nil {
			if msg := vec2(vel, &ob.Vel, false); msg != "" {
				return tl, fmt.Sprintf("objects[%d].vel %s", i, msg)
			}
		}
	}
	if e := v.Get("ego"); e != nil && e.Type() != fastjson.TypeNull {
		tl.Ego = &TruthEgo{}
		if msg := vec2(e.Get("pos"), &tl.Ego.Pos, false); msg != "" {
			return tl, "ego.pos " + msg
		}
		y := e.Get("yaw")
		if y == nil {
			return tl, "ego.yaw missing"
		}
		var msg string
		if tl.Ego.Yaw, msg = number(y, false); msg != "" {
			return tl, "ego.yaw " + msg
		}
	}
	return tl, ""
}

func parseTracks(v *fastjson.Value) (transport.TracksMsg, string) {
	var m transport.TracksMsg
	if v.Type() != fastjson.TypeObject {
		return m, "want a JSON object"
	}
	var err error
	if m.V, err = integer(v.Get("v")); err != nil || m.V != transport.Version {
		return m, fmt.Sprintf("v must be %d", transport.Version)
	}
	if m.TNs, err = int64v(v.Get("t_ns")); err != nil {
		return m, "t_ns is not an integer"
	}
	m.Vehicle = string(v.GetStringBytes("vehicle"))
	m.Seq = v.GetUint64("seq")
	m.Frame = string(v.GetStringBytes("frame"))
	if m.Frame != "site" {
		return m, fmt.Sprintf("frame %q, want \"site\"", m.Frame)
	}
	arr, err := array(v.Get("tracks"))
	if err != nil {
		return m, "tracks is not an array"
	}
	m.Tracks = make([]transport.Track, len(arr))
	for i, o := range arr {
		t := &m.Tracks[i]
		if o.Type() != fastjson.TypeObject {
			return m, fmt.Sprintf("tracks[%d] is not an object", i)
		}
		if t.ID, err = uint64v(o.Get("id")); err != nil {
			return m, fmt.Sprintf("tracks[%d].id is not an unsigned integer", i)
		}
		st, err := str(o.Get("status"))
		if err != nil {
			return m, fmt.Sprintf("tracks[%d].status is not a string", i)
		}
		t.Status = string(st)
		if msg := vec2(o.Get("pos"), &t.Pos, true); msg != "" {
			return m, fmt.Sprintf("tracks[%d].pos %s", i, msg)
		}
		if msg := vec2(o.Get("vel"), &t.Vel, true); msg != "" {
			return m, fmt.Sprintf("tracks[%d].vel %s", i, msg)
		}
		if msg := vecN(o.Get("pos_cov"), t.PosCov[:], true); msg != "" {
			return m, fmt.Sprintf("tracks[%d].pos_cov %s", i, msg)
		}
		t.Model = string(o.GetStringBytes("model"))
		t.Class = string(o.GetStringBytes("class"))
		t.UpdatedNs = o.GetInt64("updated_ns")
		t.Hits = o.GetInt("hits")
		t.Misses = o.GetInt("misses")
	}
	if e := v.Get("ego"); e != nil && e.Type() != fastjson.TypeNull {
		m.Ego = &transport.Ego{}
		if msg := vec2(e.Get("pos"), &m.Ego.Pos, true); msg != "" {
			return m, "ego.pos " + msg
		}
		var msg string
		if m.Ego.Yaw, msg = number(e.Get("yaw"), true); msg != "" {
			return m, "ego.yaw " + msg
		}
		if e.Get("vel") != nil {
			if msg := vec2(e.Get("vel"), &m.Ego.Vel, true); msg != "" {
				return m, "ego.vel " + msg
			}
		}
		if e.Get("pos_cov") != nil {
			if msg := vecN(e.Get("pos_cov"), m.Ego.PosCov[:], true); msg != "" {
				return m, "ego.pos_cov " + msg
			}
		}
	}
	return m, ""
}

func vec2(v *fastjson.Value, dst *[2]float64, nullOK bool) string { return vecN(v, dst[:], nullOK) }

// vecN reads an array of exactly len(dst) numbers; with nullOK a null
// element becomes NaN (the tracks encoder writes non-finite values as null).
func vecN(v *fastjson.Value, dst []float64, nullOK bool) string {
	if v == nil {
		return "missing"
	}
	arr, err := array(v)
	if err != nil || len(arr) != len(dst) {
		return fmt.Sprintf("must be an array of %d numbers", len(dst))
	}
	for i, e := range arr {
		var msg string
		if dst[i], msg = number(e, nullOK); msg != "" {
			return fmt.Sprintf("[%d] %s", i, msg)
		}
	}
	return ""
}

func number(v *fastjson.Value, nullOK bool) (float64, string) {
	if v == nil {
		return 0, "missing"
	}
	if v.Type() == fastjson.TypeNull && nullOK {
		return math.NaN(), ""
	}
	f, err := v.Float64()
	if err != nil {
		return 0, "is not a number"
	}
	if math.IsInf(f, 0) || math.IsNaN(f) {
		return 0, "overflows a float64"
	}
	return f, ""
}

// errMissing stands for an absent key: fastjson's typed getters need a
// value, and Get returns nil for a missing key.
var errMissing = errors.New("missing")

func str(v *fastjson.Value) ([]byte, error) {
	if v == nil {
		return nil, errMissing
	}
	return v.StringBytes()
}

func array(v *fastjson.Value) ([]*fastjson.Value, error) {
	if v == nil {
		return nil, errMissing
	}
	return v.Array()
}

func integer(v *fastjson.Value) (int, error) {
	if v == nil {
		return 0, errMissing
	}
	return v.Int()
}

func int64v(v *fastjson.Value) (int64, error) {
	if v == nil {
		return 0, errMissing
	}
	return v.Int64()
}

func uint64v(v *fastjson.Value) (uint64, error) {
	if v == nil {
		return 0, errMissing
	}
	return v.Uint64()
}
