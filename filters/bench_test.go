package filters_test

import (
	"math/rand/v2"
	"runtime"
	"testing"

	"github.com/godwit-fusion/godwit/filters"
	"github.com/godwit-fusion/godwit/filters/models"
)

// Benchmarks use the project's real models (filters/models). One benchmark
// iteration is one predict plus one update of a single track, fed from a
// pre-computed measurement sequence so the filter stays in a realistic
// steady state; the state is re-initialised when the sequence wraps.
//
//	go test ./filters/ -run '^$' -bench . -benchmem -benchtime 200000x

const benchSteps = 2000
const benchDt = 0.05

type benchProblem struct {
	f      filters.MotionModel
	h      filters.MeasurementModel
	Rs, R  []float64
	x0, S0 []float64
	zs     [][]float64
}

// ctrvBench: a cart on a circle of radius 25 m (v = 5 m/s, ω = 0.2 rad/s)
// seen by a fixed range-bearing-rate sensor at the site origin, never closer
// than 15 m.
func ctrvBench(b testing.TB) benchProblem {
	f, err := models.NewCTRV(1.5, 0.6)
	if err != nil {
		b.Fatal(err)
	}
	h, err := models.NewRangeBearingRate(f, models.Mount{})
	if err != nil {
		b.Fatal(err)
	}
	sd := []float64{0.3, 0.01, 0.15}
	Rs := make([]float64, 9)
	if err := models.DiagSqrt(Rs, sd); err != nil {
		b.Fatal(err)
	}
	rng := rand.New(rand.NewPCG(31, 32))
	truth := []float64{20, 10, 5, 0, 0.2}
	next := make([]float64, 5)
	p := benchProblem{f: f, h: h, Rs: Rs, R: outer(Rs, 3, 3),
		x0: []float64{20.5, 9.5, 4, 0.1, 0.1},
		S0: []float64{1, 0, 0, 0, 0, 0, 1, 0, 0, 0, 0, 0, 1, 0, 0, 0, 0, 0, 0.3, 0, 0, 0, 0, 0, 0.2}}
	for k := 0; k < benchSteps; k++ {
		f.Propagate(next, truth, benchDt)
		copy(truth, next)
		z := make([]float64, 3)
		h.Predict(z, truth)
		for i := range z {
			z[i] += sd[i] * rng.NormFloat64()
		}
		p.zs = append(p.zs, z)
	}
	return p
}

// cvBench: a shuttle driving straight at 5 m/s, position fixes with 0.5 m s.d.
func cvBench(b testing.TB) benchProblem {
	f, err := models.NewCV(1.0)
	if err != nil {
		b.Fatal(err)
	}
	h, err := models.NewPositionXY(f, models.Mount{})
	if err != nil {
		b.Fatal(err)
	}
	Rs := []float64{0.5, 0, 0, 0.5}
	rng := rand.New(rand.NewPCG(33, 34))
	p := benchProblem{f: f, h: h, Rs: Rs, R: outer(Rs, 2, 2),
		x0: []float64{1, -1, 4, 3},
		S0: []float64{2, 0, 0, 0, 0, 2, 0, 0, 0, 0, 2, 0, 0, 0, 0, 2}}
	for k := 0; k < benchSteps; k++ {
		t := float64(k+1) * benchDt
		p.zs = append(p.zs, []float64{4*t + 0.5*rng.NormFloat64(), 3*t + 0.5*rng.NormFloat64()})
	}
	return p
}

// cpuClock reports CPU ns/op of the benchmark goroutine's thread beside the
// wall-clock figure: on a machine shared with other work, wall time
// includes time spent descheduled.
type cpuClock struct {
	b  *testing.B
	t0 int64
}

func startCPU(b *testing.B) *cpuClock {
	runtime.LockOSThread()
	b.ReportAllocs()
	b.ResetTimer()
	return &cpuClock{b: b, t0: threadCPUNanos()}
}

func (c *cpuClock) stop() {
	t1 := threadCPUNanos()
	c.b.StopTimer()
	runtime.UnlockOSThread()
	if c.t0 >= 0 && t1 >= 0 {
		c.b.ReportMetric(float64(t1-c.t0)/float64(c.b.N), "cpu-ns/op")
	}
}

func runFilterBench(b *testing.B, kf filters.Filter, p benchProblem) {
	if err := kf.Init(p.x0, p.S0); err != nil {
		b.Fatal(err)
	}
	clk := startCPU(b)
	defer clk.stop()
	k := 0
	for i := 0; i < b.N; i++ {
		if k == benchSteps {
			k = 0
			if err := kf.Init(p.x0, p.S0); err != nil {
				b.Fatal(err)
			}
		}
		if err := kf.Predict(benchDt); err != nil {
			b.Fatal(err)
		}
		if err := kf.Prepare(p.h, p.Rs); err != nil {
			b.Fatal(err)
		}
		if _, err := kf.Update(p.zs[k]); err != nil {
			b.Fatal(err)
		}
		k++
	}
}

// BenchmarkSRUKFCTRVRangeBearingRate: target ≤ 2 µs and 0 allocs/op.
func BenchmarkSRUKFCTRVRangeBearingRate(b *testing.B) {
	p := ctrvBench(b)
	u, err := filters.NewSRUKF(p.f, filters.DefaultUTParams())
	if err != nil {
		b.Fatal(err)
	}
	runFilterBench(b, u, p)
}

func BenchmarkSREKFCTRVRangeBearingRate(b *testing.B) {
	p := ctrvBench(b)
	k, err := filters.NewSREKF(p.f)
	if err != nil {
		b.Fatal(err)
	}
	runFilterBench(b, k, p)
}

// BenchmarkSRKFCVPositionXY: target ≤ 0.5 µs and 0 allocs/op.
func BenchmarkSRKFCVPositionXY(b *testing.B) {
	p := cvBench(b)
	k, err := filters.NewSRKF(p.f)
	if err != nil {
		b.Fatal(err)
	}
	runFilterBench(b, k, p)
}

// BenchmarkPlainUKFCTRVRangeBearingRate is the baseline: the covariance
// UKF of reference_test.go, written plainly with gonum mat, on the same
// problem as BenchmarkSRUKFCTRVRangeBearingRate.
func BenchmarkPlainUKFCTRVRangeBearingRate(b *testing.B) {
	p := ctrvBench(b)
	mk := func() *plainUKF { return newPlainUKF(p.f, filters.DefaultUTParams(), p.x0, outer(p.S0, 5, 5)) }
	u := mk()
	clk := startCPU(b)
	defer clk.stop()
	k := 0
	for i := 0; i < b.N; i++ {
		if k == benchSteps {
			k = 0
			u = mk()
		}
		if err := u.predict(benchDt); err != nil {
			b.Fatal(err)
		}
		if _, err := u.update(p.h, p.R, p.zs[k]); err != nil {
			b.Fatal(err)
		}
		k++
	}
}

// The split benchmarks show each call alone allocates nothing.

func BenchmarkSRUKFPredict(b *testing.B) {
	p := ctrvBench(b)
	u, _ := filters.NewSRUKF(p.f, filters.DefaultUTParams())
	snap, _ := filters.NewSRUKF(p.f, filters.DefaultUTParams())
	if err := snap.Init(p.x0, p.S0); err != nil {
		b.Fatal(err)
	}
	clk := startCPU(b)
	defer clk.stop()
	for i := 0; i < b.N; i++ {
		if err := u.CopyFrom(snap); err != nil {
			b.Fatal(err)
		}
		if err := u.Predict(benchDt); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkSRUKFUpdate(b *testing.B) {
	p := ctrvBench(b)
	u, _ := filters.NewSRUKF(p.f, filters.DefaultUTParams())
	snap, _ := filters.NewSRUKF(p.f, filters.DefaultUTParams())
	if err := snap.Init(p.x0, p.S0); err != nil {
		b.Fatal(err)
	}
	clk := startCPU(b)
	defer clk.stop()
	for i := 0; i < b.N; i++ {
		if err := u.CopyFrom(snap); err != nil {
			b.Fatal(err)
		}
		if err := u.Prepare(p.h, p.Rs); err != nil {
			b.Fatal(err)
		}
		if _, err := u.Update(p.zs[0]); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkSRKFPredict(b *testing.B) {
	p := cvBench(b)
	k, _ := filters.NewSRKF(p.f)
	snap, _ := filters.NewSRKF(p.f)
	if err := snap.Init(p.x0, p.S0); err != nil {
		b.Fatal(err)
	}
	clk := startCPU(b)
	defer clk.stop()
	for i := 0; i < b.N; i++ {
		if err := k.CopyFrom(snap); err != nil {
			b.Fatal(err)
		}
		if err := k.Predict(benchDt); err != nil {
			b.Fatal(err)
		}
	}
}

func BenchmarkSRKFUpdate(b *testing.B) {
	p := cvBench(b)
	k, _ := filters.NewSRKF(p.f)
	snap, _ := filters.NewSRKF(p.f)
	if err := snap.Init(p.x0, p.S0); err != nil {
		b.Fatal(err)
	}
	clk := startCPU(b)
	defer clk.stop()
	for i := 0; i < b.N; i++ {
		if err := k.CopyFrom(snap); err != nil {
			b.Fatal(err)
		}
		if err := k.Prepare(p.h, p.Rs); err != nil {
			b.Fatal(err)
		}
		if _, err := k.Update(p.zs[0]); err != nil {
			b.Fatal(err)
		}
	}
}

// TestNoAllocationsInSteadyState checks 0 allocations per Predict, Prepare,
// NIS and Update with the real models (counting allocations, not time).
func TestNoAllocationsInSteadyState(t *testing.T) {
	cases := []struct {
		name string
		p    benchProblem
		mk   func(f filters.MotionModel) (filters.Filter, error)
	}{
		{"srukf-ctrv", ctrvBench(t), func(f filters.MotionModel) (filters.Filter, error) {
			return filters.NewSRUKF(f, filters.DefaultUTParams())
		}},
		{"srekf-ctrv", ctrvBench(t), func(f filters.MotionModel) (filters.Filter, error) { return filters.NewSREKF(f) }},
		{"srkf-cv", cvBench(t), func(f filters.MotionModel) (filters.Filter, error) { return filters.NewSRKF(f) }},
	}
	for _, c := range cases {
		kf, err := c.mk(c.p.f)
		if err != nil {
			t.Fatal(err)
		}
		if err := kf.Init(c.p.x0, c.p.S0); err != nil {
			t.Fatal(err)
		}
		k := 0
		var failed error
		allocs := testing.AllocsPerRun(500, func() {
			if failed != nil {
				return
			}
			if err := kf.Predict(benchDt); err != nil {
				failed = err
				return
			}
			if err := kf.Prepare(c.p.h, c.p.Rs); err != nil {
				failed = err
				return
			}
			_ = kf.NIS(c.p.zs[k])
			if _, err := kf.Update(c.p.zs[k]); err != nil {
				failed = err
			}
			k++
		})
		if failed != nil {
			t.Fatalf("%s: %v", c.name, failed)
		}
		if allocs != 0 {
			t.Errorf("%s: %v allocations per predict+prepare+NIS+update, want 0", c.name, allocs)
		}
	}
}
