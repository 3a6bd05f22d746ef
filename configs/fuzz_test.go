package configs

import (
	"errors"
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"
)

// FuzzParse: whatever the bytes, Parse returns either a valid Config or an
// ErrorList, never panics, keeps every message on one line with a place
// in the file, and an accepted Config survives Marshal → Parse unchanged.
// Seeds: the shipped examples, the broken configs of the tests and the
// files in testdata/seeds; found inputs go to testdata/fuzz/FuzzParse.
func FuzzParse(f *testing.F) {
	for _, name := range Examples() {
		data, err := ExampleYAML(name)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	f.Add([]byte(base))
	f.Add([]byte(minimal))
	seeds, _ := filepath.Glob(filepath.Join("testdata", "seeds", "*.yaml"))
	for _, p := range seeds {
		data, err := os.ReadFile(p)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	f.Fuzz(func(t *testing.T, data []byte) {
		c, err := Parse("f.yaml", data)
		if err != nil {
			if c != nil {
				t.Fatal("config returned with an error")
			}
			var list *ErrorList
			if !errors.As(err, &list) || len(list.Errors) == 0 {
				t.Fatalf("error %T %v is not a non-empty ErrorList", err, err)
			}
			// The YAML parser breaks lines at LF, CR, CRLF, and also NEL,
			// LS and PS (YAML 1.1 §5.4); counting each mark bounds the lines.
			lines := 1
			for _, mark := range []string{"\n", "\r", "\u0085", "\u2028", "\u2029"} {
				lines += strings.Count(string(data), mark)
			}
			prev := 0
			for _, e := range list.Errors {
				if e.File != "f.yaml" || e.Line < 0 || e.Line > lines+1 || e.Line < prev {
					t.Fatalf("bad location %+v (file has %d lines, previous line %d)", e, lines, prev)
				}
				prev = e.Line
				if strings.ContainsAny(e.Error(), "\n\r") {
					t.Fatalf("message spans lines: %q", e.Error())
				}
			}
			return
		}
		out, err := Marshal(c)
		if err != nil {
			t.Fatalf("Marshal of an accepted config: %v", err)
		}
		back, err := Parse("resolved.yaml", out)
		if err != nil {
			t.Fatalf("resolved YAML does not parse: %v\n%s", err, out)
		}
		if !reflect.DeepEqual(c, back) {
			t.Fatalf("round trip differs:\n%+v\n%+v\n%s", c, back, out)
		}
	})
}
