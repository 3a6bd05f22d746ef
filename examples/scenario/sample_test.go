package scenario

import (
	"bytes"
	"os"
	"path/filepath"
	"testing"
)

// The shipped sample (examples/sample) is what its README says made it:
// campus-shuttle, its own seed, 15 s.
func TestSampleIsCurrent(t *testing.T) {
	sc, err := Shipped("campus-shuttle")
	if err != nil {
		t.Fatal(err)
	}
	rec, truth := write(t, sc, Options{Seconds: 15})
	for name, want := range map[string][]byte{"recording.jsonl": rec, "truth.jsonl": truth} {
		got, err := os.ReadFile(filepath.Join("..", "sample", name))
		if err != nil {
			t.Fatal(err)
		}
		if !bytes.Equal(got, want) {
			t.Errorf("examples/sample/%s is stale; regenerate it with\n  go run ./runtime/cmd/godwit simulate --scenario campus-shuttle --seconds 15 --out examples/sample", name)
		}
	}
	if len(rec)+len(truth) > 600<<10 {
		t.Errorf("the sample is %d KiB; keep it well under 1 MB", (len(rec)+len(truth))>>10)
	}
}
