package filters

import (
	"errors"
	"fmt"
	"math"

	"gonum.org/v1/gonum/stat/distuv"
)

// Consistency statistics: chi-square quantiles for gates, the normalised
// squares NIS and NEES, and the acceptance interval for their averages over
// Monte Carlo runs (Bar-Shalom, Li & Kirubarajan 2001, §5.4).

// ErrStats reports an invalid argument to a statistics helper.
var ErrStats = errors.New("filters: invalid statistics argument")

// maxStatsDim bounds NormalisedSquare's stack workspace.
const maxStatsDim = 32

// ChiSquareQuantile returns the value below which a chi-square variable
// with dof degrees of freedom falls with probability p (gonum distuv).
func ChiSquareQuantile(p float64, dof int) (float64, error) {
	if !(p > 0 && p < 1) {
		return 0, fmt.Errorf("%w: probability %v, want 0 < p < 1", ErrStats, p)
	}
	if dof < 1 {
		return 0, fmt.Errorf("%w: %d degrees of freedom, want ≥ 1", ErrStats, dof)
	}
	return distuv.ChiSquared{K: float64(dof)}.Quantile(p), nil
}

// GateThreshold is the NIS gate for a measurement of dimension m that a
// correct association passes with probability prob (a configuration's
// tracker.gate_prob): NIS ≤ χ²_m(prob), the chi-square validation gate
// (common practice).
func GateThreshold(prob float64, m int) (float64, error) {
	return ChiSquareQuantile(prob, m)
}

// NormalisedSquare returns vᵀ·(S·Sᵀ)⁻¹·v = |S⁻¹·v|² for a lower-triangular
// square root S (n×n, n = len(v) ≤ 32), by forward substitution. With v an
// innovation and S the innovation covariance's square root this is the NIS;
// with v an estimation error and S the state's square root, the NEES.
func NormalisedSquare(v, S []float64) (float64, error) {
	n := len(v)
	if n == 0 || n > maxStatsDim || len(S) != n*n {
		return 0, fmt.Errorf("%w: vector of %d and square root of %d elements", ErrStats, n, len(S))
	}
	var y [maxStatsDim]float64
	var q float64
	for i := 0; i < n; i++ {
		d := S[i*n+i]
		if d == 0 || math.IsNaN(d) || math.IsInf(d, 0) {
			return 0, fmt.Errorf("%w: square root diagonal %d is %v", ErrStats, i, d)
		}
		s := v[i]
		for j := 0; j < i; j++ {
			s -= S[i*n+j] * y[j]
		}
		y[i] = s / d
		q += y[i] * y[i]
	}
	if math.IsNaN(q) || math.IsInf(q, 0) {
		return 0, fmt.Errorf("%w: normalised square is %v (non-finite input)", ErrStats, q)
	}
	return q, nil
}

// NEES returns the normalised estimation error squared of est against the
// true state, with the difference taken by the model's Residual so that
// angles wrap (BLK 2001 §5.4.2). m may be nil for a plain difference.
func NEES(m MotionModel, truth []float64, est Gaussian) (float64, error) {
	n := est.Dim()
	if len(truth) != n || n > maxStatsDim {
		return 0, fmt.Errorf("%w: truth has %d values, estimate %d", ErrStats, len(truth), n)
	}
	var e [maxStatsDim]float64
	if m != nil {
		m.Residual(e[:n], truth, est.X)
	} else {
		for i := range truth {
			e[i] = truth[i] - est.X[i]
		}
	}
	return NormalisedSquare(e[:n], est.S)
}

// ConsistencyInterval returns the two-sided acceptance interval [lo, hi]
// with probability prob for the average of runs independent normalised
// squares (NEES or NIS) of dof degrees of freedom each. runs·average is
// chi-square with runs·dof degrees of freedom under the hypothesis that the
// filter is consistent (BLK 2001 §5.4.2), so
// lo = χ²_{runs·dof}((1−prob)/2)/runs and hi = χ²_{runs·dof}((1+prob)/2)/runs.
func ConsistencyInterval(prob float64, dof, runs int) (lo, hi float64, err error) {
	if runs < 1 {
		return 0, 0, fmt.Errorf("%w: %d runs, want ≥ 1", ErrStats, runs)
	}
	if dof < 1 || dof > math.MaxInt32/runs {
		return 0, 0, fmt.Errorf("%w: %d degrees of freedom × %d runs", ErrStats, dof, runs)
	}
	if !(prob > 0 && prob < 1) {
		return 0, 0, fmt.Errorf("%w: probability %v, want 0 < p < 1", ErrStats, prob)
	}
	k := dof * runs
	a, _ := ChiSquareQuantile((1-prob)/2, k)
	b, _ := ChiSquareQuantile((1+prob)/2, k)
	return a / float64(runs), b / float64(runs), nil
}
