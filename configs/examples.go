package configs

import (
	"embed"
	"fmt"
	"io/fs"
	"sort"
	"strings"
)

// The shipped example configurations, validated by the tests.
//
//go:embed campus-shuttle.yaml dock-post.yaml
var examples embed.FS

// Examples lists the names of the shipped example configurations
// (e.g. "campus-shuttle"), sorted.
func Examples() []string {
	entries, _ := fs.ReadDir(examples, ".")
	var names []string
	for _, e := range entries {
		names = append(names, strings.TrimSuffix(e.Name(), ".yaml"))
	}
	sort.Strings(names)
	return names
}

// ExampleYAML returns the text of a shipped example, by name with or
// without ".yaml".
func ExampleYAML(name string) ([]byte, error) {
	file := strings.TrimSuffix(name, ".yaml") + ".yaml"
	data, err := examples.ReadFile(file)
	if err != nil {
		return nil, fmt.Errorf("configs: no shipped example %q; have %s", name, strings.Join(Examples(), ", "))
	}
	return data, nil
}

// Example parses a shipped example configuration.
func Example(name string) (*Config, error) {
	data, err := ExampleYAML(name)
	if err != nil {
		return nil, err
	}
	return Parse(strings.TrimSuffix(name, ".yaml")+".yaml", data)
}
