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
	dots []float64
	work []float64
}

// NewTriaWork returns a workspace for n×k pre-arrays (k ≥ n).
func NewTriaWork(n, k int) *TriaWork {
	w := &TriaWork{n: n, k: k, tau: make([]float64, n), dots: make([]float64, n)}
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
// (LAPACK dgelqf; a plain loop for small arrays, see smallLQ). A is
// overwritten; L may not alias A. It fails with ErrNotPosDef when A·Aᵀ is
// numerically singular (|L_ii| ≤ k·ε·‖row i of L‖₁) and with ErrNonFinite
// on NaN/Inf, leaving L untouched.
func Triangularize(L, A []float64, n, k int, w *TriaWork) error {
	if k < n || len(A) < n*k || len(L) < n*n || w == nil || w.n < n || len(w.work) < n {
		return fmt.Errorf("%w: Triangularize %d×%d", ErrDimension, n, k)
	}
	if k <= smallLQ {
		householderLQ(A, n, k, w.dots)
	} else {
		if !finite(A[:n*k]) {
			return fmt.Errorf("%w: pre-array", ErrNonFinite)
		}
		lapack64.Gelqf(blas64.General{Rows: n, Cols: k, Stride: k, Data: A[:n*k]}, w.tau[:n], w.work, len(w.work))
	}
	return finishLower(L, A, n, k, w.tau[:n])
}

// finishLower checks the triangularised n×k array A and copies its lower
// triangle into L (n×n) with a positive diagonal. sgn is scratch (n).
//
// Orthogonal transformations from the right keep each row's norm, so row i
// of L has the norm of row i of A. L_ii is the part of that row orthogonal
// to the rows above; below k·ε·‖row‖ it is rounding noise and A·Aᵀ is
// numerically singular. The 1-norm (≥ the 2-norm) makes the test a little
// stricter and needs no square root.
func finishLower(L, A []float64, n, k int, sgn []float64) error {
	if err := checkLower(A, n, k, sgn); err != nil {
		return err
	}
	// Flipping the sign of a column of L keeps L·Lᵀ, so the diagonal is made
	// positive column by column.
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

// checkLower is the rank and finiteness test of finishLower; it leaves the
// sign of each diagonal entry of A in sgn.
func checkLower(A []float64, n, k int, sgn []float64) error {
	tol := float64(k) * 0x1p-52
	for i := 0; i < n; i++ {
		row := A[i*k : i*k+i+1]
		var l1 float64
		for _, v := range row {
			l1 += math.Abs(v)
		}
		if !(l1 <= math.MaxFloat64) {
			return fmt.Errorf("%w: pre-array row %d", ErrNonFinite, i)
		}
		d := row[i]
		if !(math.Abs(d) > tol*l1) {
			return fmt.Errorf("%w: pre-array rank deficient at column %d", ErrNotPosDef, i)
		}
		sgn[i] = math.Copysign(1, d)
	}
	return nil
}

// triangularizeUpdate is Triangularize for the measurement-update pre-array
// of the square-root Kalman filter,
//
//	A = [ Rs  H·S ]   (m rows)      →   [ Sy  0  ]
//	    [ 0    S  ]   (n rows)          [ K̄   S⁺ ],
//
// with Rs and S lower triangular, N = m+n. Givens rotations of column i
// (i < m) against columns m+n−1, …, m zero row i of H·S; taken in that
// order they never fill the strictly upper part of the S block, so S⁺
// comes out triangular with no second pass: m·n rotations instead of N
// Householder reflections over the full array (measured with
// BenchmarkUpdateArray). For each row the rotation pairs (c, s) follow from
// running sums of squares, so their square roots and divisions are
// independent of one another. A is overwritten; sgn is scratch (N). The
// blocks are written straight into Sy (m×m), Kbar (n×m) and Spost (n×n).
func triangularizeUpdate(Sy, Kbar, Spost, A []float64, m, n int, sgn []float64) error {
	N := m + n
	if len(A) < N*N || len(Sy) < m*m || len(Kbar) < n*m || len(Spost) < n*n || len(sgn) < N {
		return fmt.Errorf("%w: update array m=%d n=%d", ErrDimension, m, n)
	}
	if !finite(A[:N*N]) {
		return fmt.Errorf("%w: update pre-array", ErrNonFinite)
	}
	// sgn doubles as storage for the n rotation pairs' c values; s values
	// go into the zeroed entries of row i as they are produced.
	for i := 0; i < m; i++ {
		ri := A[i*N : i*N+N]
		a := ri[i]
		// r after rotating in columns m+n−1 … m+l: running sums of squares.
		rPrev := math.Abs(a)
		t2 := a * a
		cs := sgn[:n]
		for l := n - 1; l >= 0; l-- {
			b := ri[m+l]
			t2 += b * b
			if t2 == 0 {
				cs[l] = 1 // nothing to rotate yet; s = b = 0 stays in place
				continue
			}
			r := math.Sqrt(t2)
			cs[l] = rPrev / r
			ri[m+l] = b / r // s, stored in the entry being zeroed
			rPrev = r
		}
		if !(rPrev > 0) {
			return fmt.Errorf("%w: update pre-array row %d is zero", ErrNotPosDef, i)
		}
		if a < 0 {
			// Rs has a positive diagonal; keep the rotation convention
			// simple by flipping column i first.
			for r := i; r < N; r++ {
				A[r*N+i] = -A[r*N+i]
			}
		}
		ri[i] = rPrev
		for l := n - 1; l >= 0; l-- {
			c, s := cs[l], ri[m+l]
			ri[m+l] = 0
			if s == 0 {
				continue
			}
			// Rows below i in the Rs block, then the S block from row m+l:
			// column i is still zero in S-block rows above m+l.
			for r := i + 1; r < m; r++ {
				u, v := A[r*N+i], A[r*N+m+l]
				A[r*N+i] = c*u + s*v
				A[r*N+m+l] = c*v - s*u
			}
			for r := m + l; r < N; r++ {
				u, v := A[r*N+i], A[r*N+m+l]
				A[r*N+i] = c*u + s*v
				A[r*N+m+l] = c*v - s*u
			}
		}
	}
	if err := checkLower(A, N, N, sgn); err != nil {
		return err
	}
	for i := 0; i < m; i++ {
		row := Sy[i*m : i*m+m]
		for j := 0; j < m; j++ {
			if j <= i {
				row[j] = sgn[j] * A[i*N+j]
			} else {
				row[j] = 0
			}
		}
	}
	for i := 0; i < n; i++ {
		src := A[(m+i)*N : (m+i)*N+N]
		krow := Kbar[i*m : i*m+m]
		for j := range krow {
			krow[j] = sgn[j] * src[j]
		}
		srow := Spost[i*n : i*n+n]
		for j := 0; j < n; j++ {
			if j <= i {
				srow[j] = sgn[m+j] * src[m+j]
			} else {
				srow[j] = 0
			}
		}
	}
	return nil
}

// mulLower writes A·S into dst (row stride ds) for the r×n matrix A and the
// n×n lower-triangular S, skipping S's zero upper part and A's zero entries
// (transition and measurement matrices are usually sparse). A plain loop:
// for these sizes blas64.Gemm's dispatch costs more than the arithmetic.
func mulLower(dst []float64, ds int, A []float64, r, n int, S []float64) {
	for i := 0; i < r; i++ {
		a := A[i*n : i*n+n]
		d := dst[i*ds : i*ds+n]
		for j := range d {
			d[j] = 0
		}
		for l, al := range a {
			if al == 0 {
				continue
			}
			srow := S[l*n : l*n+l+1]
			dl := d[:len(srow)]
			for j, v := range srow {
				dl[j] += al * v
			}
		}
	}
}

// smallLQ is the widest pre-array handled by householderLQ instead of
// lapack64.Gelqf. Measured with BenchmarkTriangularize (go test -run '^$'
// -bench Triangularize ./filters/): on the filters' arrays (4×8 to 5×16)
// Gelqf's per-reflector overhead (Dlarfg, Iladlc/Iladlr scans, Dgemv and
// Dger through the BLAS interface) took 1.5–2× the time of the plain loop
// below and put the SR-KF CV step over its 0.5 µs budget. It is the same
// Householder algorithm without the indirection.
const smallLQ = 32

// householderLQ overwrites the lower triangle of the n×k row-major A (k ≥ n)
// with L of the LQ factorisation A = L·Q, using Householder reflections from
// the right (Golub & Van Loan, Matrix Computations, §5.1–5.2, transposed).
// Entries above the diagonal are left holding reflector data. d is scratch
// of length ≥ n.
func householderLQ(A []float64, n, k int, d []float64) {
	d = d[:n]
	next := -1.0 // ‖row i from column i‖², computed while updating row i
	for i := 0; i < n; i++ {
		ri := A[i*k+i : i*k+k]
		var nrm float64
		if next > 0x1p-900 && next < 0x1p900 {
			nrm = math.Sqrt(next)
		} else {
			nrm = rowNorm(ri)
		}
		next = -1
		if !(nrm <= math.MaxFloat64) {
			// Non-finite row: poison the diagonal so the caller reports it.
			ri[0] = math.NaN()
			continue
		}
		if nrm == 0 {
			continue // already triangular; the caller reports the rank
		}
		x0 := ri[0]
		alpha := -math.Copysign(nrm, x0)
		// v = ri − α·e₁ and H = I − v·vᵀ/(nrm·(nrm + |x0|)). For extreme
		// scales v is kept as u = v/nrm with τ = nrm/(nrm + |x0|) ∈ [½, 1],
		// H = I − τ·u·uᵀ, so no product of two tiny or huge numbers forms.
		ri[0] = x0 - alpha
		var tau float64
		if nrm > 0x1p-400 && nrm < 0x1p400 {
			// Usual range: H = I − β·v·vᵀ, β = 1/(nrm·(nrm + |x0|)).
			tau = 1 / (nrm * (nrm + math.Abs(x0)))
		} else {
			tau = nrm / (nrm + math.Abs(x0))
			if inv := 1 / nrm; inv <= math.MaxFloat64 {
				for j := range ri {
					ri[j] *= inv
				}
			} else {
				for j := range ri {
					ri[j] /= nrm
				}
			}
		}
		// All the dot products first, then all the updates: the dots are
		// independent, so their latency chains overlap (LAPACK's dlarf does
		// the same with dgemv then dger).
		for r := i + 1; r < n; r++ {
			rr := A[r*k+i : r*k+k]
			rr = rr[:len(ri)]
			var d0, d1 float64
			j := 0
			for ; j+2 <= len(ri); j += 2 {
				d0 += rr[j] * ri[j]
				d1 += rr[j+1] * ri[j+1]
			}
			if j < len(ri) {
				d0 += rr[j] * ri[j]
			}
			d[r] = tau * (d0 + d1)
		}
		for r := i + 1; r < n; r++ {
			rr := A[r*k+i : r*k+k]
			rr = rr[:len(ri)]
			dr := d[r]
			if r > i+1 {
				for j, uj := range ri {
					rr[j] -= dr * uj
				}
				continue
			}
			// Row i+1 is the next to be reflected: its remaining norm is
			// summed while it is updated (the squares of columns i+1…).
			rr[0] -= dr * ri[0]
			var q0, q1 float64
			j := 1
			for ; j+2 <= len(ri); j += 2 {
				a := rr[j] - dr*ri[j]
				b := rr[j+1] - dr*ri[j+1]
				rr[j], rr[j+1] = a, b
				q0 += a * a
				q1 += b * b
			}
			if j < len(ri) {
				a := rr[j] - dr*ri[j]
				rr[j] = a
				q0 += a * a
			}
			next = q0 + q1
		}
		ri[0] = alpha
	}
}

// dot is Σ a_j·b_j over len(a) (b at least as long). Four accumulators
// break the floating-point add latency chain, which otherwise dominates at
// these lengths.
func dot(a, b []float64) float64 {
	b = b[:len(a)]
	var s0, s1, s2, s3 float64
	j := 0
	for ; j+4 <= len(a); j += 4 {
		s0 += a[j] * b[j]
		s1 += a[j+1] * b[j+1]
		s2 += a[j+2] * b[j+2]
		s3 += a[j+3] * b[j+3]
	}
	for ; j < len(a); j++ {
		s0 += a[j] * b[j]
	}
	return (s0 + s1) + (s2 + s3)
}

// rowNorm is the Euclidean norm, rescaled only when the plain sum of
// squares under- or overflows. NaN or Inf entries give a non-finite norm.
func rowNorm(x []float64) float64 {
	ss := dot(x, x)
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
// NaN for ±Inf and NaN, so one branch-free pass suffices (four accumulators
// shorten the add latency chain).
func finite(v []float64) bool {
	var s0, s1, s2, s3 float64
	j := 0
	for ; j+4 <= len(v); j += 4 {
		s0 += v[j] * 0
		s1 += v[j+1] * 0
		s2 += v[j+2] * 0
		s3 += v[j+3] * 0
	}
	for ; j < len(v); j++ {
		s0 += v[j] * 0
	}
	return (s0+s1)+(s2+s3) == 0
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
		// Plain √(a²+b²) rather than math.Hypot: square-root covariance
		// entries are nowhere near the overflow range and Hypot costs more.
		r := math.Sqrt(lkk*lkk + x[k]*x[k])
		inv := 1 / lkk
		c := r * inv
		s := x[k] * inv
		ic := lkk / r
		L[k*n+k] = r
		for i := k + 1; i < n; i++ {
			lik := (L[i*n+k] + s*x[i]) * ic
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
	// a = L⁻¹ x (forward substitution; x becomes a). The reciprocal
	// diagonal is formed first (independent divisions) so that the
	// substitution chain carries only multiplies and adds.
	for j := 0; j < n; j++ {
		c[j] = 1 / L[j*n+j]
	}
	for j := 0; j < n; j++ {
		v := x[j]
		row := L[j*n : j*n+j]
		for i, l := range row {
			v -= l * x[i]
		}
		x[j] = v * c[j]
	}
	var nrm2 float64
	for _, v := range x[:n] {
		nrm2 += v * v
	}
	if !(nrm2 < 1) {
		return false
	}
	// dchdd's rotations: walking i = n−1..0, α_before = √(1 − Σ_{j≤i} a_j²),
	// α_after = √(α_before² + a_i²), c_i = α_before/α_after,
	// s_i = a_i/α_after. The squares are accumulated first (a cheap add
	// chain) so the square roots and divisions are independent. dchdd also
	// scales each pair against overflow; here α ≥ √(1−‖a‖²) > 1e-8 and
	// |a_i| < 1, so the plain form is safe.
	t := 1 - nrm2
	for i := n - 1; i >= 0; i-- {
		s[i] = t
		t += x[i] * x[i]
		c[i] = t
	}
	for i := 0; i < n; i++ {
		inv := 1 / math.Sqrt(c[i])
		c[i] = math.Sqrt(s[i]) * inv
		s[i] = x[i] * inv
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
