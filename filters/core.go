package filters

import (
	"fmt"
	"math"
)

// core is the state and the bookkeeping shared by the square-root filters:
// mean x and lower-triangular S for one motion model.
type core struct {
	f MotionModel
	n int
	x []float64
	S []float64
}

func newCore(f MotionModel) (core, error) {
	if f == nil {
		return core{}, fmt.Errorf("%w: nil motion model", ErrBadParameter)
	}
	n := f.Dim()
	if n <= 0 {
		return core{}, fmt.Errorf("%w: motion model dimension %d", ErrBadParameter, n)
	}
	return core{f: f, n: n, x: make([]float64, n), S: make([]float64, n*n)}, nil
}

// Init sets the state after checking x0 (finite, length n) and S0 (n×n,
// lower triangular, positive diagonal). x0's angles are wrapped.
func (c *core) Init(x0, S0 []float64) error {
	if len(x0) != c.n {
		return fmt.Errorf("%w: x0 has %d entries, model needs %d", ErrDimension, len(x0), c.n)
	}
	if !finite(x0) {
		return fmt.Errorf("%w: x0", ErrNonFinite)
	}
	if err := CheckSqrt(S0, c.n); err != nil {
		return fmt.Errorf("S0: %w", err)
	}
	copy(c.x, x0)
	c.f.Normalize(c.x)
	copy(c.S, S0)
	return nil
}

// State is a view of the current estimate, valid until the next call.
func (c *core) State() Gaussian { return Gaussian{X: c.x, S: c.S} }

// Model is the motion model the filter was built for.
func (c *core) Model() MotionModel { return c.f }

func checkDt(dt float64) error {
	if math.IsNaN(dt) || math.IsInf(dt, 0) {
		return fmt.Errorf("%w: dt=%g", ErrNonFinite, dt)
	}
	if dt < 0 {
		return fmt.Errorf("%w: dt=%g is negative", ErrBadParameter, dt)
	}
	return nil
}

// checkMeas validates a Prepare call and returns m.
func checkMeas(h MeasurementModel, Rs []float64) (int, error) {
	if h == nil {
		return 0, fmt.Errorf("%w: nil measurement model", ErrBadParameter)
	}
	m := h.Dim()
	if m <= 0 {
		return 0, fmt.Errorf("%w: measurement dimension %d", ErrBadParameter, m)
	}
	if len(Rs) != m*m {
		return 0, fmt.Errorf("%w: Rs has %d entries, measurement needs %d×%d", ErrDimension, len(Rs), m, m)
	}
	if err := CheckSqrt(Rs, m); err != nil {
		return 0, fmt.Errorf("Rs: %w", err)
	}
	return m, nil
}

// innovation holds what Prepare computes for one measurement model: the
// predicted measurement, the innovation square root Sy (P_zz = Sy·Syᵀ) and
// the normalised gain K̄ = P_xz·Sy⁻ᵀ (n×m), so that the update is
// x⁺ = x + K̄·Sy⁻¹·(z ⊖ ẑ) and P⁺ = P − K̄·K̄ᵀ.
type innovation struct {
	h          MeasurementModel
	m, measCap int
	prepared   bool
	zhat       []float64 // m
	Sy         []float64 // m×m
	Kbar       []float64 // n×m
	e, a       []float64 // m: residual, whitened residual
	xnew       []float64 // n
}

func (v *innovation) grow(n, m int) bool {
	if m <= v.measCap {
		return false
	}
	v.measCap = m
	v.zhat = make([]float64, m)
	v.Sy = make([]float64, m*m)
	v.Kbar = make([]float64, n*m)
	v.e = make([]float64, m)
	v.a = make([]float64, m)
	if v.xnew == nil {
		v.xnew = make([]float64, n)
	}
	return true
}

// whiten computes a = Sy⁻¹(z ⊖ ẑ) and returns ‖a‖² (the NIS), or +Inf
// when z is unusable.
func (v *innovation) whiten(z []float64) float64 {
	if !v.prepared || len(z) != v.m || !finite(z) {
		return math.Inf(1)
	}
	m := v.m
	e, a := v.e[:m], v.a[:m]
	v.h.Residual(e, z, v.zhat[:m])
	if !finite(e) {
		return math.Inf(1)
	}
	// Forward substitution Sy·a = e by hand: m ≤ 6 and blas64.Trsv's
	// dispatch costs more than the arithmetic here.
	var nis float64
	Sy := v.Sy[:m*m]
	for j := 0; j < m; j++ {
		s := e[j]
		row := Sy[j*m : j*m+j]
		for i, l := range row {
			s -= l * a[i]
		}
		a[j] = s / Sy[j*m+j]
		nis += a[j] * a[j]
	}
	if math.IsNaN(nis) || math.IsInf(nis, 0) {
		return math.Inf(1)
	}
	return nis
}

// correctMean writes x + K̄·a into xnew (normalised) after whiten, and
// reports whether it is finite.
func (v *innovation) correctMean(f MotionModel, x []float64) bool {
	n, m := len(x), v.m
	xn := v.xnew[:n]
	for i := 0; i < n; i++ {
		s := x[i]
		row := v.Kbar[i*m : i*m+m]
		for j, aj := range v.a[:m] {
			s += row[j] * aj
		}
		xn[i] = s
	}
	f.Normalize(xn)
	return finite(xn)
}

func (v *innovation) copyFrom(o *innovation, n int) {
	v.prepared = o.prepared
	v.h = o.h
	if !o.prepared {
		return
	}
	// The caller has grown v to at least o.m.
	v.m = o.m
	m := o.m
	copy(v.zhat[:m], o.zhat[:m])
	copy(v.Sy[:m*m], o.Sy[:m*m])
	copy(v.Kbar[:n*m], o.Kbar[:n*m])
}

// Predicted returns views of the prepared predicted measurement ẑ and the
// innovation square root Sy (m×m lower, P_zz = Sy·Syᵀ), nil before Prepare.
func (v *innovation) Predicted() (zhat, Sy []float64) {
	if !v.prepared {
		return nil, nil
	}
	return v.zhat[:v.m], v.Sy[:v.m*v.m]
}

// LogDetInnovation is ln det P_zz of the prepared prediction (for
// likelihood-based assignment costs: cost = NIS + ln det P_zz), NaN before
// Prepare.
func (v *innovation) LogDetInnovation() float64 {
	if !v.prepared {
		return math.NaN()
	}
	var s float64
	for i := 0; i < v.m; i++ {
		s += math.Log(v.Sy[i*v.m+i])
	}
	return 2 * s
}

// update is the Update step both square-root filters share: x ← x + K̄·Sy⁻¹·(z ⊖ ẑ)
// and S ← Spost, both prepared by Prepare. On error the state is unchanged.
func (c *core) update(v *innovation, Spost, z []float64) (float64, error) {
	if !v.prepared {
		return 0, ErrNotPrepared
	}
	if len(z) != v.m {
		return 0, fmt.Errorf("%w: z has %d entries, measurement needs %d", ErrDimension, len(z), v.m)
	}
	nis := v.whiten(z)
	if math.IsInf(nis, 1) {
		return nis, fmt.Errorf("%w: z or its innovation", ErrNonFinite)
	}
	if !v.correctMean(c.f, c.x) {
		return nis, fmt.Errorf("%w: corrected mean", ErrNonFinite)
	}
	copy(c.x, v.xnew)
	copy(c.S, Spost)
	v.prepared = false
	return nis, nil
}
