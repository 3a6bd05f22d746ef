// Package yamlstrict holds what the strict YAML readers of godwit share: an
// error located by file, line and field path, the list that gathers every
// problem of one file, and the walk state that follows aliases under a node
// budget. Each reader keeps its own rules (which keys, which messages); the
// package whose problems they are is named by an Origin, so configs and
// scenario errors stay distinct types with their own message prefix.
package yamlstrict

import (
	"fmt"
	"math"
	"sort"
	"strings"

	"gopkg.in/yaml.v3"
)

// Origin names the package an error comes from: Prefix() starts every
// message ("configs", "scenario"). Implementations are empty structs.
type Origin interface{ Prefix() string }

// Error is one problem in a YAML file, located by file and line and named by
// the field path (e.g. sensors[1].noise_sd).
type Error[O Origin] struct {
	File string // as given by the caller
	Line int    // 1-based; 0 when the problem has no place in the file
	// Column is 1-based where known (0 otherwise). Error() leaves it out:
	// file:line is what a person reads; tools may use the column.
	Column int
	Path   string // field path; empty for whole-document problems
	Msg    string // what is wrong and what was expected
}

// Error formats as "PREFIX: FILE:LINE: PATH MSG".
func (e *Error[O]) Error() string {
	var o O
	var b strings.Builder
	b.WriteString(o.Prefix())
	b.WriteString(": ")
	b.WriteString(e.File)
	if e.Line > 0 {
		fmt.Fprintf(&b, ":%d", e.Line)
	}
	b.WriteString(": ")
	if e.Path != "" {
		b.WriteString(e.Path)
		b.WriteByte(' ')
	}
	b.WriteString(e.Msg)
	return b.String()
}

// ErrorList holds every problem of one file, so a person can fix them all
// in one pass instead of one per run.
type ErrorList[O Origin] struct {
	Errors []*Error[O]
}

// Error joins the problems one per line.
func (l *ErrorList[O]) Error() string {
	lines := make([]string, len(l.Errors))
	for i, e := range l.Errors {
		lines[i] = e.Error()
	}
	return strings.Join(lines, "\n")
}

// Unwrap exposes the single problems to errors.Is / errors.As.
func (l *ErrorList[O]) Unwrap() []error {
	out := make([]error, len(l.Errors))
	for i, e := range l.Errors {
		out[i] = e
	}
	return out
}

// Doc is the state of one decode: the problems found so far and the node
// budget. Aliases can make a small file expand exponentially ("billion
// laughs"); MaxNodes bounds the values one decode visits.
type Doc[O Origin] struct {
	File     string
	MaxNodes int
	// Once records a problem a single time when the same place is reached
	// again (a mapping merged in several places with <<).
	Once bool
	Errs []*Error[O]

	visited int
	over    bool
	seen    map[string]bool
}

// Add records a problem at line and column (0 when unknown).
func (d *Doc[O]) Add(line, col int, path, format string, args ...any) {
	e := &Error[O]{File: d.File, Line: line, Column: col, Path: path, Msg: fmt.Sprintf(format, args...)}
	if d.Once {
		key := fmt.Sprintf("%d\x00%s\x00%s", line, path, e.Msg)
		if d.seen[key] {
			return
		}
		if d.seen == nil {
			d.seen = map[string]bool{}
		}
		d.seen[key] = true
	}
	d.Errs = append(d.Errs, e)
}

// Resolve follows aliases and charges the node budget; it returns nil once
// the budget is spent (reported once) or for an alias chain that loops.
func (d *Doc[O]) Resolve(n *yaml.Node) *yaml.Node {
	for hops := 0; n != nil && n.Kind == yaml.AliasNode; hops++ {
		if hops > 100 {
			return nil
		}
		n = n.Alias
	}
	d.visited++
	if d.visited > d.MaxNodes {
		if !d.over {
			d.over = true
			d.Add(0, 0, "", "more than %d YAML values (alias expansion?); refusing to decode", d.MaxNodes)
		}
		return nil
	}
	return n
}

// Sort orders the problems by line so the list reads top to bottom;
// problems without a line come first, and ties keep their finding order.
func (d *Doc[O]) Sort() {
	sort.SliceStable(d.Errs, func(i, j int) bool { return d.Errs[i].Line < d.Errs[j].Line })
}

// IsNull reports an empty value (~, null or nothing after the colon).
func IsNull(n *yaml.Node) bool {
	return n.Kind == yaml.ScalarNode && n.Tag == "!!null"
}

// Join extends a field path by a key.
func Join(path, key string) string {
	if path == "" {
		return key
	}
	return path + "." + key
}

// EditDistance is the Levenshtein distance (Levenshtein 1966), computed
// with the usual two-row dynamic programme over bytes. Words longer than 64
// bytes are no typo of any key: they get math.MaxInt, which keeps fuzzed
// input cheap.
func EditDistance(a, b string) int {
	if len(a) > 64 || len(b) > 64 {
		return math.MaxInt
	}
	prev := make([]int, len(b)+1)
	cur := make([]int, len(b)+1)
	for j := range prev {
		prev[j] = j
	}
	for i := 1; i <= len(a); i++ {
		cur[0] = i
		for j := 1; j <= len(b); j++ {
			cost := 1
			if a[i-1] == b[j-1] {
				cost = 0
			}
			cur[j] = min(prev[j]+1, cur[j-1]+1, prev[j-1]+cost)
		}
		prev, cur = cur, prev
	}
	return prev[len(b)]
}
