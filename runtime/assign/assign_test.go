package assign

import (
	"math"
	"math/rand/v2"
	"testing"

	"pgregory.net/rapid"
)

// bruteForce tries every injective row→column map: the definition of the
// assignment problem itself, independent of the algorithm under test.
func bruteForce(cost []float64, n, m int) float64 {
	best := math.Inf(1)
	usedCol := make([]bool, m)
	var rec func(i int, acc float64)
	rec = func(i int, acc float64) {
		if i == n {
			if acc < best {
				best = acc
			}
			return
		}
		for j := 0; j < m; j++ {
			if usedCol[j] || math.IsInf(cost[i*m+j], 1) {
				continue
			}
			usedCol[j] = true
			rec(i+1, acc+cost[i*m+j])
			usedCol[j] = false
		}
	}
	rec(0, 0)
	return best
}

func TestSolveMatchesBruteForce(t *testing.T) {
	var s Solver
	rapid.Check(t, func(t *rapid.T) {
		n := rapid.IntRange(0, 6).Draw(t, "n")
		m := rapid.IntRange(n, 7).Draw(t, "m")
		forbid := rapid.Float64Range(0, 0.5).Draw(t, "forbid")
		seed := rapid.Uint64().Draw(t, "seed")
		r := rand.New(rand.NewPCG(seed, 1))
		cost := make([]float64, n*m)
		for i := range cost {
			if r.Float64() < forbid {
				cost[i] = math.Inf(1)
			} else {
				cost[i] = math.Round(r.Float64()*100) / 4 // many ties on purpose
			}
		}
		want := bruteForce(cost, n, m)
		rowCol := make([]int, n)
		got, err := s.Solve(cost, n, m, rowCol)
		if math.IsInf(want, 1) {
			if err != ErrInfeasible {
				t.Fatalf("brute force finds no finite assignment, solver returned %v, %v", got, err)
			}
			return
		}
		if err != nil {
			t.Fatalf("solver: %v (brute force optimum %v)", err, want)
		}
		if math.Abs(got-want) > 1e-9 {
			t.Fatalf("solver cost %v, brute force optimum %v", got, want)
		}
		seen := make(map[int]bool)
		for i, j := range rowCol {
			if j < 0 || j >= m || seen[j] {
				t.Fatalf("row %d given column %d twice or out of range: %v", i, j, rowCol)
			}
			seen[j] = true
		}
	})
}

// Worked example, checked by hand over all 3! = 6 permutations:
// [[4,1,3],[2,0,5],[3,2,2]] has the unique optimum 1+2+2 = 5 with rows →
// columns 1, 0, 2 (the others cost 6, 6, 7, 9, 11).
func TestSolveWorkedExample(t *testing.T) {
	var s Solver
	cost := []float64{4, 1, 3, 2, 0, 5, 3, 2, 2}
	rc := make([]int, 3)
	got, err := s.Solve(cost, 3, 3, rc)
	if err != nil || got != 5 || rc[0] != 1 || rc[1] != 0 || rc[2] != 2 {
		t.Fatalf("got %v %v %v, want 5 [1 0 2]", got, rc, err)
	}
}

func TestSolveBadInput(t *testing.T) {
	var s Solver
	rc := make([]int, 3)
	if _, err := s.Solve([]float64{1, 2}, 2, 1, rc); err != ErrShape {
		t.Fatalf("rows > cols: %v", err)
	}
	if _, err := s.Solve([]float64{1, 2, 3}, 2, 2, rc); err != ErrShape {
		t.Fatalf("short matrix: %v", err)
	}
	if _, err := s.Solve([]float64{1, math.NaN(), 3, 4}, 2, 2, rc); err != ErrCost {
		t.Fatalf("NaN: %v", err)
	}
	if _, err := s.Solve([]float64{math.Inf(1), math.Inf(1), 1, 2}, 2, 2, rc); err != ErrInfeasible {
		t.Fatalf("row with no allowed column: %v", err)
	}
}

func BenchmarkSolve20x40(b *testing.B) {
	r := rand.New(rand.NewPCG(1, 2))
	n, m := 20, 40
	cost := make([]float64, n*m)
	for i := range cost {
		cost[i] = r.Float64()
	}
	rc := make([]int, n)
	var s Solver
	b.ReportAllocs()
	for b.Loop() {
		if _, err := s.Solve(cost, n, m, rc); err != nil {
			b.Fatal(err)
		}
	}
}
