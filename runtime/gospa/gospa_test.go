package gospa

import (
	"math"
	"testing"
)

func near(a, b float64) bool { return math.Abs(a-b) <= 1e-12*math.Max(1, math.Abs(b)) }

// Hand-worked examples from the definition (Rahmathullah, García-Fernández
// & Svensson 2017, eq. 2 with α = 2), c = 10, p = 2.
func TestGOSPAHandWorked(t *testing.T) {
	g := Metric{C: 10, P: 2}
	cases := []struct {
		name        string
		truth, est  [][2]float64
		want        float64
		loc         float64
		missed, fls int
	}{
		// One missed target: (c^p/2)^(1/p) = √(100/2) = √50.
		{"one missed", [][2]float64{{3, 4}}, nil, math.Sqrt(50), 0, 1, 0},
		// One false estimate: the same penalty, √50.
		{"one false", nil, [][2]float64{{3, 4}}, math.Sqrt(50), 0, 0, 1},
		// One pair 5 m apart (a 3-4-5 triangle): d = 5.
		{"one pair", [][2]float64{{0, 0}}, [][2]float64{{3, 4}}, 5, 25, 0, 0},
		// A pair beyond c (12 m) counts as one missed plus one false: √(50+50) = 10.
		{"beyond c", [][2]float64{{0, 0}}, [][2]float64{{12, 0}}, 10, 0, 1, 1},
		// Two truths, one estimate 1 m from the first: √(1 + 50).
		{"pair plus miss", [][2]float64{{0, 0}, {100, 0}}, [][2]float64{{1, 0}}, math.Sqrt(51), 1, 1, 0},
		{"both empty", nil, nil, 0, 0, 0, 0},
	}
	for _, c := range cases {
		r, err := g.Eval(c.truth, c.est)
		if err != nil {
			t.Fatalf("%s: %v", c.name, err)
		}
		if !near(r.Distance, c.want) || !near(r.Localisation, c.loc) || r.Missed != c.missed || r.False != c.fls {
			t.Errorf("%s: got %+v, want distance %v loc %v missed %d false %d", c.name, r, c.want, c.loc, c.missed, c.fls)
		}
	}
}

// With equal cardinalities and all distances below c, GOSPA (α = 2) equals
// the plain optimal assignment distance (Rahmathullah et al. 2017, §III).
// Two truths at (0,0), (10,0); estimates at (9,0), (1,0): crossing the
// labels is optimal, giving √(1+1) = √2 rather than √(81+81).
func TestGOSPAPicksOptimalPairing(t *testing.T) {
	g := Metric{C: 20, P: 2}
	r, err := g.Eval([][2]float64{{0, 0}, {10, 0}}, [][2]float64{{9, 0}, {1, 0}})
	if err != nil || !near(r.Distance, math.Sqrt2) {
		t.Fatalf("got %+v %v, want √2", r, err)
	}
}

func TestGOSPABadParams(t *testing.T) {
	for _, g := range []Metric{{C: 0, P: 2}, {C: 10, P: 0.5}, {C: math.NaN(), P: 2}} {
		if _, err := g.Eval(nil, nil); err != ErrParams {
			t.Errorf("%+v: got %v, want ErrParams", g, err)
		}
	}
}
