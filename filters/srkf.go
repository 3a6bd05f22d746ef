package filters

import (
	"fmt"
)

// SREKF is the square-root extended Kalman filter in QR "array" form
// (Kailath, Sayed & Hassibi 2000, ch. 12). With a linear motion model and a
// linear measurement model it is exactly the square-root linear Kalman
// filter. It keeps x and lower-triangular S (P = S·Sᵀ), never P.
//
// Predict triangularises the pre-array [F·S | G] (Q = G·Gᵀ) into S⁻.
// Prepare triangularises (with Givens rotations that keep the structure,
// see triangularizeUpdate) the combined update pre-array
//
//	[ Rs  H·S ]        [ Sy  0  ]
//	[ 0    S  ]  ·Θ  = [ K̄   S⁺ ]
//
// which yields at once the innovation square root Sy, the normalised gain
// K̄ = P·Hᵀ·Sy⁻ᵀ and the posterior square root S⁺; Update then only adds
// K̄·Sy⁻¹·(z ⊖ h(x)) to x and takes S⁺. No factorisation happens in Update,
// so gating many detections against one Prepare is cheap.
type SREKF struct {
	core
	innovation

	// Predict workspace.
	xp, F, G, pre, Sp []float64
	triP              *TriaWork

	// Update workspace, sized for measCap.
	H, preU, Spost []float64
	sgn            []float64
}

// NewSREKF returns a square-root EKF for the motion model f. Call Init
// before use.
func NewSREKF(f MotionModel) (*SREKF, error) {
	c, err := newCore(f)
	if err != nil {
		return nil, err
	}
	n := c.n
	k := &SREKF{
		core: c,
		xp:   make([]float64, n),
		F:    make([]float64, n*n),
		G:    make([]float64, n*n),
		pre:  make([]float64, n*2*n),
		Sp:   make([]float64, n*n),
		triP: NewTriaWork(n, 2*n),
	}
	k.growMeas(3)
	return k, nil
}

// NewSRKF returns the square-root linear Kalman filter: the same array-form
// filter as NewSREKF, for models whose f and h are linear (the Jacobians
// are then the exact F and H).
func NewSRKF(f MotionModel) (*SREKF, error) { return NewSREKF(f) }

func (k *SREKF) growMeas(m int) {
	n := k.n
	if !k.innovation.grow(n, m) {
		return
	}
	N := m + n
	k.H = make([]float64, m*n)
	k.preU = make([]float64, N*N)
	k.Spost = make([]float64, n*n)
	k.sgn = make([]float64, N)
}

// Predict moves the state forward by dt ≥ 0 seconds.
func (k *SREKF) Predict(dt float64) error {
	if err := checkDt(dt); err != nil {
		return err
	}
	n := k.n
	k.f.Propagate(k.xp, k.x, dt)
	k.f.Jacobian(k.F, k.x, dt)
	k.f.NoiseFactor(k.G, k.x, dt)
	// Non-finite F or G reach the pre-array and are caught by Triangularize.
	if !finite(k.xp) {
		return fmt.Errorf("%w: motion model output at dt=%g", ErrNonFinite, dt)
	}
	w := 2 * n
	mulLower(k.pre, w, k.F, n, n, k.S)
	for i := 0; i < n; i++ {
		copy(k.pre[i*w+n:i*w+w], k.G[i*n:i*n+n])
	}
	if err := Triangularize(k.Sp, k.pre, n, w, k.triP); err != nil {
		return fmt.Errorf("predict: %w", err)
	}
	k.f.Normalize(k.xp)
	// Copied, not swapped: views from State keep seeing the current state.
	copy(k.x, k.xp)
	copy(k.S, k.Sp)
	k.prepared = false
	return nil
}

// Prepare linearises h about the current state and computes ẑ = h(x), Sy,
// K̄ and S⁺ for the NIS and Update calls that follow. Rs is the m×m lower
// triangular square root of R.
func (k *SREKF) Prepare(h MeasurementModel, Rs []float64) error {
	k.prepared = false
	m, err := checkMeas(h, Rs)
	if err != nil {
		return err
	}
	k.growMeas(m)
	n := k.n
	N := m + n
	zhat, H := k.zhat[:m], k.H[:m*n]
	h.Predict(zhat, k.x)
	h.Jacobian(H, k.x)
	// A non-finite H reaches the pre-array and is caught there.
	if !finite(zhat) {
		return fmt.Errorf("%w: measurement model output", ErrNonFinite)
	}
	pre := k.preU[:N*N]
	for i := range pre {
		pre[i] = 0
	}
	for i := 0; i < m; i++ {
		copy(pre[i*N:i*N+m], Rs[i*m:i*m+m])
	}
	// H·S into the top-right block.
	mulLower(pre[m:], N, H, m, n, k.S)
	for i := 0; i < n; i++ {
		copy(pre[(m+i)*N+m:(m+i)*N+N], k.S[i*n:i*n+n])
	}
	if err := triangularizeUpdate(k.Sy[:m*m], k.Kbar[:n*m], k.Spost, pre, m, n, k.sgn[:N]); err != nil {
		return fmt.Errorf("update: %w", err)
	}
	k.h, k.m, k.prepared = h, m, true
	return nil
}

// NIS returns (z ⊖ ẑ)ᵀ·P_zz⁻¹·(z ⊖ ẑ) against the prepared prediction, +Inf
// when z is unusable or nothing is prepared.
func (k *SREKF) NIS(z []float64) float64 { return k.whiten(z) }

// Update corrects the state with z and returns its NIS. On error the state
// is unchanged.
func (k *SREKF) Update(z []float64) (float64, error) {
	return k.core.update(&k.innovation, k.Spost, z)
}

// CopyFrom makes k an exact copy of src (a *SREKF of the same dimension).
func (k *SREKF) CopyFrom(src Filter) error {
	o, ok := src.(*SREKF)
	if !ok {
		return fmt.Errorf("%w: CopyFrom %T into *SREKF", ErrBadParameter, src)
	}
	if o.n != k.n {
		return fmt.Errorf("%w: CopyFrom dimension %d into %d", ErrDimension, o.n, k.n)
	}
	if o == k {
		return nil
	}
	k.f = o.f
	copy(k.x, o.x)
	copy(k.S, o.S)
	if o.prepared {
		k.growMeas(o.m)
		copy(k.Spost, o.Spost)
	}
	k.innovation.copyFrom(&o.innovation, k.n)
	return nil
}

var _ Filter = (*SREKF)(nil)
