package configs

import (
	"fmt"
	"math"
	"reflect"
	"strconv"
	"strings"
	"unicode/utf8"

	"gopkg.in/yaml.v3"

	"github.com/godwit-fusion/godwit/configs/yamlstrict"
)

// maxNodes bounds the work of one decode. Aliases can make a small file
// expand exponentially ("billion laughs"); no honest configuration comes
// near this many values.
const maxNodes = 100000

// decoder walks a yaml.Node tree into a Config by reflection over the yaml
// struct tags. Unlike yaml.Node.Decode it keeps going after a problem, so
// every error in the file is reported at once, and it remembers which keys
// were given (for defaults) and where (for validation messages).
type decoder struct {
	yamlstrict.Doc[origin]
	lines map[string]int  // field path -> line of its value
	cols  map[string]int  // field path -> column of its value
	set   map[string]bool // field paths given in the file (non-null)
}

func newDecoder(file string) *decoder {
	return &decoder{
		// Once: a mapping merged in several places (<<) would otherwise
		// report the same mistake at the same place again.
		Doc:   yamlstrict.Doc[origin]{File: file, MaxNodes: maxNodes, Once: true},
		lines: map[string]int{},
		cols:  map[string]int{},
		set:   map[string]bool{},
	}
}

func (d *decoder) errorf(line int, path, format string, args ...any) {
	d.Add(line, 0, path, format, args...)
}

// nodeErr records a problem at a node's line and column.
func (d *decoder) nodeErr(n *yaml.Node, path, format string, args ...any) {
	d.Add(n.Line, n.Column, path, format, args...)
}

func describe(n *yaml.Node) string {
	switch n.Kind {
	case yaml.MappingNode:
		return "a mapping"
	case yaml.SequenceNode:
		return "a list"
	case yaml.ScalarNode:
		if n.Tag == "!!str" || len(n.Value) > 60 || strconv.Quote(n.Value) != `"`+n.Value+`"` {
			return clip(n.Value)
		}
		return n.Value
	}
	return "an unsupported YAML node"
}

// decode stores n into v, reporting problems under path.
func (d *decoder) decode(n *yaml.Node, v reflect.Value, path string) {
	n = d.Resolve(n)
	if n == nil {
		return
	}
	d.lines[path], d.cols[path] = n.Line, n.Column
	if yamlstrict.IsNull(n) {
		return // an empty value means "not given": the default applies
	}
	switch v.Kind() {
	case reflect.Struct:
		d.decodeStruct(n, v, path)
		return
	case reflect.Slice:
		d.decodeSlice(n, v, path)
		return
	}
	if n.Kind != yaml.ScalarNode {
		d.nodeErr(n, path, "must be %s, got %s", kindWord(v.Kind()), describe(n))
		return
	}
	switch v.Kind() {
	case reflect.String:
		// Any plain scalar reads as text: client_id: 1234 means "1234".
		s := n.Value
		if n.Tag == "!!binary" {
			if err := n.Decode(&s); err != nil {
				d.nodeErr(n, path, "holds !!binary data that is not valid base64")
				return
			}
		}
		if r, bad := badText(s); bad {
			// MQTT 3.1.1 §1.5.3: strings are well-formed UTF-8 and should hold
			// no control characters; names and paths gain nothing from them.
			d.nodeErr(n, path, "holds %s; write plain text", r)
			return
		}
		v.SetString(s)
	case reflect.Bool:
		if n.Tag != "!!bool" {
			d.nodeErr(n, path, "must be true or false, got %s", describe(n))
			return
		}
		var b bool
		if err := n.Decode(&b); err != nil {
			d.nodeErr(n, path, "must be true or false, got %s", describe(n))
			return
		}
		v.SetBool(b)
	case reflect.Int:
		if n.Tag != "!!int" {
			d.nodeErr(n, path, "must be a whole number, got %s", describe(n))
			return
		}
		var i int64
		if err := n.Decode(&i); err != nil || int64(int(i)) != i {
			d.nodeErr(n, path, "%s is out of range for a whole number", describe(n))
			return
		}
		v.SetInt(i)
	case reflect.Float64:
		if n.Tag != "!!int" && n.Tag != "!!float" {
			d.nodeErr(n, path, "must be a number, got %s", describe(n))
			return
		}
		var f float64
		if err := n.Decode(&f); err != nil {
			d.nodeErr(n, path, "must be a number, got %s", describe(n))
			return
		}
		if math.IsNaN(f) || math.IsInf(f, 0) {
			d.nodeErr(n, path, "must be a finite number, got %s", describe(n))
			return
		}
		v.SetFloat(f)
	default:
		d.nodeErr(n, path, "has an unsupported Go type %s", v.Type())
		return
	}
	d.set[path] = true
}

func kindWord(k reflect.Kind) string {
	switch k {
	case reflect.String:
		return "a string"
	case reflect.Bool:
		return "true or false"
	case reflect.Int:
		return "a whole number"
	case reflect.Float64:
		return "a number"
	case reflect.Struct:
		return "a mapping"
	case reflect.Slice:
		return "a list"
	}
	return k.String()
}

func (d *decoder) decodeSlice(n *yaml.Node, v reflect.Value, path string) {
	if n.Kind != yaml.SequenceNode {
		d.nodeErr(n, path, "must be a list, got %s", describe(n))
		return
	}
	s := reflect.MakeSlice(v.Type(), len(n.Content), len(n.Content))
	for i, c := range n.Content {
		d.decode(c, s.Index(i), fmt.Sprintf("%s[%d]", path, i))
	}
	v.Set(s)
	d.set[path] = true
}

// pair is one key: value entry of a mapping, after merge keys are expanded.
type pair struct {
	key, val *yaml.Node
}

func (d *decoder) decodeStruct(n *yaml.Node, v reflect.Value, path string) {
	if n.Kind != yaml.MappingNode {
		if path == "" {
			d.nodeErr(n, "", "the top level must be a mapping of keys (vehicle, sensors, ...), got %s", describe(n))
			return
		}
		d.nodeErr(n, path, "must be a mapping, got %s", describe(n))
		return
	}
	d.set[path] = true
	fields := yamlFields(v.Type())
	for _, p := range d.pairs(n, path) {
		key := p.key.Value
		i, ok := fields[key]
		if !ok {
			msg := "is not a known key"
			if s := suggest(key, fieldNames(v.Type())); s != "" {
				msg += "; did you mean " + s + "?"
			} else {
				msg += "; expected one of " + strings.Join(fieldNames(v.Type()), ", ")
			}
			d.nodeErr(p.key, yamlstrict.Join(path, key), "%s", msg)
			continue
		}
		d.decode(p.val, v.Field(i), yamlstrict.Join(path, key))
	}
}

// pairs lists the entries of a mapping. Keys written in the mapping come
// first; entries from YAML merge keys (<<: *anchor) fill in keys that are
// not written, as the merge key type specifies (yaml.org/type/merge).
func (d *decoder) pairs(n *yaml.Node, path string) []pair {
	var own, merged []pair
	first := map[string]int{}
	for i := 0; i+1 < len(n.Content); i += 2 {
		k := d.Resolve(n.Content[i])
		if k == nil {
			return own
		}
		if k.Kind != yaml.ScalarNode {
			d.nodeErr(k, path, "has a key that is %s; keys must be plain names", describe(k))
			continue
		}
		if k.Tag == "!!merge" {
			merged = append(merged, d.mergeSource(n.Content[i+1], path)...)
			continue
		}
		if at, dup := first[k.Value]; dup {
			d.nodeErr(k, yamlstrict.Join(path, k.Value), "is given twice (first at line %d)", at)
			continue
		}
		first[k.Value] = k.Line
		own = append(own, pair{k, n.Content[i+1]})
	}
	for _, p := range merged {
		if _, ok := first[p.key.Value]; ok {
			continue
		}
		first[p.key.Value] = p.key.Line
		own = append(own, p)
	}
	return own
}

func (d *decoder) mergeSource(n *yaml.Node, path string) []pair {
	n = d.Resolve(n)
	if n == nil {
		return nil
	}
	switch n.Kind {
	case yaml.MappingNode:
		return d.pairs(n, path)
	case yaml.SequenceNode:
		// Earlier mappings in the list take precedence over later ones.
		var out []pair
		seen := map[string]bool{}
		for _, c := range n.Content {
			c = d.Resolve(c)
			if c == nil {
				return out
			}
			if c.Kind != yaml.MappingNode {
				d.nodeErr(c, path, "merge key (<<) must refer to mappings, got %s", describe(c))
				continue
			}
			for _, p := range d.pairs(c, path) {
				if !seen[p.key.Value] {
					seen[p.key.Value] = true
					out = append(out, p)
				}
			}
		}
		return out
	}
	d.nodeErr(n, path, "merge key (<<) must refer to a mapping, got %s", describe(n))
	return nil
}

// yamlFields maps a struct's yaml keys to field indexes.
func yamlFields(t reflect.Type) map[string]int {
	m := make(map[string]int, t.NumField())
	for i := 0; i < t.NumField(); i++ {
		if k := yamlKey(t.Field(i)); k != "" {
			m[k] = i
		}
	}
	return m
}

func yamlKey(f reflect.StructField) string {
	tag := f.Tag.Get("yaml")
	if tag == "" || tag == "-" {
		return ""
	}
	name, _, _ := strings.Cut(tag, ",")
	return name
}

func fieldNames(t reflect.Type) []string {
	var names []string
	for i := 0; i < t.NumField(); i++ {
		if k := yamlKey(t.Field(i)); k != "" {
			names = append(names, k)
		}
	}
	return names
}

// suggest returns the candidate closest to s by edit distance when it is
// a plausible typo (at most 2 edits, or a third of the word), else "".
func suggest(s string, candidates []string) string {
	best, bestD := "", math.MaxInt
	for _, c := range candidates {
		d := yamlstrict.EditDistance(strings.ToLower(s), c)
		if d < bestD || (d == bestD && c < best) {
			best, bestD = c, d
		}
	}
	limit := max(2, len(s)/3)
	if bestD > limit {
		return ""
	}
	return best
}

// badText reports a control character or invalid UTF-8 in s, described
// for a message.
func badText(s string) (string, bool) {
	if !utf8.ValidString(s) {
		return "invalid UTF-8", true
	}
	for _, r := range s {
		if r < 0x20 || r >= 0x7f && r < 0xa0 {
			return fmt.Sprintf("a control character (U+%04X)", r), true
		}
	}
	return "", false
}
