package transport

import (
	"bytes"
	"math"
	"testing"

	"pgregory.net/rapid"
)

// The tracks encoder copies the text of a float it wrote before instead of
// formatting it again. Its output must be the same, byte for byte, as
// formatting every number (strconv's shortest round-trip form). Numbers are
// drawn from a small pool so that repeats, -0 against +0, neighbours one ulp
// apart, and hash slots shared by different values all occur, across more
// values than the memo has slots.
func TestTracksMemoIsByteIdentical(t *testing.T) {
	special := []float64{0, math.Copysign(0, -1), 5e-324, math.SmallestNonzeroFloat64 * 3, 1e308, -1e-300,
		0.1, 0.2, 0.30000000000000004, 1772438459.996, math.NaN(), math.Inf(1)}
	rapid.Check(t, func(t *rapid.T) {
		pool := rapid.SliceOfN(rapid.Float64(), 1, 20).Draw(t, "pool")
		pool = append(pool, special...)
		for _, v := range pool[:len(pool):len(pool)] {
			pool = append(pool, math.Nextafter(v, math.Inf(1))) // differs in the last bit only
		}
		pick := func(label string) float64 { return rapid.SampledFrom(pool).Draw(t, label) }
		n := rapid.IntRange(0, 6).Draw(t, "tracks")
		m := &TracksMsg{V: 1, Vehicle: "yard-tractor-03", Seq: 4, TNs: 1764626400150000000, Frame: "site"}
		for i := 0; i < n; i++ {
			tr := Track{ID: uint64(i + 1), Status: "confirmed", Model: "ctrv", State: make([]float64, 5), StateCov: make([]float64, 25)}
			for k := range tr.State {
				tr.State[k] = pick("state")
			}
			for a := 0; a < 5; a++ {
				for b := 0; b <= a; b++ {
					v := pick("cov")
					tr.StateCov[a*5+b], tr.StateCov[b*5+a] = v, v
				}
			}
			tr.Pos = [2]float64{tr.State[0], tr.State[1]}
			tr.PosCov = [4]float64{tr.StateCov[0], tr.StateCov[1], tr.StateCov[5], tr.StateCov[6]}
			tr.Vel = [2]float64{pick("vx"), pick("vy")}
			m.Tracks = append(m.Tracks, tr)
		}
		if rapid.Bool().Draw(t, "ego") {
			m.Ego = &Ego{Pos: [2]float64{pick("ex"), pick("ey")}, Yaw: pick("yaw"), PosCov: [4]float64{pick("c0"), 0, 0, pick("c3")}}
		}
		prefix := []byte("earlier bytes in the buffer ")
		got, gotErr := appendTracks(bytes.Clone(prefix), m, true)
		want, wantErr := appendTracks(bytes.Clone(prefix), m, false)
		if !bytes.Equal(got, want) || gotErr != wantErr {
			t.Fatalf("memo output differs (err %v, want %v):\n got %s\nwant %s", gotErr, wantErr, got, want)
		}
	})
}
