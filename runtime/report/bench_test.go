package report

import "testing"

// BenchmarkWrite renders the synthetic report (four PNGs and the page).
func BenchmarkWrite(b *testing.B) {
	in := synthetic(b)
	dir := b.TempDir()
	b.ReportAllocs()
	for i := 0; i < b.N; i++ {
		if _, err := Write(dir, in); err != nil {
			b.Fatal(err)
		}
	}
}
