package scenario

import (
	"io"
	"testing"
)

// Simulated seconds per wall second is what matters to the demo, which
// plays campus-shuttle accelerated: the metric "sim-s/s" reports it.
func benchmarkScenario(b *testing.B, name string, seconds float64) {
	sc, err := Shipped(name)
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	for b.Loop() {
		if _, err := sc.Write(io.Discard, io.Discard, Options{Seconds: seconds}); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(seconds*float64(b.N)/b.Elapsed().Seconds(), "sim-s/s")
}

func BenchmarkCampusShuttle10s(b *testing.B) { benchmarkScenario(b, "campus-shuttle", 10) }
func BenchmarkDense2s(b *testing.B)          { benchmarkScenario(b, "dense", 2) }

func BenchmarkParseCampusShuttle(b *testing.B) {
	b.ReportAllocs()
	for b.Loop() {
		if _, err := Shipped("campus-shuttle"); err != nil {
			b.Fatal(err)
		}
	}
}
