package configs

import (
	"os"
	"reflect"
	"strings"
	"testing"
)

// TestReferenceComplete: REFERENCE.md has a row for every schema key, and
// the row of every defaulted key shows the default of the Defaults table,
// so the document cannot drift from the code.
func TestReferenceComplete(t *testing.T) {
	doc, err := os.ReadFile("REFERENCE.md")
	if err != nil {
		t.Fatal(err)
	}
	rows := map[string]string{}
	for _, line := range strings.Split(string(doc), "\n") {
		if rest, ok := strings.CutPrefix(line, "| `"); ok {
			key, _, _ := strings.Cut(rest, "`")
			rows[key] = line
		}
	}
	keys := map[string]bool{}
	for _, k := range schemaKeys(reflect.TypeOf(Config{}), "") {
		keys[k] = true
		if _, ok := rows[k]; !ok {
			t.Errorf("REFERENCE.md has no row for %s", k)
		}
	}
	for _, d := range Defaults {
		row := rows[d.Key]
		cells := strings.Split(row, " | ")
		if len(cells) < 3 || cells[2] != d.Value {
			t.Errorf("REFERENCE.md row for %s shows default %q, the table says %q", d.Key, cellOr(cells, 2), d.Value)
		}
	}
	for k := range rows {
		if !keys[k] && strings.Contains(k, ".") {
			t.Errorf("REFERENCE.md documents %s, which is not in the schema", k)
		}
	}
}

func cellOr(cells []string, i int) string {
	if i < len(cells) {
		return cells[i]
	}
	return ""
}
