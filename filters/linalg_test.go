package filters_test

import (
	"errors"
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/mat"

	"github.com/godwit-fusion/godwit/filters"
)

// gonumChol is the reference Cholesky factor (gonum's mat.Cholesky) of the
// n×n symmetric matrix P, as a row-major lower-triangular slice.
func gonumChol(t *testing.T, P []float64, n int) []float64 {
	t.Helper()
	var ch mat.Cholesky
	if !ch.Factorize(mat.NewSymDense(n, append([]float64(nil), P...))) {
		t.Fatalf("reference Cholesky failed: matrix not positive definite")
	}
	var L mat.TriDense
	ch.LTo(&L)
	out := make([]float64, n*n)
	for i := 0; i < n; i++ {
		for j := 0; j <= i; j++ {
			out[i*n+j] = L.At(i, j)
		}
	}
	return out
}

// outer returns A·Aᵀ for the r×c matrix A.
func outer(A []float64, r, c int) []float64 {
	out := make([]float64, r*r)
	var M mat.Dense
	a := mat.NewDense(r, c, A)
	M.Mul(a, a.T())
	for i := 0; i < r; i++ {
		for j := 0; j < r; j++ {
			out[i*r+j] = M.At(i, j)
		}
	}
	return out
}

func maxRelDiff(a, b []float64) float64 {
	var scale, d float64
	for i := range a {
		scale = math.Max(scale, math.Abs(b[i]))
	}
	if scale == 0 {
		scale = 1
	}
	for i := range a {
		d = math.Max(d, math.Abs(a[i]-b[i])/scale)
	}
	return d
}

func TestTriangularizeIsCholeskyOfAAt(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for _, sz := range [][2]int{{1, 1}, {2, 5}, {4, 8}, {5, 15}, {7, 7}, {3, 13}} {
		n, k := sz[0], sz[1]
		A := randomMatrix(rng, n, k, 1)
		want := gonumChol(t, outer(A, n, k), n) // the Cholesky factor is unique (positive diagonal)
		L := make([]float64, n*n)
		for i := range L {
			L[i] = math.NaN() // every entry must be written
		}
		w := filters.NewTriaWork(n, k)
		if err := filters.Triangularize(L, slices.Clone(A), n, k, w); err != nil {
			t.Fatalf("%d×%d: %v", n, k, err)
		}
		if err := filters.CheckSqrt(L, n); err != nil {
			t.Fatalf("%d×%d: %v", n, k, err)
		}
		if d := maxRelDiff(L, want); d > 1e-12 {
			t.Errorf("%d×%d: L differs from gonum's Cholesky of A·Aᵀ by %g", n, k, d)
		}
	}
}

func TestTriangularizeRankDeficient(t *testing.T) {
	// Two equal rows make A·Aᵀ singular: the second LQ diagonal is exactly 0.
	A := []float64{1, 2, 0, 1, 2, 0}
	L := make([]float64, 4)
	err := filters.Triangularize(L, A, 2, 3, filters.NewTriaWork(2, 3))
	if !errors.Is(err, filters.ErrNotPosDef) {
		t.Fatalf("err = %v, want ErrNotPosDef", err)
	}
	if !slices.Equal(L, make([]float64, 4)) {
		t.Errorf("L written on failure: %v", L)
	}
	B := []float64{1, math.NaN(), 0, 1, 2, 3}
	if err := filters.Triangularize(L, B, 2, 3, filters.NewTriaWork(2, 3)); !errors.Is(err, filters.ErrNonFinite) {
		t.Errorf("NaN pre-array: err = %v, want ErrNonFinite", err)
	}
	if err := filters.Triangularize(L, B, 3, 2, filters.NewTriaWork(2, 3)); !errors.Is(err, filters.ErrDimension) {
		t.Errorf("k < n: err = %v, want ErrDimension", err)
	}
}

func TestCholesky(t *testing.T) {
	rng := rand.New(rand.NewPCG(3, 4))
	n := 5
	A := randomMatrix(rng, n, n+2, 1)
	P := outer(A, n, n+2)
	L := make([]float64, n*n)
	if err := filters.Cholesky(L, P, n); err != nil {
		t.Fatal(err)
	}
	if d := maxRelDiff(L, gonumChol(t, P, n)); d > 1e-13 {
		t.Errorf("Cholesky differs from gonum by %g", d)
	}
	// [[1,2],[2,1]] has eigenvalues −1 and 3 (characteristic polynomial
	// (1−λ)² − 4): indefinite.
	if err := filters.Cholesky(make([]float64, 4), []float64{1, 2, 2, 1}, 2); !errors.Is(err, filters.ErrNotPosDef) {
		t.Errorf("indefinite: err = %v, want ErrNotPosDef", err)
	}
	if err := filters.Cholesky(make([]float64, 4), []float64{1, 0, math.Inf(1), 1}, 2); !errors.Is(err, filters.ErrNonFinite) {
		t.Errorf("Inf: err = %v, want ErrNonFinite", err)
	}
}

func TestSolveLower(t *testing.T) {
	rng := rand.New(rand.NewPCG(5, 6))
	n := 4
	L := randomLower(rng, n, 0.5, 2, 1)
	b := randomMatrix(rng, n, 1, 1)
	x := slices.Clone(b)
	filters.SolveLower(L, n, x)
	var want, wantT mat.VecDense
	Lm := mat.NewTriDense(n, mat.Lower, slices.Clone(L))
	if err := want.SolveVec(Lm, mat.NewVecDense(n, slices.Clone(b))); err != nil {
		t.Fatal(err)
	}
	if d := maxRelDiff(x, want.RawVector().Data); d > 1e-13 {
		t.Errorf("SolveLower differs from gonum by %g", d)
	}
	xt := slices.Clone(b)
	filters.SolveLowerT(L, n, xt)
	if err := wantT.SolveVec(Lm.T(), mat.NewVecDense(n, slices.Clone(b))); err != nil {
		t.Fatal(err)
	}
	if d := maxRelDiff(xt, wantT.RawVector().Data); d > 1e-13 {
		t.Errorf("SolveLowerT differs from gonum by %g", d)
	}
}

func TestCholUpdateDowndate(t *testing.T) {
	rng := rand.New(rand.NewPCG(7, 8))
	for n := 1; n <= 6; n++ {
		L := randomLower(rng, n, 0.5, 2, 1)
		x := randomMatrix(rng, n, 1, 1)
		P := outer(L, n, n)
		Pu := slices.Clone(P)
		for i := 0; i < n; i++ {
			for j := 0; j < n; j++ {
				Pu[i*n+j] += x[i] * x[j]
			}
		}
		Lu := slices.Clone(L)
		if err := filters.CholUpdate(Lu, n, slices.Clone(x)); err != nil {
			t.Fatal(err)
		}
		if d := maxRelDiff(Lu, gonumChol(t, Pu, n)); d > 1e-12 {
			t.Errorf("n=%d: update differs from gonum Cholesky of P+xxᵀ by %g", n, d)
		}
		// Downdating the update must give back L; and directly against gonum.
		w := filters.NewDowndateWork(n)
		Ld := slices.Clone(Lu)
		if err := filters.CholDowndate(Ld, n, slices.Clone(x), w); err != nil {
			t.Fatalf("n=%d: %v", n, err)
		}
		if d := maxRelDiff(Ld, L); d > 1e-10 {
			t.Errorf("n=%d: downdate(update(L)) differs from L by %g", n, d)
		}
		if err := filters.CheckSqrt(Ld, n); err != nil {
			t.Errorf("n=%d: %v", n, err)
		}
	}
}

func TestCholDowndateFailureLeavesInputUntouched(t *testing.T) {
	rng := rand.New(rand.NewPCG(9, 10))
	n := 4
	L := randomLower(rng, n, 0.5, 2, 1)
	// x = L·u with ‖u‖ ≥ 1: L·Lᵀ − x·xᵀ = L(I − u·uᵀ)Lᵀ has the eigenvalue
	// 1 − ‖u‖² ≤ 0 along u, so it is not positive definite.
	for _, norm := range []float64{1, 1.0001, 3} {
		u := []float64{0.5, -0.5, 0.5, 0.5} // unit vector
		for i := range u {
			u[i] *= norm
		}
		x := make([]float64, n)
		matVec(x, L, u, n, n)
		orig := slices.Clone(L)
		err := filters.CholDowndate(L, n, x, filters.NewDowndateWork(n))
		if !errors.Is(err, filters.ErrNotPosDef) {
			t.Errorf("‖u‖=%g: err = %v, want ErrNotPosDef", norm, err)
		}
		if !slices.Equal(L, orig) {
			t.Errorf("‖u‖=%g: L changed on failed downdate", norm)
		}
	}
	if err := filters.CholUpdate(L, n, []float64{0, math.NaN(), 0, 0}); !errors.Is(err, filters.ErrNonFinite) {
		t.Errorf("NaN update: err = %v", err)
	}
}
