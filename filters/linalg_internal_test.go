package filters

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
)

// triangularizeLAPACK is Triangularize forced through lapack64.Gelqf, the
// reference for the hand kernel.
func triangularizeLAPACK(L, A []float64, n, k int) {
	w := NewTriaWork(n, k)
	lapack64.Gelqf(blas64.General{Rows: n, Cols: k, Stride: k, Data: A}, w.tau, w.work, len(w.work))
	for i := 0; i < n; i++ {
		for j := 0; j <= i; j++ {
			v := A[i*k+j]
			if A[j*k+j] < 0 {
				v = -v
			}
			L[i*n+j] = v
		}
	}
}

func TestHouseholderLQMatchesLAPACK(t *testing.T) {
	rng := rand.New(rand.NewPCG(41, 42))
	for _, sz := range [][2]int{{1, 3}, {3, 13}, {4, 8}, {5, 15}, {6, 6}, {9, 30}} {
		n, k := sz[0], sz[1]
		for _, scale := range []float64{1, 1e-200, 1e200} {
			A := make([]float64, n*k)
			for i := range A {
				A[i] = scale * rng.NormFloat64()
			}
			want := make([]float64, n*n)
			triangularizeLAPACK(want, slices.Clone(A), n, k)
			got := make([]float64, n*n)
			if err := Triangularize(got, slices.Clone(A), n, k, NewTriaWork(n, k)); err != nil {
				t.Fatalf("%d×%d scale %g: %v", n, k, scale, err)
			}
			for i := range got {
				if d := math.Abs(got[i] - want[i]); d > 1e-12*scale*float64(k) {
					t.Fatalf("%d×%d scale %g: L[%d] = %g, LAPACK dgelqf %g", n, k, scale, i, got[i], want[i])
				}
			}
		}
	}
}

func BenchmarkTriangularize(b *testing.B) {
	for _, sz := range [][2]int{{4, 8}, {6, 6}, {5, 15}, {3, 13}} {
		n, k := sz[0], sz[1]
		rng := rand.New(rand.NewPCG(43, 44))
		A := make([]float64, n*k)
		for i := range A {
			A[i] = rng.NormFloat64()
		}
		work := make([]float64, n*k)
		L := make([]float64, n*n)
		w := NewTriaWork(n, k)
		b.Run("householder/"+dims(n, k), func(b *testing.B) {
			for i := 0; i < b.N; i++ {
				copy(work, A)
				if err := Triangularize(L, work, n, k, w); err != nil {
					b.Fatal(err)
				}
			}
		})
		b.Run("lapack64/"+dims(n, k), func(b *testing.B) {
			for i := 0; i < b.N; i++ {
				copy(work, A)
				lapack64.Gelqf(blas64.General{Rows: n, Cols: k, Stride: k, Data: work}, w.tau, w.work, len(w.work))
			}
		})
	}
}

func dims(n, k int) string {
	return string(rune('0'+n)) + "x" + string(rune('0'+k/10)) + string(rune('0'+k%10))
}

func BenchmarkRankOne(b *testing.B) {
	rng := rand.New(rand.NewPCG(45, 46))
	n := 5
	L := make([]float64, n*n)
	for i := 0; i < n; i++ {
		for j := 0; j < i; j++ {
			L[i*n+j] = 0.3 * rng.NormFloat64()
		}
		L[i*n+i] = 1 + rng.Float64()
	}
	x := make([]float64, n)
	for i := range x {
		x[i] = 0.1 * rng.NormFloat64()
	}
	work := make([]float64, n*n)
	v := make([]float64, n)
	c := make([]float64, n)
	s := make([]float64, n)
	b.Run("update5", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			copy(work, L)
			copy(v, x)
			cholUpdate(work, n, v)
		}
	})
	b.Run("downdate5", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			copy(work, L)
			copy(v, x)
			if !cholDowndate(work, n, v, c, s) {
				b.Fatal("downdate failed")
			}
		}
	})
}

// TestTriangularizeUpdateMatchesLQ: the structured Givens update gives the
// same factor as the general Householder LQ of the same pre-array (the
// lower-triangular factor with positive diagonal of A·Aᵀ is unique).
func TestTriangularizeUpdateMatchesLQ(t *testing.T) {
	rng := rand.New(rand.NewPCG(47, 48))
	for _, mn := range [][2]int{{1, 1}, {1, 4}, {2, 4}, {3, 5}, {3, 6}, {2, 2}} {
		m, n := mn[0], mn[1]
		N := m + n
		A := make([]float64, N*N)
		for i := 0; i < m; i++ {
			for j := 0; j < i; j++ {
				A[i*N+j] = 0.3 * rng.NormFloat64()
			}
			A[i*N+i] = 0.1 + rng.Float64()
			for j := m; j < N; j++ {
				A[i*N+j] = rng.NormFloat64()
			}
		}
		for i := 0; i < n; i++ {
			for j := 0; j < i; j++ {
				A[(m+i)*N+m+j] = 0.5 * rng.NormFloat64()
			}
			A[(m+i)*N+m+i] = 0.2 + rng.Float64()
		}
		want := make([]float64, N*N)
		if err := Triangularize(want, slices.Clone(A), N, N, NewTriaWork(N, N)); err != nil {
			t.Fatal(err)
		}
		Sy, Kbar, Spost := make([]float64, m*m), make([]float64, n*m), make([]float64, n*n)
		if err := triangularizeUpdate(Sy, Kbar, Spost, slices.Clone(A), m, n, make([]float64, N)); err != nil {
			t.Fatal(err)
		}
		got := make([]float64, N*N)
		for i := 0; i < m; i++ {
			copy(got[i*N:i*N+m], Sy[i*m:i*m+m])
		}
		for i := 0; i < n; i++ {
			copy(got[(m+i)*N:(m+i)*N+m], Kbar[i*m:i*m+m])
			copy(got[(m+i)*N+m:(m+i)*N+N], Spost[i*n:i*n+n])
		}
		for i := range got {
			if math.Abs(got[i]-want[i]) > 1e-13 {
				t.Fatalf("m=%d n=%d: L[%d,%d] = %g, Householder %g", m, n, i/N, i%N, got[i], want[i])
			}
		}
	}
}

func BenchmarkUpdateArray(b *testing.B) {
	m, n := 2, 4
	N := m + n
	rng := rand.New(rand.NewPCG(49, 50))
	A := make([]float64, N*N)
	for i := 0; i < m; i++ {
		A[i*N+i] = 0.5
		for j := m; j < N; j++ {
			A[i*N+j] = rng.NormFloat64()
		}
	}
	for i := 0; i < n; i++ {
		for j := 0; j <= i; j++ {
			A[(m+i)*N+m+j] = 0.5 + rng.Float64()
		}
	}
	work := make([]float64, N*N)
	L := make([]float64, N*N)
	sgn := make([]float64, N)
	w := NewTriaWork(N, N)
	Sy, Kbar, Spost := make([]float64, m*m), make([]float64, n*m), make([]float64, n*n)
	b.Run("givens", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			copy(work, A)
			if err := triangularizeUpdate(Sy, Kbar, Spost, work, m, n, sgn); err != nil {
				b.Fatal(err)
			}
		}
	})
	b.Run("householder", func(b *testing.B) {
		for i := 0; i < b.N; i++ {
			copy(work, A)
			if err := Triangularize(L, work, N, N, w); err != nil {
				b.Fatal(err)
			}
		}
	})
}
