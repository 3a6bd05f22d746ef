// Package scenarios ships godwit's invented simulation scenarios as YAML
// files (format: README.md beside this file). The simulator in
// examples/scenario finds them here by name.
package scenarios

import "embed"

// FS holds the shipped scenario files, one NAME.yaml each.
//
//go:embed *.yaml
var FS embed.FS
