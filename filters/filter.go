// Package filters is godwit's estimation core: Gaussian states kept in
// square-root form, the filters that move them (square-root Kalman / EKF,
// square-root UKF; the particle filter lives in filters/particle) and the
// consistency statistics used to gate and to judge them.
//
// The package does no I/O, starts no goroutines, reads no clock and logs
// nothing. Every filter owns a workspace sized once for its model, so that
// Predict and Update allocate nothing in steady state.
//
// Conventions: matrices are dense row-major []float64; an n×n matrix A has
// A[i*n+j] at row i, column j. A square-root covariance S is lower triangular
// with a positive diagonal and P = S·Sᵀ.
package filters

// Gaussian is a state estimate: mean X (length n) and lower-triangular
// square-root covariance S (n×n, row-major) with P = S·Sᵀ.
type Gaussian struct {
	X []float64
	S []float64
}

// NewGaussian returns a zero mean, zero square-root covariance of dimension n.
func NewGaussian(n int) Gaussian {
	return Gaussian{X: make([]float64, n), S: make([]float64, n*n)}
}

// Dim is the state dimension n.
func (g Gaussian) Dim() int { return len(g.X) }

// CopyFrom copies o into g. g must already have o's dimension; nothing is allocated.
func (g Gaussian) CopyFrom(o Gaussian) {
	copy(g.X, o.X)
	copy(g.S, o.S)
}

// Covariance writes P = S·Sᵀ into dst (n×n). It is meant for output and tests;
// filters never keep P between steps.
func (g Gaussian) Covariance(dst []float64) {
	n := g.Dim()
	for i := 0; i < n; i++ {
		for j := 0; j <= i; j++ {
			var s float64
			// S is lower triangular: row i has entries 0..i.
			for k := 0; k <= j; k++ {
				s += g.S[i*n+k] * g.S[j*n+k]
			}
			dst[i*n+j] = s
			dst[j*n+i] = s
		}
	}
}

// MotionModel is x_{k+1} = f(x_k, dt) + w, w ~ N(0, Q(dt)).
type MotionModel interface {
	// Dim is the state dimension n.
	Dim() int
	// Propagate writes f(x, dt) into dst. dst and x never alias.
	Propagate(dst, x []float64, dt float64)
	// Jacobian writes F = ∂f/∂x at (x, dt) into F (n×n).
	Jacobian(F, x []float64, dt float64)
	// NoiseFactor writes a square factor G (n×n) with Q(dt) = G·Gᵀ. G need not
	// be triangular; Q may be singular (G then has zero columns).
	NoiseFactor(G, x []float64, dt float64)
	// Residual writes the state difference a ⊖ b into dst, wrapping angle
	// components to (−π, π]. dst may alias a.
	Residual(dst, a, b []float64)
	// Normalize wraps the angle components of x to (−π, π] in place.
	Normalize(x []float64)
	// PosVel writes [px, py, vx, vy] of x into pv (length 4) and, when J is
	// not nil, the Jacobian ∂pv/∂x into J (4×n).
	PosVel(pv, x, J []float64)
}

// MeasurementModel is z = h(x) + v, v ~ N(0, R).
type MeasurementModel interface {
	// Dim is the measurement dimension m.
	Dim() int
	// Predict writes h(x) into z (length m).
	Predict(z, x []float64)
	// Jacobian writes H = ∂h/∂x at x into H (m×n).
	Jacobian(H, x []float64)
	// Residual writes a ⊖ b into dst, wrapping angle components to (−π, π].
	// dst may alias a.
	Residual(dst, a, b []float64)
}

// Filter is what the engine drives for one track or for the ego state.
// Implementations keep S, never P, between steps, and leave the state
// untouched when a call returns an error.
type Filter interface {
	// Init sets the state. x0 has length n, S0 is n×n lower triangular.
	Init(x0, S0 []float64) error
	// State is a view of the current estimate, valid until the next call.
	State() Gaussian
	// Predict moves the state forward by dt seconds (dt ≥ 0).
	Predict(dt float64) error
	// Prepare computes the predicted measurement and the square root of the
	// innovation covariance for model h with noise square root Rs (m×m lower
	// triangular), for gating and for the next Update.
	Prepare(h MeasurementModel, Rs []float64) error
	// NIS returns the normalised innovation squared of z against the
	// prepared prediction (+Inf when z is unusable).
	NIS(z []float64) float64
	// Update corrects the state with z using the prepared prediction and
	// returns the NIS of z.
	Update(z []float64) (nis float64, err error)
	// CopyFrom makes this filter an exact copy of src, which must be of the
	// same concrete type and dimensions (snapshots for out-of-sequence rewind).
	CopyFrom(src Filter) error
}
