// Package assign solves the linear assignment problem: give each row of a
// cost matrix its own column so that the summed cost is least.
//
// The method is the shortest augmenting path algorithm with dual potentials
// (Jonker & Volgenant 1987): rows are added one at a time, each by a
// Dijkstra-like search over reduced costs, which gives O(n²·m) time for n
// rows and m ≥ n columns. The tracker calls it once per gated cluster, so n
// stays small and the total cost grows near-linearly with the scene.
package assign

import (
	"errors"
	"math"
)

// ErrInfeasible means no assignment of every row to a finite-cost column exists.
var ErrInfeasible = errors.New("assign: no assignment with finite cost exists")

// ErrShape means the cost matrix and the sizes disagree, or rows outnumber columns.
var ErrShape = errors.New("assign: need 0 ≤ rows ≤ cols and len(cost) = rows·cols, len(rowCol) ≥ rows")

// ErrCost means a cost is NaN or −Inf (+Inf marks a forbidden pair and is allowed).
var ErrCost = errors.New("assign: cost is NaN or -Inf")

// Solver owns the workspace of the algorithm. Its slices only grow, so a
// Solver reused across problems allocates nothing once it has seen the
// largest size. A Solver is not safe for concurrent use.
type Solver struct {
	u, v, minv []float64
	p, way     []int
	used       []bool
}

func growF(s []float64, n int) []float64 {
	if cap(s) < n {
		return make([]float64, n)
	}
	return s[:n]
}

func growI(s []int, n int) []int {
	if cap(s) < n {
		return make([]int, n)
	}
	return s[:n]
}

// Solve finds the column rowCol[i] for every row i of the rows×cols matrix
// cost (row-major, rows ≤ cols) that minimises Σ cost[i·cols+rowCol[i]], and
// returns that sum. +Inf marks a forbidden pair. Ties are broken by the
// lowest index, so the answer is deterministic.
func (s *Solver) Solve(cost []float64, rows, cols int, rowCol []int) (float64, error) {
	if rows < 0 || cols < rows || len(cost) != rows*cols || len(rowCol) < rows {
		return 0, ErrShape
	}
	for _, c := range cost {
		if math.IsNaN(c) || math.IsInf(c, -1) {
			return 0, ErrCost
		}
	}
	if rows == 0 {
		return 0, nil
	}
	n, m := rows, cols
	// 1-based arrays as in the usual statement of the method: index 0 is
	// the virtual column from which each augmenting path starts.
	s.u = growF(s.u, n+1)
	s.v = growF(s.v, m+1)
	s.minv = growF(s.minv, m+1)
	s.p = growI(s.p, m+1)
	s.way = growI(s.way, m+1)
	if cap(s.used) < m+1 {
		s.used = make([]bool, m+1)
	}
	s.used = s.used[:m+1]
	u, v, minv, p, way, used := s.u, s.v, s.minv, s.p, s.way, s.used
	for i := range u {
		u[i] = 0
	}
	for j := range v {
		v[j] = 0
		p[j] = 0
		way[j] = 0
	}
	inf := math.Inf(1)
	for i := 1; i <= n; i++ {
		p[0] = i
		j0 := 0
		for j := 0; j <= m; j++ {
			minv[j] = inf
			used[j] = false
		}
		for {
			used[j0] = true
			i0 := p[j0]
			delta := inf
			j1 := 0
			row := cost[(i0-1)*m:]
			for j := 1; j <= m; j++ {
				if used[j] {
					continue
				}
				cur := row[j-1] - u[i0] - v[j]
				if cur < minv[j] {
					minv[j] = cur
					way[j] = j0
				}
				if minv[j] < delta {
					delta = minv[j]
					j1 = j
				}
			}
			if math.IsInf(delta, 1) || j1 == 0 {
				return 0, ErrInfeasible
			}
			for j := 0; j <= m; j++ {
				if used[j] {
					u[p[j]] += delta
					v[j] -= delta
				} else {
					minv[j] -= delta
				}
			}
			j0 = j1
			if p[j0] == 0 {
				break
			}
		}
		// Flip the augmenting path back to its start.
		for j0 != 0 {
			j1 := way[j0]
			p[j0] = p[j1]
			j0 = j1
		}
	}
	var total float64
	for j := 1; j <= m; j++ {
		if p[j] != 0 {
			rowCol[p[j]-1] = j - 1
		}
	}
	for i := 0; i < n; i++ {
		total += cost[i*m+rowCol[i]]
	}
	return total, nil
}
