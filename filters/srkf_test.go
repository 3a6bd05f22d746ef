package filters_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/godwit-fusion/godwit/filters"
)

// covOf returns P = S·Sᵀ of the filter's state.
func covOf(f filters.Filter) []float64 {
	g := f.State()
	P := make([]float64, g.Dim()*g.Dim())
	g.Covariance(P)
	return P
}

func symData(P *mat.SymDense) []float64 {
	n := P.SymmetricDim()
	out := make([]float64, n*n)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			out[i*n+j] = P.At(i, j)
		}
	}
	return out
}

// randomLinearProblem is a benign random linear-Gaussian system: F near the
// identity, Q, R and P0 well conditioned.
type randomLinearProblem struct {
	n, m   int
	f      *linearMotion
	h      *linearMeas
	Rs, R  []float64
	x0, S0 []float64
}

func newRandomLinearProblem(rng *rand.Rand, n, m int) randomLinearProblem {
	F := randomMatrix(rng, n, n, 0.2)
	for i := 0; i < n; i++ {
		F[i*n+i] += 1
	}
	p := randomLinearProblem{
		n:  n,
		m:  m,
		f:  &linearMotion{n: n, F: F, G: randomLower(rng, n, 0.1, 0.5, 0.2)},
		h:  &linearMeas{m: m, n: n, H: randomMatrix(rng, m, n, 1)},
		Rs: randomLower(rng, m, 0.2, 1, 0.3),
		x0: randomMatrix(rng, n, 1, 5),
		S0: randomLower(rng, n, 0.5, 2, 0.5),
	}
	p.R = outer(p.Rs, m, m)
	return p
}

func TestSRKFEqualsCovarianceKalman(t *testing.T) {
	rng := rand.New(rand.NewPCG(11, 12))
	for _, dims := range [][2]int{{1, 1}, {2, 1}, {4, 2}, {5, 3}, {6, 2}} {
		p := newRandomLinearProblem(rng, dims[0], dims[1])
		kf, err := filters.NewSRKF(p.f)
		if err != nil {
			t.Fatal(err)
		}
		if err := kf.Init(p.x0, p.S0); err != nil {
			t.Fatal(err)
		}
		ref := newEKFRef(p.f, p.x0, outer(p.S0, p.n, p.n))
		z := make([]float64, p.m)
		for step := 0; step < 60; step++ {
			if err := kf.Predict(0.1); err != nil {
				t.Fatal(err)
			}
			ref.predict(0.1)
			if err := kf.Prepare(p.h, p.Rs); err != nil {
				t.Fatal(err)
			}
			p.h.Predict(z, kf.State().X)
			for i := range z {
				z[i] += rng.NormFloat64()
			}
			nis, err := kf.Update(z)
			if err != nil {
				t.Fatal(err)
			}
			// Kalman 1960 in covariance form, written in reference_test.go.
			wantNIS := ref.update(p.h, p.R, z)
			if d := math.Abs(nis-wantNIS) / math.Max(1, wantNIS); d > 1e-9 {
				t.Fatalf("n=%d m=%d step %d: NIS %g, covariance form %g", p.n, p.m, step, nis, wantNIS)
			}
			if d := maxRelDiff(kf.State().X, ref.x.RawVector().Data); d > 1e-9 {
				t.Fatalf("n=%d m=%d step %d: mean differs by %g", p.n, p.m, step, d)
			}
			if d := maxRelDiff(covOf(kf), symData(ref.P)); d > 1e-9 {
				t.Fatalf("n=%d m=%d step %d: covariance differs by %g", p.n, p.m, step, d)
			}
		}
	}
}

func TestSREKFEqualsCovarianceEKF(t *testing.T) {
	rng := rand.New(rand.NewPCG(13, 14))
	f := ctrvMotion{accelSD: 1.5, yawAccelSD: 0.6}
	h := rbrMeas{}
	Rs := []float64{0.3, 0, 0, 0, 0.01, 0, 0, 0, 0.15}
	R := outer(Rs, 3, 3)
	x0 := []float64{12, 5, 3, 0.3, 0.1}
	S0 := []float64{1, 0, 0, 0, 0, 0.2, 1, 0, 0, 0, 0, 0, 0.5, 0, 0, 0, 0, 0, 0.1, 0, 0, 0, 0, 0.01, 0.05}
	kf, err := filters.NewSREKF(f)
	if err != nil {
		t.Fatal(err)
	}
	if err := kf.Init(x0, S0); err != nil {
		t.Fatal(err)
	}
	ref := newEKFRef(f, x0, outer(S0, 5, 5))
	truth := append([]float64(nil), x0...)
	next := make([]float64, 5)
	z := make([]float64, 3)
	for step := 0; step < 50; step++ {
		f.Propagate(next, truth, 0.1)
		copy(truth, next)
		if err := kf.Predict(0.1); err != nil {
			t.Fatal(err)
		}
		ref.predict(0.1)
		if err := kf.Prepare(h, Rs); err != nil {
			t.Fatal(err)
		}
		h.Predict(z, truth)
		z[0] += 0.3 * rng.NormFloat64()
		z[1] += 0.01 * rng.NormFloat64()
		z[2] += 0.15 * rng.NormFloat64()
		nis, err := kf.Update(z)
		if err != nil {
			t.Fatal(err)
		}
		wantNIS := ref.update(h, R, z)
		if d := math.Abs(nis-wantNIS) / math.Max(1, wantNIS); d > 1e-9 {
			t.Fatalf("step %d: NIS %g, covariance-form EKF %g", step, nis, wantNIS)
		}
		if d := maxRelDiff(kf.State().X, ref.x.RawVector().Data); d > 1e-9 {
			t.Fatalf("step %d: mean differs by %g", step, d)
		}
		if d := maxRelDiff(covOf(kf), symData(ref.P)); d > 1e-9 {
			t.Fatalf("step %d: covariance differs by %g", step, d)
		}
	}
}

// TestIllConditionedMeasurement is the classic example of the conventional
// Kalman update losing positive definiteness (from memory; it appears in
// Grewal & Andrews' text on Kalman filtering): P0 = I₃,
// H = [[1,1,1],[1,1,1+δ]], R = δ²·I with δ tiny. With δ² below float64's ε
// the conventional innovation covariance is exactly singular; a little
// above it the update P − K·H·P comes out indefinite.
//
// Exact posterior used as the check, P⁺ = (I + Hᵀ·H/δ²)⁻¹: u = (1,−1,0)/√2
// has H·u = 0, so u is an eigenvector with eigenvalue 1. On the row space of
// H the eigenvalues are δ²/(δ² + σ²) with σ² the eigenvalues of H·Hᵀ
// (trace 6 + 2δ + δ², determinant 2δ²): σ² ≈ 6 and ≈ δ²/3, so the other two
// eigenvalues are ≈ δ²/6 and ≈ 3/4 (relative corrections O(δ)).
func TestIllConditionedMeasurement(t *testing.T) {
	for _, delta := range []float64{1e-6, 1e-7, 1e-9} {
		H := []float64{1, 1, 1, 1, 1, 1 + delta}
		h := &linearMeas{m: 2, n: 3, H: H}
		f := &linearMotion{n: 3, F: []float64{1, 0, 0, 0, 1, 0, 0, 0, 1}, G: make([]float64, 9)}
		x0 := []float64{0, 0, 0}
		I3 := []float64{1, 0, 0, 0, 1, 0, 0, 0, 1}
		R := []float64{delta * delta, 0, 0, delta * delta}
		Rs := []float64{delta, 0, 0, delta}
		z := []float64{1, 1}

		// Conventional covariance form P − K·H·P.
		ref := newEKFRef(f, x0, I3)
		if _, err := ref.tryUpdate(h, R, z); err != nil {
			t.Logf("δ=%g: conventional form cannot invert H·P·Hᵀ + R: %v", delta, err)
		} else {
			var ch mat.Cholesky
			var eig mat.EigenSym
			if !eig.Factorize(ref.P, false) {
				t.Fatal("eigen decomposition failed")
			}
			vals := eig.Values(nil)
			if ch.Factorize(ref.P) && vals[0] > 0 {
				t.Fatalf("δ=%g: conventional update stayed positive definite (eigenvalues %v); the example no longer shows the failure", delta, vals)
			}
			t.Logf("δ=%g: conventional P − K·H·P has eigenvalues %v: not positive definite", delta, vals)
		}

		kf, err := filters.NewSRKF(f)
		if err != nil {
			t.Fatal(err)
		}
		if err := kf.Init(x0, I3); err != nil {
			t.Fatal(err)
		}
		if err := kf.Prepare(h, Rs); err != nil {
			t.Fatal(err)
		}
		if _, err := kf.Update(z); err != nil {
			t.Fatal(err)
		}
		S := kf.State().S
		if err := filters.CheckSqrt(S, 3); err != nil {
			t.Fatalf("δ=%g: square-root update lost validity: %v", delta, err)
		}
		// Singular values of S are the square roots of P's eigenvalues and
		// are computed to absolute accuracy ε·‖S‖, so even δ²/6 is resolved.
		var svd mat.SVD
		if !svd.Factorize(mat.NewDense(3, 3, append([]float64(nil), S...)), mat.SVDNone) {
			t.Fatal("SVD failed")
		}
		sv := svd.Values(nil) // descending
		eigs := []float64{sv[0] * sv[0], sv[1] * sv[1], sv[2] * sv[2]}
		// The same formulas with the δ float64 actually stores in 1+δ.
		dH := (1 + delta) - 1
		tr, det := 6+2*dH+dH*dH, 2*dH*dH
		s1 := (tr + math.Sqrt(tr*tr-4*det)) / 2
		s2 := det / s1
		d2 := delta * delta
		want := []float64{1, d2 / (d2 + s2), d2 / (d2 + s1)}
		// H·S carries δ with an absolute rounding error of ε, so the two
		// measured directions are known to about ε/δ relative (1e-7 at
		// δ = 1e-9); the unmeasured one is exact.
		tol := []float64{1e-9, 1e-6, 1e-6}
		for i := range eigs {
			if math.Abs(eigs[i]-want[i]) > tol[i]*want[i] {
				t.Errorf("δ=%g: eigenvalue %d of S·Sᵀ is %.10g, exact ≈ %.10g", delta, i, eigs[i], want[i])
			}
		}
	}
}

// randomWalkSteadyState is the closed-form solution of the scalar Riccati
// equation for x' = x + w, z = x + v, Var w = q, Var v = r. With M the
// steady prior variance and P = M·r/(M+r) the posterior, M = P + q gives
// M² − q·M − q·r = 0, so M = (q + √(q² + 4qr))/2 and P = M·r/(M + r).
// For q = r = 1, M is the golden ratio φ and P = 1/φ = 0.6180339887…
func randomWalkSteadyState(q, r float64) float64 {
	M := (q + math.Sqrt(q*q+4*q*r)) / 2
	return M * r / (M + r)
}

func TestRandomWalkSteadyStateVariance(t *testing.T) {
	if got := randomWalkSteadyState(1, 1); math.Abs(got-(math.Sqrt(5)-1)/2) > 1e-15 {
		t.Fatalf("closed form %g, want 1/φ", got) // 1/φ = (√5 − 1)/2
	}
	for _, qr := range [][2]float64{{1, 1}, {0.01, 4}, {9, 0.25}} {
		q, r := qr[0], qr[1]
		f := &linearMotion{n: 1, F: []float64{1}, G: []float64{math.Sqrt(q)}}
		h := &linearMeas{m: 1, n: 1, H: []float64{1}}
		makers := map[string]func() (filters.Filter, error){
			"srkf":  func() (filters.Filter, error) { return filters.NewSRKF(f) },
			"srukf": func() (filters.Filter, error) { return filters.NewSRUKF(f, filters.DefaultUTParams()) },
		}
		for name, mk := range makers {
			kf, err := mk()
			if err != nil {
				t.Fatal(err)
			}
			if err := kf.Init([]float64{0}, []float64{10}); err != nil {
				t.Fatal(err)
			}
			for k := 0; k < 300; k++ {
				if err := kf.Predict(1); err != nil {
					t.Fatal(err)
				}
				if err := kf.Prepare(h, []float64{math.Sqrt(r)}); err != nil {
					t.Fatal(err)
				}
				if _, err := kf.Update([]float64{float64(k % 7)}); err != nil {
					t.Fatal(err)
				}
			}
			s := kf.State().S[0]
			want := randomWalkSteadyState(q, r)
			if math.Abs(s*s-want) > 1e-12*want {
				t.Errorf("%s q=%g r=%g: steady variance %.15g, Riccati %.15g", name, q, r, s*s, want)
			}
		}
	}
}

// TestPredictedAndLogDet checks the prepared prediction helpers against the
// covariance form: ẑ = H·x and ln det(H·P·Hᵀ + R) computed by gonum.
func TestPredictedAndLogDet(t *testing.T) {
	rng := rand.New(rand.NewPCG(61, 62))
	p := newRandomLinearProblem(rng, 4, 2)
	kf, err := filters.NewSRKF(p.f)
	if err != nil {
		t.Fatal(err)
	}
	if err := kf.Init(p.x0, p.S0); err != nil {
		t.Fatal(err)
	}
	if zh, Sy := kf.Predicted(); zh != nil || Sy != nil || !math.IsNaN(kf.LogDetInnovation()) {
		t.Fatal("prediction helpers answer before Prepare")
	}
	if err := kf.Prepare(p.h, p.Rs); err != nil {
		t.Fatal(err)
	}
	zh, _ := kf.Predicted()
	want := make([]float64, 2)
	p.h.Predict(want, p.x0)
	if d := maxRelDiff(zh, want); d > 1e-14 {
		t.Errorf("ẑ differs from H·x by %g", d)
	}
	H := mat.NewDense(2, 4, p.h.H)
	P := mat.NewDense(4, 4, outer(p.S0, 4, 4))
	var HP, S mat.Dense
	HP.Mul(H, P)
	S.Mul(&HP, H.T())
	S.Add(&S, mat.NewDense(2, 2, p.R))
	ld, sign := mat.LogDet(&S)
	if sign <= 0 || math.Abs(kf.LogDetInnovation()-ld) > 1e-12*math.Max(1, math.Abs(ld)) {
		t.Errorf("ln det P_zz = %.15g, gonum %.15g (sign %g)", kf.LogDetInnovation(), ld, sign)
	}
}
