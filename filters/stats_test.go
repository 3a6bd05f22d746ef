package filters

import (
	"errors"
	"math"
	"math/rand/v2"
	"testing"

	"gonum.org/v1/gonum/mat"
)

// Chi-square critical values from the NIST/SEMATECH e-Handbook of
// Statistical Methods, §1.3.6.7.4 "Critical Values of the Chi-Square
// Distribution" (upper-tail table, quoted to three decimals).
func TestChiSquareQuantileNIST(t *testing.T) {
	cases := []struct {
		dof  int
		p    float64
		want float64
	}{
		{2, 0.95, 5.991},  // NIST/SEMATECH table, ν = 2, α = 0.05
		{2, 0.99, 9.210},  // ν = 2, α = 0.01
		{3, 0.99, 11.345}, // ν = 3, α = 0.01
		{4, 0.99, 13.277}, // ν = 4, α = 0.01
		{1, 0.95, 3.841},  // ν = 1, α = 0.05
		{3, 0.95, 7.815},  // ν = 3, α = 0.05 (from memory)
	}
	for _, c := range cases {
		got, err := ChiSquareQuantile(c.p, c.dof)
		if err != nil {
			t.Fatal(err)
		}
		if math.Abs(got-c.want) > 5e-4 { // table rounds to 1e-3
			t.Errorf("χ²_%d(%v) = %.4f, NIST table %.3f", c.dof, c.p, got, c.want)
		}
		g, _ := GateThreshold(c.p, c.dof)
		if g != got {
			t.Errorf("GateThreshold differs from the quantile")
		}
	}
}

// With 2 degrees of freedom the chi-square is exponential with mean 2, so
// its quantile is −2·ln(1−p) exactly (common practice).
func TestChiSquareTwoDofClosedForm(t *testing.T) {
	for _, p := range []float64{0.5, 0.9, 0.999, 0.9999} {
		got, _ := ChiSquareQuantile(p, 2)
		if want := -2 * math.Log(1-p); math.Abs(got-want) > 1e-9*want {
			t.Errorf("χ²_2(%v) = %v, want %v", p, got, want)
		}
	}
}

// BLK 2001 §5.4.2: for 50 runs of a 2-state filter the 95% two-sided
// interval of the average NEES is [1.5, 2.6] (worked example, from memory).
// Exactly, 100 degrees of freedom: χ²_100(0.025) = 74.222 and
// χ²_100(0.975) = 129.561 (NIST/SEMATECH lower/upper-tail tables, ν = 100).
func TestConsistencyInterval(t *testing.T) {
	lo, hi, err := ConsistencyInterval(0.95, 2, 50)
	if err != nil {
		t.Fatal(err)
	}
	if math.Abs(lo-74.222/50) > 1e-4 || math.Abs(hi-129.561/50) > 1e-4 {
		t.Errorf("interval [%v, %v], want [%v, %v]", lo, hi, 74.222/50, 129.561/50)
	}
	if math.Abs(lo-1.5) > 0.05 || math.Abs(hi-2.6) > 0.05 {
		t.Errorf("interval [%.2f, %.2f], BLK quotes [1.5, 2.6]", lo, hi)
	}
	// One run, one dof, 95%: [χ²_1(0.025), χ²_1(0.975)] = [0.000982, 5.024]
	// (NIST/SEMATECH tables, ν = 1).
	lo, hi, _ = ConsistencyInterval(0.95, 1, 1)
	if math.Abs(lo-0.000982) > 5e-6 || math.Abs(hi-5.024) > 5e-4 {
		t.Errorf("ν=1 interval [%v, %v]", lo, hi)
	}
}

// NormalisedSquare against gonum: vᵀ·P⁻¹·v with P = S·Sᵀ solved by
// mat.Dense.Solve (reference library).
func TestNormalisedSquareAgainstGonum(t *testing.T) {
	rng := rand.New(rand.NewPCG(1, 2))
	for trial := 0; trial < 50; trial++ {
		n := 1 + rng.IntN(6)
		S := make([]float64, n*n)
		for i := 0; i < n; i++ {
			for j := 0; j < i; j++ {
				S[i*n+j] = rng.NormFloat64()
			}
			S[i*n+i] = 0.5 + rng.Float64()
		}
		v := make([]float64, n)
		for i := range v {
			v[i] = rng.NormFloat64() * 3
		}
		got, err := NormalisedSquare(v, S)
		if err != nil {
			t.Fatal(err)
		}
		Sm := mat.NewDense(n, n, S)
		var P mat.Dense
		P.Mul(Sm, Sm.T())
		var y mat.VecDense
		if err := y.SolveVec(&P, mat.NewVecDense(n, v)); err != nil {
			t.Fatal(err)
		}
		want := mat.Dot(mat.NewVecDense(n, v), &y)
		if math.Abs(got-want) > 1e-9*math.Max(1, want) {
			t.Errorf("n=%d: %v, gonum %v", n, got, want)
		}
	}
}

// NEES wraps angles through the model's Residual.
func TestNEESWrapsAngles(t *testing.T) {
	est := NewGaussian(1)
	est.X[0] = math.Pi - 0.1
	est.S[0] = 0.1
	truth := []float64{-math.Pi + 0.1} // 0.2 rad away across the wrap
	got, err := NEES(statsAngleModel{}, truth, est)
	if err != nil || math.Abs(got-4) > 1e-9 {
		t.Errorf("NEES = %v, %v; want (0.2/0.1)² = 4", got, err)
	}
	plain, _ := NEES(nil, truth, est)
	if plain < 1000 {
		t.Errorf("plain NEES %v should see the 2π jump", plain)
	}
}

type statsAngleModel struct{}

func (statsAngleModel) Dim() int                              { return 1 }
func (statsAngleModel) Propagate(dst, x []float64, _ float64) { dst[0] = x[0] }
func (statsAngleModel) Jacobian(F, _ []float64, _ float64)    { F[0] = 1 }
func (statsAngleModel) NoiseFactor(G, _ []float64, _ float64) { G[0] = 0 }
func (statsAngleModel) Residual(dst, a, b []float64) {
	dst[0] = math.Remainder(a[0]-b[0], 2*math.Pi)
}
func (statsAngleModel) Normalize([]float64)       {}
func (statsAngleModel) PosVel(pv, _, _ []float64) { pv[0], pv[1], pv[2], pv[3] = 0, 0, 0, 0 }

func TestStatsBadInput(t *testing.T) {
	for _, c := range []struct {
		p   float64
		dof int
	}{{0, 2}, {1, 2}, {math.NaN(), 2}, {0.9, 0}, {-0.1, 1}} {
		if _, err := ChiSquareQuantile(c.p, c.dof); !errors.Is(err, ErrStats) {
			t.Errorf("ChiSquareQuantile(%v, %d) err = %v", c.p, c.dof, err)
		}
	}
	if _, _, err := ConsistencyInterval(0.95, 2, 0); err == nil {
		t.Error("0 runs accepted")
	}
	if _, _, err := ConsistencyInterval(1.5, 2, 10); err == nil {
		t.Error("probability 1.5 accepted")
	}
	bad := []struct {
		v, S []float64
	}{
		{[]float64{1, 2}, []float64{1, 0, 0, 0}},          // singular
		{[]float64{1, 2}, []float64{1, 0, 0}},             // wrong size
		{[]float64{math.NaN(), 0}, []float64{1, 0, 0, 1}}, // NaN
		{[]float64{1}, []float64{math.Inf(1)}},
		{nil, nil},
	}
	for _, b := range bad {
		if _, err := NormalisedSquare(b.v, b.S); err == nil {
			t.Errorf("NormalisedSquare(%v, %v) accepted", b.v, b.S)
		}
	}
	if _, err := NEES(nil, []float64{1, 2}, NewGaussian(3)); err == nil {
		t.Error("NEES dimension mismatch accepted")
	}
}

func TestNormalisedSquareZeroAllocs(t *testing.T) {
	v := []float64{1, 2, 3}
	S := []float64{1, 0, 0, 0.5, 2, 0, 0.1, 0.2, 3}
	if a := testing.AllocsPerRun(100, func() { _, _ = NormalisedSquare(v, S) }); a != 0 {
		t.Errorf("%v allocs", a)
	}
}
