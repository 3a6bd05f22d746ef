package engine

import (
	"testing"

	"github.com/godwit-fusion/godwit/filters/particle"
)

// SplitMix64 reference outputs from state 0 (Steele, Lea & Flood 2014;
// the values of the public-domain splitmix64.c, from memory): trackSeed(id)
// is the generator's output after its state reached id + γ.
func TestTrackSeedIsSplitMix64(t *testing.T) {
	const gamma = 0x9e3779b97f4a7c15
	if got := trackSeed(0); got != 0xe220a8397b1dcdaf {
		t.Errorf("first output %#x, want 0xe220a8397b1dcdaf", got)
	}
	if got := trackSeed(gamma); got != 0x6e789e6aa1b965f4 {
		t.Errorf("second output %#x, want 0x6e789e6aa1b965f4", got)
	}
}

// Two particle-filter tracks born in the same scan with the same detection
// covariance come from one template; reseeded from their ids, their clouds
// are drawn independently: the particles' offsets from the first particle
// differ (without the reseed they would be equal, particle for particle).
// The same scene twice gives the same clouds bit for bit.
func TestParticleTracksDrawTheirOwnNoise(t *testing.T) {
	clouds := func() [][]float64 {
		cfg := baseConfig(xySensor("mast_lidar", 0, 0, 0, 0.2))
		cfg.Tracker.Filter = "pf"
		e, err := New(cfg, Options{Particles: 64})
		if err != nil {
			t.Fatal(err)
		}
		if err := e.Ingest(xyMsg(0, 1, t0, [2]float64{10, 5}, [2]float64{-20, 30}), t0); err != nil {
			t.Fatal(err)
		}
		if len(e.st.recs) != 2 {
			t.Fatalf("%d tracks born, want 2", len(e.st.recs))
		}
		var out [][]float64
		for i := range e.st.recs {
			pf, ok := e.st.flt[i].(*particle.Filter)
			if !ok {
				t.Fatalf("track filter is a %T", e.st.flt[i])
			}
			x, _ := pf.Particles()
			n := len(x) / 64
			off := make([]float64, 0, len(x))
			for j := 0; j < 64; j++ {
				for k := 0; k < n; k++ {
					off = append(off, x[j*n+k]-x[k])
				}
			}
			out = append(out, off)
		}
		return out
	}
	a := clouds()
	same := 0
	for k := range a[0] {
		if a[0][k] == a[1][k] && a[0][k] != 0 {
			same++
		}
	}
	if same > 0 {
		t.Fatalf("%d particle offsets equal between the two tracks: they drew the same noise", same)
	}
	b := clouds()
	for i := range a {
		for k := range a[i] {
			if a[i][k] != b[i][k] {
				t.Fatalf("track %d: the same scene gave different particles", i)
			}
		}
	}
}
