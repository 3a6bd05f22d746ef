package filters_test

import (
	"math"
	"testing"

	"github.com/godwit-fusion/godwit/filters"
)

// FuzzFilterInputs feeds arbitrary dt, z and Rs values to both filters:
// never a panic, and after any accepted or rejected call the state is finite
// with a valid square root. Seed corpus: testdata/fuzz/FuzzFilterInputs.
func FuzzFilterInputs(f *testing.F) {
	f.Add(0.1, 13.0, 0.4, 2.5, 0.3, 0.01, 0.15, 0.0)
	f.Add(math.NaN(), 13.0, 0.4, 2.5, 0.3, 0.01, 0.15, 0.0)
	f.Add(0.1, math.Inf(1), 0.4, 2.5, 0.3, 0.01, 0.15, 0.0)
	f.Add(0.1, 13.0, 0.4, 2.5, 0.0, 0.01, 0.15, 0.0)
	f.Add(1e308, 1e308, -1e308, 2.5, 1e-300, 1e300, 0.15, 5.0)
	f.Fuzz(func(t *testing.T, dt, z0, z1, z2, r0, r1, r2, off float64) {
		sc := newCTRVScenario()
		ekf, _ := filters.NewSREKF(sc.f)
		ukf, _ := filters.NewSRUKF(sc.f, filters.DefaultUTParams())
		for _, kf := range []filters.Filter{ekf, ukf} {
			if err := kf.Init(sc.x0, sc.S0); err != nil {
				t.Fatal(err)
			}
			_ = kf.Predict(dt)
			Rs := []float64{r0, 0, 0, off, r1, 0, 0, 0, r2}
			if err := kf.Prepare(sc.h, Rs); err == nil {
				_ = kf.NIS([]float64{z0, z1, z2})
				_, _ = kf.Update([]float64{z0, z1, z2})
			}
			g := kf.State()
			for _, v := range g.X {
				if math.IsNaN(v) || math.IsInf(v, 0) {
					t.Fatalf("non-finite mean %v", g.X)
				}
			}
			if err := filters.CheckSqrt(g.S, 5); err != nil {
				t.Fatalf("invalid square root after fuzzed input: %v", err)
			}
		}
	})
}
