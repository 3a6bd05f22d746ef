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
