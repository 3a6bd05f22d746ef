package main

import (
	"os"
	"path/filepath"
	"reflect"
	"strings"
	"testing"

	"github.com/godwit-fusion/godwit/configs"
)

// The shipped examples must pass `check`, and what check prints is the
// resolved configuration: it parses back to the very Config Load built.
func TestCheckPrintsResolvedConfig(t *testing.T) {
	for _, name := range []string{"dock-post", "campus-shuttle"} {
		path := filepath.Join("..", "..", "..", "configs", name+".yaml")
		code, out, errs := runCmd(t, nil, "check", "--config", path)
		if code != exitOK {
			t.Fatalf("%s: exit %d, stderr %s", name, code, errs)
		}
		want, err := configs.Load(path)
		if err != nil {
			t.Fatal(err)
		}
		got, err := configs.Parse("printed", []byte(out))
		if err != nil {
			t.Fatalf("%s: printed configuration does not parse: %v\n%s", name, err, out)
		}
		if !reflect.DeepEqual(got, want) {
			t.Fatalf("%s: printed configuration differs from the file's", name)
		}
		// Defaults are spelled out (DESIGN.md: rate_hz, client_id default).
		if !strings.Contains(out, "client_id:") || !strings.Contains(out, "status_topic:") {
			t.Fatalf("%s: defaults not printed:\n%s", name, out)
		}
	}
}

// Exit code 2 for a bad configuration (DESIGN.md, command line), with every
// problem named FILE:LINE (STYLE.md, "Errors a person can act on").
func TestCheckReportsAllErrorsAndExitsTwo(t *testing.T) {
	path := filepath.Join(t.TempDir(), "broken.yaml")
	text := `vehicle: yard-tractor-3
sensors:
  - name: hitch_lidar
    kind: position_xy
    noise_sd: [0.1]
    period_ms: 50
tracker: {motion: cv, filter: srkf, gate_prob: 2}
`
	if err := os.WriteFile(path, []byte(text), 0o644); err != nil {
		t.Fatal(err)
	}
	code, out, errs := runCmd(t, nil, "check", "--config", path)
	if code != exitUsage {
		t.Fatalf("exit %d, want %d; stderr %s", code, exitUsage, errs)
	}
	if out != "" {
		t.Fatalf("a broken configuration printed %q", out)
	}
	for _, want := range []string{path + ":5: sensors[0].noise_sd", path + ":7: tracker.gate_prob"} {
		if !strings.Contains(errs, want) {
			t.Errorf("stderr lacks %q:\n%s", want, errs)
		}
	}
}

func TestCheckUsage(t *testing.T) {
	if code, _, _ := runCmd(t, nil, "check"); code != exitUsage {
		t.Fatalf("missing --config: exit %d, want %d", code, exitUsage)
	}
	if code, _, _ := runCmd(t, nil, "check", "--config", filepath.Join(t.TempDir(), "absent.yaml")); code != exitUsage {
		t.Fatalf("absent file: exit %d, want %d", code, exitUsage)
	}
	code, out, _ := runCmd(t, nil, "check", "--help")
	if code != exitOK || !strings.Contains(out, "Examples:") {
		t.Fatalf("check --help: exit %d, output %q", code, out)
	}
}
