package demo

import (
	"bytes"
	"os"
	"testing"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/eval"
)

// The scoring passes replay --truth adds, on the shipped sample (15 s of
// campus-shuttle, 1553 messages): baseline placement, and the NIS/latency
// pass through a second pipeline.
func BenchmarkScoreExtrasSample(b *testing.B) {
	rec, err := os.ReadFile("../../examples/sample/recording.jsonl")
	if err != nil {
		b.Fatal(err)
	}
	tr, err := os.ReadFile("../../examples/sample/truth.jsonl")
	if err != nil {
		b.Fatal(err)
	}
	recs, _, err := ReadRecords(bytes.NewReader(rec))
	if err != nil {
		b.Fatal(err)
	}
	truth, err := eval.ReadTruth(bytes.NewReader(tr))
	if err != nil {
		b.Fatal(err)
	}
	cfg, err := configs.Example("campus-shuttle")
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	for b.Loop() {
		ev, err := eval.New(truth, eval.Options{})
		if err != nil {
			b.Fatal(err)
		}
		var x Extras
		if err := AddBaseline(ev, cfg, truth, recs, &x); err != nil {
			b.Fatal(err)
		}
		if err := AddNISAndLatency(ev, cfg, recs, true, &x); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(recs)), "messages/op")
}
