package filters_test

import (
	"errors"
	"fmt"
	"math"
	"testing"

	"gonum.org/v1/gonum/mat"
	"pgregory.net/rapid"

	"github.com/godwit-fusion/godwit/filters"
)

// checkValid asserts the square-root invariants (DESIGN.md): S lower
// triangular with a positive finite diagonal, x finite, and P = S·Sᵀ
// symmetric positive definite (gonum's Cholesky as the judge).
func checkValid(t *rapid.T, f filters.Filter, what string) {
	g := f.State()
	n := g.Dim()
	for _, v := range g.X {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			t.Fatalf("%s: non-finite mean %v", what, g.X)
		}
	}
	if err := filters.CheckSqrt(g.S, n); err != nil {
		t.Fatalf("%s: %v (S=%v)", what, err, g.S)
	}
	P := make([]float64, n*n)
	g.Covariance(P)
	for i := 0; i < n; i++ {
		for j := 0; j < i; j++ {
			if P[i*n+j] != P[j*n+i] {
				t.Fatalf("%s: P not symmetric at %d,%d", what, i, j)
			}
		}
	}
	var ch mat.Cholesky
	if !ch.Factorize(mat.NewSymDense(n, P)) {
		t.Fatalf("%s: P = S·Sᵀ not positive definite", what)
	}
}

func drawLower(t *rapid.T, n int, lo, hi, off float64, label string) []float64 {
	L := make([]float64, n*n)
	for i := 0; i < n; i++ {
		for j := 0; j < i; j++ {
			L[i*n+j] = rapid.Float64Range(-off, off).Draw(t, fmt.Sprintf("%s%d%d", label, i, j))
		}
		L[i*n+i] = rapid.Float64Range(lo, hi).Draw(t, fmt.Sprintf("%s%d", label, i))
	}
	return L
}

func drawMatrix(t *rapid.T, r, c int, scale float64, label string) []float64 {
	A := make([]float64, r*c)
	for i := range A {
		A[i] = rapid.Float64Range(-scale, scale).Draw(t, fmt.Sprintf("%s%d", label, i))
	}
	return A
}

// stableTransition draws F = ρ·(I + 0.3·A)/‖I + 0.3·A‖₂ with ρ ∈ [0.5, 1]:
// ‖F‖₂ ≤ 1 keeps P bounded, and Q > 0 bounds it below, so cond(P) stays
// moderate and forming P = S·Sᵀ in float64 remains meaningful. (With an
// unstable F the condition number grows without bound and any float64 P
// loses definiteness, which is why the filters keep S.)
func stableTransition(t *rapid.T, n int) []float64 {
	A := drawMatrix(t, n, n, 0.3, "F")
	for i := 0; i < n; i++ {
		A[i*n+i] += 1
	}
	nrm := mat.Norm(mat.NewDense(n, n, A), 2)
	rho := rapid.Float64Range(0.5, 1).Draw(t, "rho")
	for i := range A {
		A[i] *= rho / nrm
	}
	return A
}

type filterKind struct {
	name string
	mk   func(f filters.MotionModel, t *rapid.T) (filters.Filter, error)
}

var filterKinds = []filterKind{
	{"srkf", func(f filters.MotionModel, t *rapid.T) (filters.Filter, error) { return filters.NewSRKF(f) }},
	{"srukf", func(f filters.MotionModel, t *rapid.T) (filters.Filter, error) {
		p := filters.UTParams{
			Alpha: rapid.Float64Range(0.3, 1).Draw(t, "alpha"),
			Beta:  rapid.Float64Range(0, 2).Draw(t, "beta"),
			Kappa: rapid.Float64Range(0, 2).Draw(t, "kappa"),
		}
		return filters.NewSRUKF(f, p)
	}},
}

// TestPropertyLongRandomSequences: random linear models, 300 random
// predict/update steps; the square-root invariants hold after every step.
func TestPropertyLongRandomSequences(t *testing.T) {
	for _, fk := range filterKinds {
		t.Run(fk.name, func(t *testing.T) {
			rapid.Check(t, func(t *rapid.T) {
				n := rapid.IntRange(1, 6).Draw(t, "n")
				m := rapid.IntRange(1, 3).Draw(t, "m")
				F := stableTransition(t, n)
				f := &linearMotion{n: n, F: F, G: drawLower(t, n, 0.01, 1, 0.5, "G")}
				h := &linearMeas{m: m, n: n, H: drawMatrix(t, m, n, 2, "H")}
				Rs := drawLower(t, m, 0.01, 2, 0.5, "Rs")
				kf, err := fk.mk(f, t)
				if err != nil {
					t.Fatal(err)
				}
				x0 := drawMatrix(t, n, 1, 10, "x0")
				if err := kf.Init(x0, drawLower(t, n, 0.1, 10, 1, "S0")); err != nil {
					t.Fatal(err)
				}
				seed := rapid.Uint64().Draw(t, "seed")
				z := make([]float64, m)
				for step := 0; step < 300; step++ {
					if err := kf.Predict(0.1); err != nil {
						t.Fatalf("step %d predict: %v", step, err)
					}
					checkValid(t, kf, "after predict")
					if err := kf.Prepare(h, Rs); err != nil {
						t.Fatalf("step %d prepare: %v", step, err)
					}
					h.Predict(z, kf.State().X)
					for i := range z {
						seed = seed*6364136223846793005 + 1442695040888963407
						z[i] += 3 * (float64(seed>>11)/(1<<53) - 0.5)
					}
					if _, err := kf.Update(z); err != nil {
						t.Fatalf("step %d update: %v", step, err)
					}
					checkValid(t, kf, "after update")
				}
			})
		})
	}
}

// TestPropertyNonlinearSRUKF: CTRV + range-bearing-rate with random
// unscented parameters, including negative zeroth weights. Each step either
// succeeds with a valid state or fails with the state bit-identical.
func TestPropertyNonlinearSRUKF(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		sc := newCTRVScenario()
		p := filters.UTParams{
			Alpha: rapid.Float64Range(0.2, 1).Draw(t, "alpha"),
			Beta:  rapid.Float64Range(0, 3).Draw(t, "beta"),
			Kappa: rapid.Float64Range(-2, 2).Draw(t, "kappa"),
		}
		u, err := filters.NewSRUKF(sc.f, p)
		if err != nil {
			return // parameter set with n+λ ≤ 0: rejected, nothing to run
		}
		x0 := []float64{
			rapid.Float64Range(5, 40).Draw(t, "px"), rapid.Float64Range(-20, 20).Draw(t, "py"),
			rapid.Float64Range(0, 8).Draw(t, "v"), rapid.Float64Range(-math.Pi, math.Pi).Draw(t, "yaw"),
			rapid.Float64Range(-0.5, 0.5).Draw(t, "w"),
		}
		if err := u.Init(x0, sc.S0); err != nil {
			t.Fatal(err)
		}
		truth := append([]float64(nil), x0...)
		next := make([]float64, 5)
		z := make([]float64, 3)
		seed := rapid.Uint64().Draw(t, "seed")
		noise := func() float64 {
			seed = seed*6364136223846793005 + 1442695040888963407
			return float64(seed>>11)/(1<<53) - 0.5
		}
		for step := 0; step < 150; step++ {
			sc.f.Propagate(next, truth, 0.1)
			copy(truth, next)
			before := snapshotR(u)
			if err := u.Predict(0.1); err != nil {
				if !errors.Is(err, filters.ErrNotPosDef) {
					t.Fatalf("predict: unexpected %v", err)
				}
				sameStateR(t, u, before, "failed predict")
				continue
			}
			checkValid(t, u, "after predict")
			sc.h.Predict(z, truth)
			if z[0] < 1 {
				continue // target at the sensor: range-bearing undefined
			}
			z[0] += 0.5 * noise()
			z[1] += 0.02 * noise()
			z[2] += 0.3 * noise()
			before = snapshotR(u)
			if err := u.Prepare(sc.h, sc.Rs); err != nil {
				if !errors.Is(err, filters.ErrNotPosDef) {
					t.Fatalf("prepare: unexpected %v", err)
				}
				sameStateR(t, u, before, "failed prepare")
				continue
			}
			if _, err := u.Update(z); err != nil {
				if !errors.Is(err, filters.ErrNotPosDef) {
					t.Fatalf("update: unexpected %v", err)
				}
				sameStateR(t, u, before, "failed update")
				continue
			}
			checkValid(t, u, "after update")
		}
	})
}

func snapshotR(f filters.Filter) stateCopy { return snapshot(f) }

func sameStateR(t *rapid.T, f filters.Filter, c stateCopy, what string) {
	g := f.State()
	for i := range c.x {
		if math.Float64bits(g.X[i]) != math.Float64bits(c.x[i]) {
			t.Fatalf("%s: x[%d] changed", what, i)
		}
	}
	for i := range c.S {
		if math.Float64bits(g.S[i]) != math.Float64bits(c.S[i]) {
			t.Fatalf("%s: S[%d] changed", what, i)
		}
	}
}

// nanMotion is a linear model whose outputs can be switched to NaN, as a
// faulty model (or an overflow) would produce.
type nanMotion struct {
	linearMotion
	bad, badNoise bool
}

func (m *nanMotion) Jacobian(F, x []float64, dt float64) {
	m.linearMotion.Jacobian(F, x, dt)
	if m.badNoise {
		F[len(F)-1] = math.Inf(1)
	}
}

func (m *nanMotion) NoiseFactor(G, x []float64, dt float64) {
	m.linearMotion.NoiseFactor(G, x, dt)
	if m.badNoise {
		G[0] = math.NaN()
	}
}

func (m *nanMotion) Propagate(dst, x []float64, dt float64) {
	m.linearMotion.Propagate(dst, x, dt)
	if m.bad {
		dst[0] = math.NaN()
	}
}

type nanMeas struct {
	linearMeas
	bad bool
}

func (m *nanMeas) Predict(z, x []float64) {
	m.linearMeas.Predict(z, x)
	if m.bad {
		z[m.m-1] = math.Inf(1)
	}
}

// TestPropertyBadInputLeavesStateUntouched: every kind of bad input gives
// an error (or +Inf NIS), never a panic, and the state stays bit-identical;
// the filter then carries on normally.
func TestPropertyBadInputLeavesStateUntouched(t *testing.T) {
	for _, fk := range filterKinds {
		t.Run(fk.name, func(t *testing.T) {
			rapid.Check(t, func(t *rapid.T) {
				n := rapid.IntRange(2, 5).Draw(t, "n")
				m := rapid.IntRange(1, 3).Draw(t, "m")
				F := drawMatrix(t, n, n, 0.2, "F")
				for i := 0; i < n; i++ {
					F[i*n+i] += 1
				}
				f := &nanMotion{linearMotion: linearMotion{n: n, F: F, G: drawLower(t, n, 0.05, 1, 0.3, "G")}}
				h := &nanMeas{linearMeas: linearMeas{m: m, n: n, H: drawMatrix(t, m, n, 1, "H")}}
				Rs := drawLower(t, m, 0.1, 1, 0.3, "Rs")
				kf, err := fk.mk(f, t)
				if err != nil {
					t.Fatal(err)
				}
				if err := kf.Init(drawMatrix(t, n, 1, 5, "x0"), drawLower(t, n, 0.5, 2, 0.5, "S0")); err != nil {
					t.Fatal(err)
				}
				good := make([]float64, m)
				for step := 0; step < 40; step++ {
					if err := kf.Predict(0.1); err != nil {
						t.Fatal(err)
					}
					if err := kf.Prepare(h, Rs); err != nil {
						t.Fatal(err)
					}
					h.Predict(good, kf.State().X)
					before := snapshotR(kf)
					kind := rapid.IntRange(0, 14).Draw(t, "kind")
					bad := append([]float64(nil), good...)
					badRs := append([]float64(nil), Rs...)
					var err error
					prepared := true // whether the good Prepare is still in force
					switch kind {
					case 0:
						bad[rapid.IntRange(0, m-1).Draw(t, "i")] = math.NaN()
						_, err = kf.Update(bad)
					case 1:
						bad[rapid.IntRange(0, m-1).Draw(t, "i")] = math.Inf(-1)
						_, err = kf.Update(bad)
					case 2:
						_, err = kf.Update(append(bad, 1))
					case 3:
						_, err = kf.Update(bad[:m-1])
					case 4:
						err = kf.Predict(math.NaN())
					case 5:
						err = kf.Predict(math.Inf(1))
					case 6:
						err = kf.Predict(-0.1)
					case 7:
						badRs[0] = math.NaN()
						err, prepared = kf.Prepare(h, badRs), false
					case 8:
						badRs[(m-1)*m+m-1] = 0 // singular R
						err, prepared = kf.Prepare(h, badRs), false
					case 9:
						badRs[0] = -badRs[0]
						err, prepared = kf.Prepare(h, badRs), false
					case 10:
						if m > 1 {
							badRs[1] = 0.5 // above the diagonal
						} else {
							badRs = append(badRs, 0)
						}
						err, prepared = kf.Prepare(h, badRs), false
					case 11:
						f.bad = true
						err = kf.Predict(0.1)
						f.bad = false
					case 12:
						h.bad = true
						err, prepared = kf.Prepare(h, Rs), false
						h.bad = false
					case 13:
						err, prepared = kf.Prepare(nil, Rs), false
					case 14:
						f.badNoise = true // NaN in G (and Inf in F for the EKF) only
						err = kf.Predict(0.1)
						f.badNoise = false
					}
					if err == nil {
						t.Fatalf("bad input kind %d accepted", kind)
					}
					sameStateR(t, kf, before, fmt.Sprintf("bad input kind %d", kind))
					if kind <= 3 {
						if nis := kf.NIS(bad); !math.IsInf(nis, 1) && kind <= 1 {
							t.Fatalf("NIS of bad z = %g, want +Inf", nis)
						}
					}
					if !prepared {
						if _, err := kf.Update(good); !errors.Is(err, filters.ErrNotPrepared) {
							t.Fatalf("Update after failed Prepare: %v, want ErrNotPrepared", err)
						}
						if err := kf.Prepare(h, Rs); err != nil {
							t.Fatal(err)
						}
					}
					if _, err := kf.Update(good); err != nil {
						t.Fatalf("good update after bad input kind %d: %v", kind, err)
					}
					checkValid(t, kf, "after recovery")
				}
			})
		})
	}
}
