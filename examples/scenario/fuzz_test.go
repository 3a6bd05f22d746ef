package scenario

import (
	"os"
	"path/filepath"
	"testing"

	"github.com/godwit-fusion/godwit/examples/scenarios"
)

// FuzzParse feeds arbitrary bytes to the scenario decoder: it must return a
// scenario or an *ErrorList, never panic, and a scenario it accepts must
// simulate (briefly) without error. Seeds: the shipped scenarios, the test
// files and testdata/fuzz/FuzzParse.
//
//	go test ./examples/scenario -run '^$' -fuzz FuzzParse -fuzztime 60s
func FuzzParse(f *testing.F) {
	for _, n := range Names() {
		data, err := scenarios.FS.ReadFile(n + ".yaml")
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	files, _ := filepath.Glob("testdata/*.yaml")
	for _, p := range files {
		data, err := os.ReadFile(p)
		if err != nil {
			f.Fatal(err)
		}
		f.Add(data)
	}
	f.Add([]byte(timingScenario))
	f.Add([]byte(noiseFree))
	f.Fuzz(func(t *testing.T, data []byte) {
		sc, err := Parse("fuzz.yaml", data, "testdata")
		if err != nil {
			if _, ok := err.(*ErrorList); !ok {
				t.Fatalf("error %T, want *ErrorList: %v", err, err)
			}
			return
		}
		if sc.Config == nil {
			t.Fatal("accepted without a config")
		}
		if _, err := sc.Simulate(Options{Seconds: 0.2}); err != nil {
			t.Fatalf("accepted but does not simulate: %v", err)
		}
	})
}
