package yamlstrict

import (
	"errors"
	"math"
	"strings"
	"testing"

	"gopkg.in/yaml.v3"
)

type testOrigin struct{}

func (testOrigin) Prefix() string { return "test" }

func TestEditDistance(t *testing.T) {
	cases := []struct {
		a, b string
		want int
	}{
		{"kitten", "sitting", 3}, // the textbook Levenshtein example (from memory)
		{"flaw", "lawn", 2},      // delete f, add n (from memory)
		{"", "abc", 3},           // insertions only: the length of the other word
		{"noise_sd", "noise_sd", 0},
		{strings.Repeat("a", 65), "a", math.MaxInt}, // beyond any key: no typo
	}
	for _, c := range cases {
		if got := EditDistance(c.a, c.b); got != c.want {
			t.Errorf("EditDistance(%q, %q) = %d, want %d", c.a, c.b, got, c.want)
		}
	}
}

func TestErrorFormat(t *testing.T) {
	// The format the project's messages promise (STYLE.md): PREFIX: FILE:LINE: PATH MSG.
	e := &Error[testOrigin]{File: "a.yaml", Line: 14, Column: 3, Path: "sensors[1].noise_sd", Msg: "has 2 values"}
	if got, want := e.Error(), "test: a.yaml:14: sensors[1].noise_sd has 2 values"; got != want {
		t.Errorf("got %q, want %q", got, want)
	}
	e = &Error[testOrigin]{File: "a.yaml", Msg: "empty"}
	if got, want := e.Error(), "test: a.yaml: empty"; got != want {
		t.Errorf("no line, no path: got %q, want %q", got, want)
	}
	l := &ErrorList[testOrigin]{Errors: []*Error[testOrigin]{e, e}}
	if got, want := l.Error(), "test: a.yaml: empty\ntest: a.yaml: empty"; got != want {
		t.Errorf("list: got %q, want %q", got, want)
	}
	var one *Error[testOrigin]
	if !errors.As(l, &one) || one != e {
		t.Error("errors.As does not reach the list's errors")
	}
}

// A small billion-laughs document (340 values through aliases) stops at the
// budget with one message.
func TestResolveBudget(t *testing.T) {
	var root yaml.Node
	src := "a: &a [x, x, x, x]\nb: &b [*a, *a, *a, *a]\nc: &c [*b, *b, *b, *b]\nd: [*c, *c, *c, *c]\n"
	if err := yaml.Unmarshal([]byte(src), &root); err != nil {
		t.Fatal(err)
	}
	d := &Doc[testOrigin]{File: "laughs.yaml", MaxNodes: 50}
	var walk func(n *yaml.Node)
	walk = func(n *yaml.Node) {
		if n = d.Resolve(n); n == nil {
			return
		}
		for _, c := range n.Content {
			walk(c)
		}
	}
	walk(&root)
	if len(d.Errs) != 1 || !strings.Contains(d.Errs[0].Msg, "more than 50 YAML values") {
		t.Fatalf("errors %v, want the one budget message", d.Errs)
	}
}

func TestOnce(t *testing.T) {
	d := &Doc[testOrigin]{File: "f", Once: true}
	d.Add(3, 1, "x", "bad %d", 1)
	d.Add(3, 5, "x", "bad %d", 1) // same line, path and message: a merged copy
	d.Add(2, 0, "y", "other")
	if len(d.Errs) != 2 {
		t.Fatalf("%d errors, want 2", len(d.Errs))
	}
	d.Sort()
	if d.Errs[0].Line != 2 || d.Errs[1].Line != 3 {
		t.Errorf("not in line order: %v", d.Errs)
	}
}
