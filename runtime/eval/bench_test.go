package eval

import (
	"fmt"
	"math"
	"testing"

	"github.com/godwit-fusion/godwit/transport"
)

// BenchmarkAddTracks scores one epoch of 50 objects against 50 confirmed
// tracks plus 5 false ones (one op = one tracks message).
func BenchmarkAddTracks(b *testing.B) {
	const n = 50
	const steps = 1000
	truth := make([]TruthLine, steps)
	msgs := make([]transport.TracksMsg, steps)
	for k := range truth {
		tn := int64(k) * 50e6
		truth[k].TNs = tn
		msgs[k] = transport.TracksMsg{V: 1, TNs: tn, Frame: "site"}
		for i := 0; i < n; i++ {
			x, y := float64(i%10)*8+0.05*float64(k), float64(i/10)*8
			truth[k].Objects = append(truth[k].Objects, TruthObject{ID: fmt.Sprint("o", i), Pos: [2]float64{x, y}, Vel: [2]float64{1, 0}})
			msgs[k].Tracks = append(msgs[k].Tracks, transport.Track{ID: uint64(i + 1), Status: "confirmed",
				Pos: [2]float64{x + 0.3*math.Sin(float64(k+i)), y}, PosCov: [4]float64{0.1, 0, 0, 0.1}})
		}
		for i := 0; i < 5; i++ {
			msgs[k].Tracks = append(msgs[k].Tracks, transport.Track{ID: uint64(1000 + i), Status: "coasting",
				Pos: [2]float64{float64(i) * 17, -20}, PosCov: [4]float64{1, 0, 0, 1}})
		}
	}
	b.ReportAllocs()
	b.ResetTimer()
	var e *Evaluator
	for i := 0; i < b.N; i++ {
		if i%steps == 0 {
			b.StopTimer()
			e, _ = New(truth, Options{})
			b.StartTimer()
		}
		if err := e.AddTracks(&msgs[i%steps]); err != nil {
			b.Fatal(err)
		}
	}
}
