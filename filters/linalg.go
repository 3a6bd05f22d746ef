package filters

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
)

// Errors returned by the filters and the linear-algebra helpers. They are
// wrapped with detail; test with errors.Is.
var (
	ErrDimension    = errors.New("filters: dimension mismatch")
	ErrNonFinite    = errors.New("filters: non-finite value")
	ErrNotPosDef    = errors.New("filters: not positive definite")
	ErrNotPrepared  = errors.New("filters: Update without a matching Prepare")
	ErrBadParameter = errors.New("filters: bad parameter")
)

// TriaWork is the workspace of Triangularize for pre-arrays up to n×k.
// It is sized once; Triangularize allocates nothing.
type TriaWork struct {
	n, k int
	tau  []float64
	tol  []float64
	work []float64
}

// NewTriaWork returns a workspace for n×k pre-arrays (k ≥ n).
func NewTriaWork(n, k int) *TriaWork {
	w := &TriaWork{n: n, k: k, tau: make([]float64, n), tol: make([]float64, n)}
	// Ask LAPACK for its preferred length once; small arrays use the
	// unblocked path, which needs only n.
	q := make([]float64, 1)
	lapack64.Gelqf(blas64.General{Rows: n, Cols: k, Stride: k, Data: make([]float64, n*k)}, w.tau, q, -1)
	w.work = make([]float64, max(n, int(q[0])))
	return w
}

// Triangularize computes the lower-triangular L (n×n, positive diagonal)
// with L·Lᵀ = A·Aᵀ for the n×k pre-array A (row-major, k ≥ n): the "array
// form" of square-root filtering (Kailath, Sayed & Hassibi 2000, §12.3),
// realised as the LQ factorisation A = L·Q with Householder reflections
// (LAPACK dgelqf; a plain loop for small arrays, see smallLQ). A is overwritten. L may not alias A. It fails with
// ErrNotPosDef when A·Aᵀ is numerically singular (|L_ii| ≤ k·ε·‖row i of
// A‖), and with ErrNonFinite on NaN/Inf, leaving L untouched.
func Triangularize(L, A []float64, n, k int, w *TriaWork) error {
	if k < n || len(A) < n*k || len(L) < n*n || w == nil || w.n < n || len(w.work) < n {
		return fmt.Errorf("%w: Triangularize %d×%d", ErrDimension, n, k)
	}
	// Row norms before the factorisation judge rank: the diagonal L_ii is the
	// part of row i orthogonal to the rows above it, and below k·ε·‖row i‖
	// it is rounding noise. A NaN or Inf entry makes its row norm non-finite.
	for i := 0; i < n; i++ {
		nrm := rowNorm(A[i*k : i*k+k])
		if !(nrm <= math.MaxFloat64) {
			return fmt.Errorf("%w: pre-array row %d", ErrNonFinite, i)
		}
		w.tol[i] = float64(k) * 0x1p-52 * nrm
	}
	if k <= smallLQ {
		householderLQ(A, n, k)
	} else {
		lapack64.Gelqf(blas64.General{Rows: n, Cols: k, Stride: k, Data: A[:n*k]}, w.tau[:n], w.work, len(w.work))
	}
	// Flipping the sign of a column of L keeps L·Lᵀ, so the diagonal can be
	// made positive column by column; w.tau is free again and holds signs.
	sgn := w.tau[:n]
	for i := 0; i < n; i++ {
		d := A[i*k+i]
		if !finite(A[i*k : i*k+i+1]) {
			return fmt.Errorf("%w: triangularised pre-array row %d", ErrNonFinite, i)
		}
		if !(math.Abs(d) > w.tol[i]) {
			return fmt.Errorf("%w: pre-array rank deficient at column %d", ErrNotPosDef, i)
		}
		sgn[i] = math.Copysign(1, d)
	}
	for i := 0; i < n; i++ {
		row := L[i*n : i*n+n]
		src := A[i*k : i*k+i+1]
		for j, v := range src {
			row[j] = sgn[j] * v
		}
		for j := i + 1; j < n; j++ {
			row[j] = 0
		}
	}
	return nil
}

// mulLower writes A·S into dst (row stride ds) for the r×n matrix A and the
// n×n lower-triangular S, skipping S's zero upper part. A plain loop: for
// these sizes blas64.Gemm's dispatch costs more than the arithmetic.
func mulLower(dst []float64, ds int, A []float64, r, n int, S []float64) {
	for i := 0; i < r; i++ {
		a := A[i*n : i*n+n]
		d := dst[i*ds : i*ds+n]
		for j := 0; j < n; j++ {
			var s float64
			for l := j; l < n; l++ {
				s += a[l] * S[l*n+j]
			}
			d[j] = s
		}
	}
}

// smallLQ is the widest pre-array handled by householderLQ instead of
// lapack64.Gelqf. Measured (BenchmarkTriangularize, go test -bench
// Triangularize): for the 5×15, 3×13, 4×8 and 6×6 arrays of the filters,
// Gelqf's per-reflector overhead (Dlarfg, Iladlc/Iladlr scans, Dgemv and
// Dger through the BLAS interface) costs several times the arithmetic and
// put the SR-KF CV step over its 0.5 µs budget; the plain loop below is the
// same Householder algorithm without the indirection.
const smallLQ = 32

// householderLQ overwrites the lower triangle of the n×k row-major A (k ≥ n)
// with L of the LQ factorisation A = L·Q, using Householder reflections from
// the right (Golub & Van Loan, Matrix Computations, §5.1–5.2, transposed).
// Entries above the diagonal are left holding reflector data.
func householderLQ(A []float64, n, k int) {
	for i := 0; i < n; i++ {
		ri := A[i*k+i : i*k+k]
		nrm := rowNorm(ri)
		if nrm == 0 || math.IsNaN(nrm) || math.IsInf(nrm, 0) {
			// A zero remainder is already triangular; a non-finite one is
			// reported by the caller.
			continue
		}
		x0 := ri[0]
		alpha := -math.Copysign(nrm, x0)
		// v = ri − α·e₁ and H = I − v·vᵀ/(nrm·(nrm + |x0|)). Kept as
		// u = v/nrm and τ = nrm/(nrm + |x0|) ∈ [½, 1] so that H = I − τ·u·uᵀ
		// and no product of two tiny or huge numbers is ever formed.
		tau := nrm / (nrm + math.Abs(x0))
		ri[0] = x0 - alpha
		if inv := 1 / nrm; inv <= math.MaxFloat64 {
			for j := range ri {
				ri[j] *= inv
			}
		} else {
			for j := range ri {
				ri[j] /= nrm
			}
		}
		for r := i + 1; r < n; r++ {
			rr := A[r*k+i : r*k+k]
			rr = rr[:len(ri)]
			var d float64
			for j, uj := range ri {
				d += rr[j] * uj
			}
			d *= tau
			for j, uj := range ri {
				rr[j] -= d * uj
			}
		}
		ri[0] = alpha
	}
}

// rowNorm is the Euclidean norm, rescaled only when the plain sum of
// squares under- or overflows.
func rowNorm(x []float64) float64 {
	var ss float64
	for _, v := range x {
		ss += v * v
	}
	if ss > 0x1p-900 && ss < 0x1p900 {
		return math.Sqrt(ss)
	}
	return blas64.Nrm2(blas64.Vector{N: len(x), Inc: 1, Data: x})
}

// Cholesky writes into L (n×n) the lower-triangular factor of the symmetric
// matrix P (only its lower triangle is read), P = L·Lᵀ. It returns
// ErrNotPosDef if P is not positive definite, ErrNonFinite for NaN/Inf.
// L may alias P. On error L holds unspecified values unless L and P differ,
// in which case only L is written.
func Cholesky(L, P []float64, n int) error {
	if n <= 0 || len(P) < n*n || len(L) < n*n {
		return fmt.Errorf("%w: Cholesky n=%d", ErrDimension, n)
	}
	for i := 0; i < n; i++ {
		for j := 0; j <= i; j++ {
			if v := P[i*n+j]; math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("%w: P[%d,%d]", ErrNonFinite, i, j)
			}
		}
	}
	for i := 0; i < n; i++ {
		for j := 0; j <= i; j++ {
			L[i*n+j] = P[i*n+j]
		}
		for j := i + 1; j < n; j++ {
			L[i*n+j] = 0
		}
	}
	if _, ok := lapack64.Potrf(blas64.Symmetric{Uplo: blas.Lower, N: n, Stride: n, Data: L[:n*n]}); !ok {
		return ErrNotPosDef
	}
	return nil
}

// SolveLower solves L·x = b in place (b becomes x). L is n×n lower triangular
// with a non-zero diagonal.
func SolveLower(L []float64, n int, b []float64) {
	blas64.Trsv(blas.NoTrans, blas64.Triangular{Uplo: blas.Lower, Diag: blas.NonUnit, N: n, Stride: n, Data: L[:n*n]},
		blas64.Vector{N: n, Inc: 1, Data: b[:n]})
}

// SolveLowerT solves Lᵀ·x = b in place (b becomes x).
func SolveLowerT(L []float64, n int, b []float64) {
	blas64.Trsv(blas.Trans, blas64.Triangular{Uplo: blas.Lower, Diag: blas.NonUnit, N: n, Stride: n, Data: L[:n*n]},
		blas64.Vector{N: n, Inc: 1, Data: b[:n]})
}

// CheckSqrt reports whether S (n×n) is a valid square-root covariance:
// finite, lower triangular, positive diagonal.
func CheckSqrt(S []float64, n int) error {
	if n <= 0 || len(S) != n*n {
		return fmt.Errorf("%w: square root has %d entries, want %d×%d", ErrDimension, len(S), n, n)
	}
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			v := S[i*n+j]
			if math.IsNaN(v) || math.IsInf(v, 0) {
				return fmt.Errorf("%w: square root [%d,%d]", ErrNonFinite, i, j)
			}
			if j > i && v != 0 {
				return fmt.Errorf("%w: square root [%d,%d]=%g above the diagonal, want lower triangular", ErrBadParameter, i, j, v)
			}
		}
		if !(S[i*n+i] > 0) {
			return fmt.Errorf("%w: square root diagonal [%d]=%g, want > 0", ErrNotPosDef, i, S[i*n+i])
		}
	}
	return nil
}

// finite reports whether every entry is finite: x·0 is 0 for finite x and
// NaN for ±Inf and NaN, so one branch-free pass suffices.
func finite(v []float64) bool {
	var s float64
	for _, x := range v {
		s += x * 0
	}
	return s == 0
}

// CholUpdate overwrites the lower-triangular L (n×n, positive diagonal) with
// the factor of L·Lᵀ + x·xᵀ. x is used as scratch and overwritten. It only
// fails on non-finite x, leaving L untouched. The rotation-based rank-one
// modification of Gill, Golub, Murray & Saunders 1974.
func CholUpdate(L []float64, n int, x []float64) error {
	if len(L) < n*n || len(x) < n {
		return fmt.Errorf("%w: CholUpdate n=%d", ErrDimension, n)
	}
	if !finite(x[:n]) {
		return fmt.Errorf("%w: CholUpdate vector", ErrNonFinite)
	}
	cholUpdate(L, n, x)
	return nil
}

func cholUpdate(L []float64, n int, x []float64) {
	for k := 0; k < n; k++ {
		lkk := L[k*n+k]
		r := math.Hypot(lkk, x[k])
		c := r / lkk
		s := x[k] / lkk
		L[k*n+k] = r
		for i := k + 1; i < n; i++ {
			lik := (L[i*n+k] + s*x[i]) / c
			L[i*n+k] = lik
			x[i] = c*x[i] - s*lik
		}
	}
}

// DowndateWork is scratch for CholDowndate of dimension up to n.
type DowndateWork struct {
	backup, c, s []float64
}

// NewDowndateWork returns scratch for CholDowndate of dimension n.
func NewDowndateWork(n int) *DowndateWork {
	return &DowndateWork{backup: make([]float64, n*n), c: make([]float64, n), s: make([]float64, n)}
}

// CholDowndate overwrites the lower-triangular L (n×n, positive diagonal)
// with the factor of L·Lᵀ − x·xᵀ. x is overwritten. If the result would not
// be positive definite it returns ErrNotPosDef and L is left bit-identical.
// Method: LINPACK dchdd (Dongarra, Bunch, Moler & Stewart 1979, ch. 10):
// test ‖L⁻¹x‖ < 1 first, then apply plane rotations, which cannot fail.
func CholDowndate(L []float64, n int, x []float64, w *DowndateWork) error {
	if len(L) < n*n || len(x) < n || w == nil || len(w.c) < n || len(w.backup) < n*n {
		return fmt.Errorf("%w: CholDowndate n=%d", ErrDimension, n)
	}
	if !finite(x[:n]) {
		return fmt.Errorf("%w: CholDowndate vector", ErrNonFinite)
	}
	copy(w.backup, L[:n*n])
	if !cholDowndate(L, n, x, w.c, w.s) {
		copy(L[:n*n], w.backup[:n*n])
		return fmt.Errorf("%w: rank-one downdate", ErrNotPosDef)
	}
	return nil
}

// cholDowndate is CholDowndate without the backup; on false L may be
// modified only when the final diagonal check fails.
func cholDowndate(L []float64, n int, x, c, s []float64) bool {
	// a = L⁻¹ x (forward substitution; x becomes a).
	for j := 0; j < n; j++ {
		v := x[j]
		for i := 0; i < j; i++ {
			v -= L[j*n+i] * x[i]
		}
		x[j] = v / L[j*n+j]
	}
	var nrm2 float64
	for j := 0; j < n; j++ {
		nrm2 += x[j] * x[j]
	}
	if !(nrm2 < 1) {
		return false
	}
	alpha := math.Sqrt(1 - nrm2)
	for i := n - 1; i >= 0; i-- {
		scale := alpha + math.Abs(x[i])
		a := alpha / scale
		b := x[i] / scale
		nrm := math.Sqrt(a*a + b*b)
		c[i] = a / nrm
		s[i] = b / nrm
		alpha = scale * nrm
	}
	// In dchdd's upper-triangular R, r(i,j) = L[j,i] here.
	for j := 0; j < n; j++ {
		var xx float64
		for i := j; i >= 0; i-- {
			rij := L[j*n+i]
			t := c[i]*xx + s[i]*rij
			L[j*n+i] = c[i]*rij - s[i]*xx
			xx = t
		}
	}
	for j := 0; j < n; j++ {
		d := L[j*n+j]
		if d < 0 {
			for i := j; i < n; i++ {
				L[i*n+j] = -L[i*n+j]
			}
			d = -d
		}
		if !(d > 0) || math.IsInf(d, 0) {
			return false
		}
	}
	return true
}
