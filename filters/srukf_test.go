package filters_test

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"github.com/godwit-fusion/godwit/filters"
)

// Parameter sets for the unscented tests; the W_c0 sign is worked out
// from Wan & van der Merwe 2000 eq. 15 (λ = α²(n+κ) − n,
// W_c0 = λ/(n+λ) + 1 − α² + β).
var utCases = []struct {
	name string
	p    filters.UTParams
}{
	{"default", filters.DefaultUTParams()}, // W_c0 = 2
	// n=5: λ = −3.75, W_m0 = −3, W_c0 = −0.25 (negative: downdate path).
	{"alpha0.5", filters.UTParams{Alpha: 0.5, Beta: 2, Kappa: 0}},
	// n=5: λ = −4.95, W_m0 = −99, W_c0 = −96.01.
	{"alpha0.1", filters.UTParams{Alpha: 0.1, Beta: 2, Kappa: 0}},
	{"kappa1", filters.UTParams{Alpha: 1, Beta: 2, Kappa: 1}},
}

// TestUnscentedTransformExactForLinearMaps: for a linear map the scaled
// unscented transform reproduces the mean F·x and covariance F·P·Fᵀ + Q
// exactly, whatever α, β, κ (Julier & Uhlmann 2004, §III: the sigma points
// capture the first two moments, which a linear map carries exactly). With a
// linear measurement the SR-UKF update is then the Kalman 1960 update.
func TestUnscentedTransformExactForLinearMaps(t *testing.T) {
	rng := rand.New(rand.NewPCG(21, 22))
	for _, tc := range utCases {
		for _, dims := range [][2]int{{2, 1}, {4, 2}, {5, 3}, {6, 3}} {
			p := newRandomLinearProblem(rng, dims[0], dims[1])
			u, err := filters.NewSRUKF(p.f, tc.p)
			if err != nil {
				t.Fatal(err)
			}
			if err := u.Init(p.x0, p.S0); err != nil {
				t.Fatal(err)
			}
			ref := newEKFRef(p.f, p.x0, outer(p.S0, p.n, p.n))
			z := make([]float64, p.m)
			for step := 0; step < 30; step++ {
				if err := u.Predict(0.1); err != nil {
					t.Fatalf("%s: %v", tc.name, err)
				}
				ref.predict(0.1)
				if d := maxRelDiff(u.State().X, ref.x.RawVector().Data); d > 1e-9 {
					t.Fatalf("%s n=%d step %d: predicted mean differs from F·x by %g", tc.name, p.n, step, d)
				}
				if d := maxRelDiff(covOf(u), symData(ref.P)); d > 1e-9 {
					t.Fatalf("%s n=%d step %d: predicted covariance differs from F·P·Fᵀ+Q by %g", tc.name, p.n, step, d)
				}
				if err := u.Prepare(p.h, p.Rs); err != nil {
					t.Fatalf("%s: %v", tc.name, err)
				}
				p.h.Predict(z, u.State().X)
				for i := range z {
					z[i] += rng.NormFloat64()
				}
				nis, err := u.Update(z)
				if err != nil {
					t.Fatalf("%s: %v", tc.name, err)
				}
				wantNIS := ref.update(p.h, p.R, z)
				if d := math.Abs(nis-wantNIS) / math.Max(1, wantNIS); d > 1e-9 {
					t.Fatalf("%s step %d: NIS %g, Kalman %g", tc.name, step, nis, wantNIS)
				}
				if d := maxRelDiff(u.State().X, ref.x.RawVector().Data); d > 1e-9 {
					t.Fatalf("%s n=%d step %d: mean differs from Kalman by %g", tc.name, p.n, step, d)
				}
				if d := maxRelDiff(covOf(u), symData(ref.P)); d > 1e-9 {
					t.Fatalf("%s n=%d step %d: covariance differs from Kalman by %g", tc.name, p.n, step, d)
				}
			}
		}
	}
}

// ctrvScenario drives a CTRV target seen by a range-bearing-rate sensor.
type ctrvScenario struct {
	f      ctrvMotion
	h      rbrMeas
	Rs, R  []float64
	x0, S0 []float64
}

func newCTRVScenario() ctrvScenario {
	Rs := []float64{0.3, 0, 0, 0, 0.01, 0, 0, 0, 0.15}
	return ctrvScenario{
		f:  ctrvMotion{accelSD: 1.5, yawAccelSD: 0.6},
		Rs: Rs, R: outer(Rs, 3, 3),
		x0: []float64{12, 5, 3, 0.3, 0.1},
		S0: []float64{1, 0, 0, 0, 0, 0.2, 1, 0, 0, 0, 0, 0, 0.5, 0, 0, 0, 0, 0, 0.1, 0, 0, 0, 0, 0.01, 0.05},
	}
}

// TestSRUKFEqualsCovarianceUKF compares the square-root UKF with the plain
// covariance-form UKF (Wan & van der Merwe 2000, written in
// reference_test.go) on a nonlinear CTRV + range-bearing-rate problem: the
// square-root form changes the arithmetic, not the estimate.
func TestSRUKFEqualsCovarianceUKF(t *testing.T) {
	for _, tc := range utCases {
		rng := rand.New(rand.NewPCG(23, 24))
		sc := newCTRVScenario()
		u, err := filters.NewSRUKF(sc.f, tc.p)
		if err != nil {
			t.Fatal(err)
		}
		if err := u.Init(sc.x0, sc.S0); err != nil {
			t.Fatal(err)
		}
		ref := newPlainUKF(sc.f, tc.p, sc.x0, outer(sc.S0, 5, 5))
		truth := slices.Clone(sc.x0)
		next := make([]float64, 5)
		z := make([]float64, 3)
		for step := 0; step < 60; step++ {
			sc.f.Propagate(next, truth, 0.1)
			copy(truth, next)
			if err := u.Predict(0.1); err != nil {
				t.Fatalf("%s step %d: %v", tc.name, step, err)
			}
			if err := ref.predict(0.1); err != nil {
				t.Fatal(err)
			}
			if d := maxRelDiff(covOf(u), symData(ref.P)); d > 1e-9 {
				t.Fatalf("%s step %d: predicted covariance differs by %g", tc.name, step, d)
			}
			if err := u.Prepare(sc.h, sc.Rs); err != nil {
				t.Fatalf("%s step %d: %v", tc.name, step, err)
			}
			sc.h.Predict(z, truth)
			z[0] += 0.3 * rng.NormFloat64()
			z[1] += 0.01 * rng.NormFloat64()
			z[2] += 0.15 * rng.NormFloat64()
			nis, err := u.Update(z)
			if err != nil {
				t.Fatalf("%s step %d: %v", tc.name, step, err)
			}
			wantNIS, err := ref.update(sc.h, sc.R, z)
			if err != nil {
				t.Fatal(err)
			}
			if d := math.Abs(nis-wantNIS) / math.Max(1, wantNIS); d > 1e-9 {
				t.Fatalf("%s step %d: NIS %g, covariance UKF %g", tc.name, step, nis, wantNIS)
			}
			if d := maxRelDiff(u.State().X, ref.x.RawVector().Data); d > 1e-9 {
				t.Fatalf("%s step %d: mean differs by %g", tc.name, step, d)
			}
			if d := maxRelDiff(covOf(u), symData(ref.P)); d > 1e-9 {
				t.Fatalf("%s step %d: covariance differs by %g", tc.name, step, d)
			}
		}
	}
}

// TestSRUKFAngleWrap checks angle safety by symmetry (common practice):
// rotating the whole plane by π maps a CTRV state (px,py,v,yaw,ω) to
// (−px,−py,v,yaw+π,ω) and a range-bearing-rate measurement (r,b,ṙ) to
// (r,b+π,ṙ). A problem whose yaw and bearing sit on the ±π seam must give
// exactly the rotated result of the same problem about 0, where nothing
// wraps. A filter that averaged raw angles would put the yaw near 0.
func TestSRUKFAngleWrap(t *testing.T) {
	sc := newCTRVScenario()
	xa := []float64{10, -0.05, 2, -0.03, 0.05}          // yaw and bearing near 0
	xb := []float64{-10, 0.05, 2, math.Pi - 0.03, 0.05} // the same rotated by π
	S0 := []float64{0.5, 0, 0, 0, 0, 0, 0.5, 0, 0, 0, 0, 0, 0.3, 0, 0, 0, 0, 0, 0.2, 0, 0, 0, 0, 0.05, 0.1}
	T := []float64{-1, -1, 1, 1, 1} // the rotation's action on the state
	run := func(x0 []float64, z []float64) filters.Gaussian {
		u, err := filters.NewSRUKF(sc.f, filters.DefaultUTParams())
		if err != nil {
			t.Fatal(err)
		}
		// S0 rotated by diag(T) is no longer positive on the diagonal;
		// P = T·P·T is the same for this diagonal S0, so start from S0.
		if err := u.Init(x0, S0); err != nil {
			t.Fatal(err)
		}
		for k := 0; k < 5; k++ {
			if err := u.Predict(0.2); err != nil {
				t.Fatal(err)
			}
		}
		if err := u.Prepare(sc.h, sc.Rs); err != nil {
			t.Fatal(err)
		}
		if _, err := u.Update(z); err != nil {
			t.Fatal(err)
		}
		g := u.State()
		return filters.Gaussian{X: slices.Clone(g.X), S: slices.Clone(g.S)}
	}
	za := []float64{11.9, 0.02, 1.8}
	zb := []float64{11.9, 0.02 - math.Pi, 1.8}
	a := run(xa, za)
	b := run(xb, zb)
	if math.Abs(b.X[3]) < 2 {
		t.Fatalf("yaw on the seam came out %g, near 0: angles averaged without wrapping", b.X[3])
	}
	for i := 0; i < 5; i++ {
		want := T[i] * a.X[i]
		if i == 3 {
			want = wrapTest(a.X[3] + math.Pi)
		}
		d := b.X[i] - want
		if i == 3 {
			d = wrapTest(d)
		}
		if math.Abs(d) > 1e-9*math.Max(1, math.Abs(want)) {
			t.Errorf("state[%d] = %.12g, rotated reference %.12g", i, b.X[i], want)
		}
	}
	Pa := make([]float64, 25)
	Pb := make([]float64, 25)
	a.Covariance(Pa)
	b.Covariance(Pb)
	for i := 0; i < 5; i++ {
		for j := 0; j < 5; j++ {
			Pa[i*5+j] *= T[i] * T[j]
		}
	}
	if d := maxRelDiff(Pb, Pa); d > 1e-9 {
		t.Errorf("covariance on the seam differs from the rotated one by %g", d)
	}
}

func wrapTest(a float64) float64 { return wrap(a) }

// spikeMotion maps x₁ to a narrow spike at the origin (1 there, ≈0 at every
// other sigma point) and keeps x₂: the textbook case where a negative
// zeroth weight makes the unscented covariance indefinite.
type spikeMotion struct{}

func (spikeMotion) Dim() int { return 2 }
func (spikeMotion) Propagate(dst, x []float64, dt float64) {
	dst[0] = math.Exp(-(x[0]*x[0] + x[1]*x[1]) / 1e-4)
	dst[1] = x[1]
}
func (spikeMotion) Jacobian(F, x []float64, dt float64) {}
func (spikeMotion) NoiseFactor(G, x []float64, dt float64) {
	G[0], G[1], G[2], G[3] = 1e-3, 0, 0, 1e-3
}
func (spikeMotion) Residual(dst, a, b []float64) { dst[0], dst[1] = a[0]-b[0], a[1]-b[1] }
func (spikeMotion) Normalize(x []float64)        {}
func (spikeMotion) PosVel(pv, x, J []float64)    {}

type spikeMeas struct{}

func (spikeMeas) Dim() int { return 1 }
func (spikeMeas) Predict(z, x []float64) {
	z[0] = math.Exp(-(x[0]*x[0] + x[1]*x[1]) / 1e-4)
}
func (spikeMeas) Jacobian(H, x []float64)      {}
func (spikeMeas) Residual(dst, a, b []float64) { dst[0] = a[0] - b[0] }

// TestSRUKFNegativeWeightDowndateFails: n = 2 with α = 1, β = 0, κ = −1
// gives λ = −1, W_m0 = W_c0 = −1, W_i = ½. With the spike, Y₀ = 1 and the
// four other points ≈ 0, so x̄ = −1 and the x₁ variance is
// 4·½·1² + (−1)·2² = −2 (worked by hand from Wan & van der Merwe 2000
// eq. 15): the zeroth downdate must fail, and the state must not change.
func TestSRUKFNegativeWeightDowndateFails(t *testing.T) {
	u, err := filters.NewSRUKF(spikeMotion{}, filters.UTParams{Alpha: 1, Beta: 0, Kappa: -1})
	if err != nil {
		t.Fatal(err)
	}
	x0 := []float64{0, 0}
	S0 := []float64{1, 0, 0, 1}
	if err := u.Init(x0, S0); err != nil {
		t.Fatal(err)
	}
	before := snapshot(u)
	err = u.Predict(0.1)
	if !errors.Is(err, filters.ErrNotPosDef) {
		t.Fatalf("Predict: err = %v, want ErrNotPosDef", err)
	}
	sameState(t, u, before, "failed Predict downdate")
	// The same for the innovation factor in Prepare (Rs small).
	err = u.Prepare(spikeMeas{}, []float64{1e-3})
	if !errors.Is(err, filters.ErrNotPosDef) {
		t.Fatalf("Prepare: err = %v, want ErrNotPosDef", err)
	}
	sameState(t, u, before, "failed Prepare downdate")
	if _, err := u.Update([]float64{0}); !errors.Is(err, filters.ErrNotPrepared) {
		t.Errorf("Update after failed Prepare: err = %v, want ErrNotPrepared", err)
	}
}

type stateCopy struct{ x, S []float64 }

func snapshot(f filters.Filter) stateCopy {
	g := f.State()
	return stateCopy{slices.Clone(g.X), slices.Clone(g.S)}
}

// sameState requires the filter's state to be bit-identical to c.
func sameState(t *testing.T, f filters.Filter, c stateCopy, what string) {
	t.Helper()
	g := f.State()
	for i := range c.x {
		if math.Float64bits(g.X[i]) != math.Float64bits(c.x[i]) {
			t.Fatalf("%s: x[%d] changed %v → %v", what, i, c.x[i], g.X[i])
		}
	}
	for i := range c.S {
		if math.Float64bits(g.S[i]) != math.Float64bits(c.S[i]) {
			t.Fatalf("%s: S[%d] changed %v → %v", what, i, c.S[i], g.S[i])
		}
	}
}

func TestUTParamsRejected(t *testing.T) {
	for _, p := range []filters.UTParams{
		{Alpha: 0, Beta: 2}, {Alpha: -1, Beta: 2}, {Alpha: math.NaN(), Beta: 2},
		{Alpha: 1, Beta: math.Inf(1)},
		{Alpha: 1, Beta: 2, Kappa: -5}, // n=5: n+λ = α²(n+κ) = 0
	} {
		if _, err := filters.NewSRUKF(ctrvMotion{}, p); !errors.Is(err, filters.ErrBadParameter) {
			t.Errorf("%+v: err = %v, want ErrBadParameter", p, err)
		}
	}
}
