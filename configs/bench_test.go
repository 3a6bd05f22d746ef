package configs

import "testing"

// BenchmarkParse: loading the larger shipped example (done once at start).
func BenchmarkParse(b *testing.B) {
	data, err := ExampleYAML("campus-shuttle")
	if err != nil {
		b.Fatal(err)
	}
	b.ReportAllocs()
	b.SetBytes(int64(len(data)))
	for b.Loop() {
		if _, err := Parse("campus-shuttle.yaml", data); err != nil {
			b.Fatal(err)
		}
	}
}
