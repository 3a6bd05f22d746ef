// Package gospa computes the generalised optimal sub-pattern assignment
// metric between a set of true object positions and a set of estimates
// (Rahmathullah, García-Fernández & Svensson 2017), with α = 2, so that the
// metric splits into localisation error, missed objects and false objects.
package gospa

import (
	"errors"
	"math"

	"github.com/godwit-fusion/godwit/runtime/assign"
)

// Result is one GOSPA evaluation and its decomposition (α = 2):
// Distance^p = Localisation + (c^p/2)·(Missed + False).
type Result struct {
	Distance     float64
	Localisation float64 // Σ d(x, y)^p over assigned pairs (each d < c)
	Missed       int     // true objects with no estimate within c
	False        int     // estimates with no true object within c
}

// Metric evaluates GOSPA with cut-off C and order P ≥ 1. Its workspace is
// reused, so repeated evaluations allocate nothing once warmed up.
type Metric struct {
	C, P   float64
	solver assign.Solver
	cost   []float64
	rowCol []int
}

// ErrParams means C ≤ 0 or P < 1.
var ErrParams = errors.New("gospa: need c > 0 and p ≥ 1")

// Eval compares truth and est, two lists of planar positions. With α = 2
// the optimum over assignments γ of
//
//	Σ_{(i,j)∈γ} d(x_i, y_j)^p + (c^p/2)·(|X| + |Y| − 2|γ|)
//
// equals a full assignment of the smaller set under the cost min(d, c)^p,
// plus c^p/2 for each element of the larger set left over: a pair at
// distance ≥ c costs c^p either way, assigned or left as one missed plus
// one false (follows directly from the definition).
func (g *Metric) Eval(truth, est [][2]float64) (Result, error) {
	if !(g.C > 0) || !(g.P >= 1) {
		return Result{}, ErrParams
	}
	cp := math.Pow(g.C, g.P)
	rowsAreTruth := len(truth) <= len(est)
	a, b := truth, est
	if !rowsAreTruth {
		a, b = est, truth
	}
	n, m := len(a), len(b)
	if cap(g.cost) < n*m {
		g.cost = make([]float64, n*m)
	}
	g.cost = g.cost[:n*m]
	if cap(g.rowCol) < n {
		g.rowCol = make([]int, n)
	}
	g.rowCol = g.rowCol[:n]
	for i := 0; i < n; i++ {
		for j := 0; j < m; j++ {
			d := math.Hypot(a[i][0]-b[j][0], a[i][1]-b[j][1])
			g.cost[i*m+j] = math.Pow(math.Min(d, g.C), g.P)
		}
	}
	if _, err := g.solver.Solve(g.cost, n, m, g.rowCol); err != nil {
		return Result{}, err
	}
	var r Result
	unassignedA := 0
	for i := 0; i < n; i++ {
		c := g.cost[i*m+g.rowCol[i]]
		if c >= cp {
			unassignedA++ // at or beyond the cut-off: counts as missed + false
			continue
		}
		r.Localisation += c
	}
	unassignedB := m - (n - unassignedA)
	if rowsAreTruth {
		r.Missed, r.False = unassignedA, unassignedB
	} else {
		r.Missed, r.False = unassignedB, unassignedA
	}
	r.Distance = math.Pow(r.Localisation+cp/2*float64(r.Missed+r.False), 1/g.P)
	return r, nil
}
