package filters_test

import (
	"math/rand/v2"
	"testing"

	"github.com/godwit-fusion/godwit/filters"
)

// TestMonteCarloNEESConsistency is the NEES test of Bar-Shalom, Li &
// Kirubarajan 2001 §5.4.2: over N independent runs of a model whose truth
// is simulated from the filter's own assumptions, the average NEES at each
// checked step must lie in the two-sided 99% interval of χ²_{N·n}/N. For the
// linear CV problem the square-root KF is exact, so this is a check of the
// whole filter against the chi-square law; for CTRV seen in range, bearing
// and range rate the SR-UKF is an approximation that a tracking filter is
// expected to pass at this noise level (common practice). The seeds are fixed,
// so the result is repeatable.
func TestMonteCarloNEESConsistency(t *testing.T) {
	const runs = 100
	type problem struct {
		name string
		f    filters.MotionModel
		h    filters.MeasurementModel
		Rs   []float64
		x0   []float64
		S0   []float64
		mk   func(filters.MotionModel) (filters.Filter, error)
	}
	sc := newCTRVScenario()
	problems := []problem{
		{
			name: "srkf-cv-position",
			f:    cvMotion{q: 0.5},
			h:    &linearMeas{m: 2, n: 4, H: []float64{1, 0, 0, 0, 0, 1, 0, 0}},
			Rs:   []float64{0.5, 0, 0.1, 0.4},
			x0:   []float64{0, 0, 3, 1},
			S0:   []float64{1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 0.5, 0, 0, 0, 0, 0.5},
			mk:   func(f filters.MotionModel) (filters.Filter, error) { return filters.NewSRKF(f) },
		},
		{
			name: "srukf-ctrv-rbr",
			f:    sc.f,
			h:    sc.h,
			Rs:   sc.Rs,
			x0:   sc.x0,
			S0:   sc.S0,
			mk: func(f filters.MotionModel) (filters.Filter, error) {
				return filters.NewSRUKF(f, filters.DefaultUTParams())
			},
		},
	}
	steps := []int{10, 25, 50}
	checks := map[int]bool{}
	for _, k := range steps {
		checks[k] = true
	}
	for _, p := range problems {
		n, m := p.f.Dim(), p.h.Dim()
		sum := map[int]float64{}
		rng := rand.New(rand.NewPCG(51, 52))
		truth := make([]float64, n)
		next := make([]float64, n)
		G := make([]float64, n*n)
		w := make([]float64, n)
		z := make([]float64, m)
		for run := 0; run < runs; run++ {
			kf, err := p.mk(p.f)
			if err != nil {
				t.Fatal(err)
			}
			if err := kf.Init(p.x0, p.S0); err != nil {
				t.Fatal(err)
			}
			// Truth drawn from the prior N(x0, S0·S0ᵀ).
			for i := range w {
				w[i] = rng.NormFloat64()
			}
			matVec(truth, p.S0, w, n, n)
			for i := range truth {
				truth[i] += p.x0[i]
			}
			for k := 1; k <= 50; k++ {
				const dt = 0.1
				p.f.Propagate(next, truth, dt)
				p.f.NoiseFactor(G, truth, dt)
				for i := range w {
					w[i] = rng.NormFloat64()
				}
				matVec(truth, G, w, n, n)
				for i := range truth {
					truth[i] += next[i]
				}
				p.f.Normalize(truth)
				p.h.Predict(z, truth)
				for i := range w[:m] {
					w[i] = rng.NormFloat64()
				}
				v := make([]float64, m)
				matVec(v, p.Rs, w[:m], m, m)
				for i := range z {
					z[i] += v[i]
				}
				if err := kf.Predict(dt); err != nil {
					t.Fatal(err)
				}
				if err := kf.Prepare(p.h, p.Rs); err != nil {
					t.Fatal(err)
				}
				if _, err := kf.Update(z); err != nil {
					t.Fatal(err)
				}
				if checks[k] {
					e, err := filters.NEES(p.f, truth, kf.State())
					if err != nil {
						t.Fatal(err)
					}
					sum[k] += e
				}
			}
		}
		lo, hi, err := filters.ConsistencyInterval(0.99, n, runs)
		if err != nil {
			t.Fatal(err)
		}
		for _, k := range steps {
			avg := sum[k] / runs
			t.Logf("%s step %d: average NEES %.3f, 99%% interval [%.3f, %.3f]", p.name, k, avg, lo, hi)
			if avg < lo || avg > hi {
				t.Errorf("%s step %d: average NEES %.3f outside the 99%% interval [%.3f, %.3f]", p.name, k, avg, lo, hi)
			}
		}
	}
}
