package scenario

import (
	"fmt"
	"math"
	"strconv"
	"strings"

	"gopkg.in/yaml.v3"

	"github.com/godwit-fusion/godwit/configs/yamlstrict"
)

// origin prefixes every scenario message with "scenario".
type origin struct{}

func (origin) Prefix() string { return "scenario" }

// Error is one problem of a scenario file, located by file and line and named
// by the key path (e.g. targets[2].speed). It formats as
// "scenario: FILE:LINE: PATH MSG".
type Error = yamlstrict.Error[origin]

// ErrorList is every problem found in one scenario file, in file order, so a
// person fixes them all in one pass.
type ErrorList = yamlstrict.ErrorList[origin]

// maxNodes bounds the work of one decode: aliases can make a small file
// expand exponentially, and no honest scenario comes near this many values.
const maxNodes = 200000

// decoder walks yaml.v3 nodes by hand: the scenario format has unions
// (motion kinds) and a mapping keyed by sensor name, and every value needs
// its line for the messages.
type decoder struct {
	yamlstrict.Doc[origin]
}

func newDecoder(file string) *decoder {
	return &decoder{yamlstrict.Doc[origin]{File: file, MaxNodes: maxNodes}}
}

func (d *decoder) errorf(line int, path, format string, a ...any) {
	d.Add(line, 0, path, format, a...)
}

func (d *decoder) list() error {
	if len(d.Errs) == 0 {
		return nil
	}
	d.Sort()
	return &ErrorList{Errors: d.Errs}
}

func describe(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	case yaml.ScalarNode:
		v := n.Value
		if len(v) > 40 {
			v = v[:40] + "…"
		}
		if n.Tag == "!!str" {
			return strconv.Quote(v)
		}
		return v
	}
	return "an unsupported YAML value"
}

// field is one key of a mapping with its value node.
type field struct {
	key  string
	line int
	val  *yaml.Node
}

// mapping is a decoded YAML mapping: its fields in file order and by name.
type mapping struct {
	line   int
	path   string
	fields []field
	byKey  map[string]*yaml.Node
}

func (m *mapping) get(key string) *yaml.Node {
	if m == nil {
		return nil
	}
	return m.byKey[key]
}

// mapping reads n as a mapping whose keys must be among allowed (nil allows
// any key, for the sensors mapping). Unknown and repeated keys are reported;
// merge keys (<<) are refused because they hide where a value came from.
func (d *decoder) mapping(n *yaml.Node, path string, allowed []string) *mapping {
	n = d.Resolve(n)
	if n == nil {
		return nil
	}
	if n.Kind != yaml.MappingNode {
		what := "must be a mapping"
		if path == "" {
			what = "the top level must be a mapping of keys (config, duration_s, targets, ...)"
			d.errorf(n.Line, "", "%s, got %s", what, describe(n))
			return nil
		}
		d.errorf(n.Line, path, "%s, got %s", what, describe(n))
		return nil
	}
	m := &mapping{line: n.Line, path: path, byKey: map[string]*yaml.Node{}}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k := d.Resolve(n.Content[i])
		if k == nil {
			return m
		}
		if k.Kind == yaml.ScalarNode && k.Tag == "!!merge" {
			d.errorf(k.Line, path, "uses a merge key (<<); write the keys out, so each value has one place in the file")
			continue
		}
		if k.Kind != yaml.ScalarNode {
			d.errorf(k.Line, path, "has a key that is not a plain name (%s)", describe(k))
			continue
		}
		name := k.Value
		if allowed != nil && !contains(allowed, name) {
			msg := fmt.Sprintf("unknown key %q", name)
			if path != "" {
				msg = "has " + msg
			}
			if s := closest(name, allowed); s != "" {
				msg += fmt.Sprintf(" (did you mean %s?)", s)
			} else {
				msg += fmt.Sprintf(" (known: %s)", strings.Join(allowed, ", "))
			}
			d.errorf(k.Line, path, "%s", msg)
			continue
		}
		if _, dup := m.byKey[name]; dup {
			d.errorf(k.Line, yamlstrict.Join(path, name), "is given twice")
			continue
		}
		m.byKey[name] = n.Content[i+1]
		m.fields = append(m.fields, field{key: name, line: k.Line, val: n.Content[i+1]})
	}
	return m
}

func contains(list []string, s string) bool {
	for _, x := range list {
		if x == s {
			return true
		}
	}
	return false
}

// closest suggests the allowed key within edit distance 2 of a mistyped one,
// or the one it abbreviates (latency → latency_ms).
func closest(s string, allowed []string) string {
	best, bestD := "", 3
	for _, a := range allowed {
		if len(s) >= 3 && strings.HasPrefix(a, s) {
			return a
		}
		if d := yamlstrict.EditDistance(s, a); d < bestD {
			best, bestD = a, d
		}
	}
	return best
}

// scalar returns n resolved when it is a non-null scalar, reporting otherwise.
func (d *decoder) scalar(n *yaml.Node, path, want string) *yaml.Node {
	n = d.Resolve(n)
	if n == nil {
		return nil
	}
	if n.Kind != yaml.ScalarNode || yamlstrict.IsNull(n) {
		d.errorf(n.Line, path, "must be %s, got %s", want, describe(n))
		return nil
	}
	return n
}

func (d *decoder) str(n *yaml.Node, path string) (string, bool) {
	s := d.scalar(n, path, "a string")
	if s == nil {
		return "", false
	}
	return s.Value, true
}

func (d *decoder) num(n *yaml.Node, path string) (float64, bool) {
	s := d.scalar(n, path, "a number")
	if s == nil {
		return 0, false
	}
	if s.Tag != "!!int" && s.Tag != "!!float" {
		d.errorf(s.Line, path, "must be a number, got %s", describe(s))
		return 0, false
	}
	f, err := strconv.ParseFloat(strings.ReplaceAll(s.Value, "_", ""), 64)
	if err != nil {
		var v float64
		if err2 := s.Decode(&v); err2 != nil {
			d.errorf(s.Line, path, "must be a number, got %s", describe(s))
			return 0, false
		}
		f = v
	}
	if math.IsNaN(f) || math.IsInf(f, 0) {
		d.errorf(s.Line, path, "must be a finite number, got %s", s.Value)
		return 0, false
	}
	return f, true
}

// numIn reads a number and checks lo ≤ v ≤ hi (bounds as words in msg).
func (d *decoder) numIn(n *yaml.Node, path string, lo, hi float64, rangeWords string) (float64, bool) {
	v, ok := d.num(n, path)
	if !ok {
		return 0, false
	}
	if v < lo || v > hi {
		d.errorf(d.Resolve(n).Line, path, "is %s, must be %s", fmtNum(v), rangeWords)
		return 0, false
	}
	return v, true
}

func (d *decoder) integer(n *yaml.Node, path string) (int64, bool) {
	s := d.scalar(n, path, "a whole number")
	if s == nil {
		return 0, false
	}
	if s.Tag != "!!int" {
		d.errorf(s.Line, path, "must be a whole number, got %s", describe(s))
		return 0, false
	}
	var i int64
	if err := s.Decode(&i); err != nil {
		d.errorf(s.Line, path, "%s is out of range for a whole number", s.Value)
		return 0, false
	}
	return i, true
}

func (d *decoder) boolean(n *yaml.Node, path string) (bool, bool) {
	s := d.scalar(n, path, "true or false")
	if s == nil {
		return false, false
	}
	var b bool
	if s.Tag != "!!bool" || s.Decode(&b) != nil {
		d.errorf(s.Line, path, "must be true or false, got %s", describe(s))
		return false, false
	}
	return b, true
}

// seq reads n as a list and returns its items.
func (d *decoder) seq(n *yaml.Node, path string) ([]*yaml.Node, int, bool) {
	n = d.Resolve(n)
	if n == nil {
		return nil, 0, false
	}
	if n.Kind != yaml.SequenceNode {
		d.errorf(n.Line, path, "must be a list, got %s", describe(n))
		return nil, n.Line, false
	}
	return n.Content, n.Line, true
}

// nums reads a list of numbers; want > 0 demands that many.
func (d *decoder) nums(n *yaml.Node, path string, want int, what string) ([]float64, bool) {
	items, line, ok := d.seq(n, path)
	if !ok {
		return nil, false
	}
	if want > 0 && len(items) != want {
		d.errorf(line, path, "has %d values, %s needs %d", len(items), what, want)
		return nil, false
	}
	out := make([]float64, len(items))
	good := true
	for i, it := range items {
		v, ok := d.num(it, fmt.Sprintf("%s[%d]", path, i))
		good = good && ok
		out[i] = v
	}
	return out, good
}

// maxCoord bounds site coordinates and velocities: 1000 km (or km/s) is far
// beyond any site, and keeps every later sum finite.
const maxCoord = 1e6

// point reads [x, y] in metres (or m/s).
func (d *decoder) point(n *yaml.Node, path string) (Vec, bool) {
	v, ok := d.nums(n, path, 2, "a point [x, y]")
	if !ok {
		return Vec{}, false
	}
	for i, x := range v {
		if math.Abs(x) > maxCoord {
			d.errorf(line(n), fmt.Sprintf("%s[%d]", path, i), "is %s, beyond ±%g", fmtNum(x), maxCoord)
			return Vec{}, false
		}
	}
	return Vec{v[0], v[1]}, true
}

func line(n *yaml.Node) int {
	for n != nil && n.Kind == yaml.AliasNode {
		n = n.Alias
	}
	if n == nil {
		return 0
	}
	return n.Line
}

func fmtNum(v float64) string { return strconv.FormatFloat(v, 'g', -1, 64) }
