package filters

import (
	"fmt"
	"math"
)

// UTParams are the scaled unscented transform's parameters (Wan & van der
// Merwe 2000): Alpha spreads the sigma points, Beta folds in prior knowledge
// of the distribution (2 is optimal for a Gaussian), Kappa is the secondary
// scaling. λ = α²(n+κ) − n must keep n+λ > 0.
type UTParams struct {
	Alpha, Beta, Kappa float64
}

// DefaultUTParams are α = 1, β = 2, κ = 0: sigma points at ±√n standard
// deviations, zeroth weights W_m0 = 0, W_c0 = 2. The often quoted α = 10⁻³
// makes W_c0 ≈ −10⁶, and the zeroth-point downdate then cancels about six
// digits; with tracking state dimensions (n ≤ 6) α = 1 keeps the points at a
// sensible spread and every weight of moderate size.
func DefaultUTParams() UTParams { return UTParams{Alpha: 1, Beta: 2, Kappa: 0} }

// utWeights are the scaled sigma-point weights (Wan & van der Merwe 2000,
// eq. 15): W_m0 = λ/(n+λ), W_c0 = W_m0 + 1 − α² + β, W_i = 1/(2(n+λ)).
type utWeights struct {
	gamma, wm0, wc0, wi float64
}

func newUTWeights(n int, p UTParams) (utWeights, error) {
	if !(p.Alpha > 0) || math.IsInf(p.Alpha, 0) || math.IsNaN(p.Beta) || math.IsInf(p.Beta, 0) ||
		math.IsNaN(p.Kappa) || math.IsInf(p.Kappa, 0) {
		return utWeights{}, fmt.Errorf("%w: unscented parameters %+v", ErrBadParameter, p)
	}
	lambda := p.Alpha*p.Alpha*(float64(n)+p.Kappa) - float64(n)
	nl := float64(n) + lambda
	if !(nl > 0) {
		return utWeights{}, fmt.Errorf("%w: unscented parameters %+v give n+λ=%g, want > 0", ErrBadParameter, p, nl)
	}
	wm0 := lambda / nl
	return utWeights{
		gamma: math.Sqrt(nl),
		wm0:   wm0,
		wc0:   wm0 + 1 - p.Alpha*p.Alpha + p.Beta,
		wi:    1 / (2 * nl),
	}, nil
}

// SRUKF is the square-root unscented Kalman filter of van der Merwe & Wan
// 2001 (Algorithm 3.1, additive noise) with the scaled sigma points of Wan &
// van der Merwe 2000. It keeps x and lower-triangular S, never P.
//
// Predict forms S as the LQ triangularisation of [√W_i·(Y_i − ȳ), i=1..2n |
// noise square root] with the zeroth point's rank-one term: for W_c0 > 0 the
// column √W_c0·(Y_0 − ȳ) joins the QR (the same factor as QR then rank-one
// update), for W_c0 < 0 a Cholesky downdate with √|W_c0|·(Y_0 − ȳ) follows
// the QR; a downdate that would lose positive definiteness is an error and
// the state is left unchanged. Means and deviations are angle-safe: residuals are taken
// relative to the zeroth sigma point with the model's Residual and the mean
// is wrapped with Normalize.
//
// Prepare computes the same P_zz and P_xz as the paper, but arranges the
// measurement update as an orthogonal array (see the comment in Prepare):
// the innovation square root Sy, the normalised gain K̄ = P_xz·Sy⁻ᵀ and the
// posterior S⁺ come out of one triangularisation, so Update is
// x⁺ = x + K̄·Sy⁻¹·(z ⊖ ẑ), S = S⁺ with no downdates by the gain columns.
// The zeroth-point term (column for W_c0 > 0, downdate for W_c0 < 0) is
// applied to the square root of the effective measurement noise there.
type SRUKF struct {
	core
	innovation
	w utWeights

	// Predict workspace.
	X, Y    []float64 // (2n+1)×n sigma points, one per row
	d, v    []float64 // n
	xp, G   []float64
	pre, Sp []float64 // n×(2n + non-zero noise columns [+1]) pre-array, n×n
	gcol    []bool    // which columns of G are non-zero
	triP    *TriaWork
	c, s    []float64 // downdate rotations, n

	// Update workspace, sized for measCap.
	Z, Dz, preU  []float64
	Rt, arr, sgn []float64 // R̃ square root, update array, signs
	Spost        []float64
	triU         *TriaWork
	cm, sm       []float64 // downdate rotations, m
}

// NewSRUKF returns a square-root UKF for the motion model f with the given
// unscented parameters (DefaultUTParams when in doubt). Call Init before use.
func NewSRUKF(f MotionModel, p UTParams) (*SRUKF, error) {
	c, err := newCore(f)
	if err != nil {
		return nil, err
	}
	n := c.n
	w, err := newUTWeights(n, p)
	if err != nil {
		return nil, err
	}
	np := 2*n + 1
	u := &SRUKF{
		core:  c,
		w:     w,
		X:     make([]float64, np*n),
		Y:     make([]float64, np*n),
		d:     make([]float64, n),
		v:     make([]float64, n),
		xp:    make([]float64, n),
		G:     make([]float64, n*n),
		pre:   make([]float64, n*(3*n+1)),
		Sp:    make([]float64, n*n),
		gcol:  make([]bool, n),
		triP:  NewTriaWork(n, 3*n+1),
		c:     make([]float64, n),
		s:     make([]float64, n),
		Spost: make([]float64, n*n),
	}
	u.growMeas(3)
	return u, nil
}

func (u *SRUKF) growMeas(m int) {
	n := u.n
	if !u.innovation.grow(n, m) {
		return
	}
	np := 2*n + 1
	u.Z = make([]float64, np*m)
	u.Dz = make([]float64, np*m)
	u.preU = make([]float64, m*(m+n+1))
	u.triU = NewTriaWork(m, m+n+1)
	u.Rt = make([]float64, m*m)
	u.arr = make([]float64, (m+n)*(m+n))
	u.sgn = make([]float64, m+n)
	u.cm = make([]float64, m)
	u.sm = make([]float64, m)
}

// sigmaPoints writes X_0 = x, X_i = x + γ·S_i, X_{n+i} = x − γ·S_i (S_i the
// i-th column of S) into u.X.
func (u *SRUKF) sigmaPoints() {
	n, g := u.n, u.w.gamma
	copy(u.X[:n], u.x)
	for i := 0; i < n; i++ {
		plus := u.X[(1+i)*n : (2+i)*n]
		minus := u.X[(1+n+i)*n : (2+n+i)*n]
		for r := 0; r < n; r++ {
			d := g * u.S[r*n+i]
			plus[r] = u.x[r] + d
			minus[r] = u.x[r] - d
		}
	}
}

// rankOne applies the zeroth-point term W_c0·v·vᵀ to the factor L (k×k):
// a Cholesky downdate for W_c0 < 0. v is overwritten. For W_c0 > 0 the
// callers put √W_c0·v into the pre-array as one more column instead, which
// gives the same factor as QR followed by a rank-one update and costs one
// short column rather than a sequential update pass (measured with
// BenchmarkSRUKFPredict); rankOne still performs the update when asked.
func (u *SRUKF) rankOne(L []float64, k int, v, c, s []float64) error {
	wc0 := u.w.wc0
	if wc0 == 0 {
		return nil
	}
	sw := math.Sqrt(math.Abs(wc0))
	for i := range v[:k] {
		v[i] *= sw
	}
	if wc0 > 0 {
		cholUpdate(L, k, v)
		return nil
	}
	if !cholDowndate(L, k, v, c, s) {
		return fmt.Errorf("%w: downdate for the negative zeroth weight W_c0=%g", ErrNotPosDef, wc0)
	}
	return nil
}

// Predict moves the state forward by dt ≥ 0 seconds through the unscented
// transform of the motion model.
func (u *SRUKF) Predict(dt float64) error {
	if err := checkDt(dt); err != nil {
		return err
	}
	n, np := u.n, 2*u.n+1
	u.sigmaPoints()
	for i := 0; i < np; i++ {
		u.f.Propagate(u.Y[i*n:(i+1)*n], u.X[i*n:(i+1)*n], dt)
	}
	u.f.NoiseFactor(u.G, u.x, dt)
	// A non-finite G reaches the pre-array and is caught by Triangularize.
	if !finite(u.Y[:np*n]) {
		return fmt.Errorf("%w: motion model output at dt=%g", ErrNonFinite, dt)
	}
	// Deviations D_i = Y_i ⊖ Y_0 relative to the zeroth point, in place of
	// Y_1..Y_2n. Σ W_m = 1, so the mean offset is m̄ = Σ W_i·D_i and
	// x̄ = Y_0 + m̄; the deviations from the mean are D_i − m̄ (and −m̄ for
	// the zeroth point).
	y0 := u.Y[:n]
	mb := u.d
	for r := range mb {
		mb[r] = 0
	}
	for i := 1; i < np; i++ {
		yi := u.Y[i*n : (i+1)*n]
		u.f.Residual(yi, yi, y0)
		for r, v := range yi {
			mb[r] += v
		}
	}
	for r := range mb {
		mb[r] *= u.w.wi
		u.xp[r] = y0[r] + mb[r]
	}
	u.f.Normalize(u.xp)
	sw := math.Sqrt(u.w.wi)
	k := 2 * n
	if u.w.wc0 > 0 {
		k++ // the zeroth point's column, see rankOne
	}
	for j := 0; j < n; j++ {
		u.gcol[j] = false
		for r := 0; r < n; r++ {
			if u.G[r*n+j] != 0 {
				u.gcol[j] = true
				k++
				break
			}
		}
	}
	for i := 1; i < np; i++ {
		yi := u.Y[i*n : (i+1)*n]
		for r, v := range yi {
			u.pre[r*k+i-1] = sw * (v - mb[r])
		}
	}
	// Noise columns: all-zero columns of G (a singular Q, as CTRV's) add
	// nothing to the factor and are left out of the pre-array.
	s0 := math.Sqrt(math.Abs(u.w.wc0))
	for r := 0; r < n; r++ {
		c := 2 * n
		for j := 0; j < n; j++ {
			if u.gcol[j] {
				u.pre[r*k+c] = u.G[r*n+j]
				c++
			}
		}
		if u.w.wc0 > 0 {
			u.pre[r*k+c] = -s0 * mb[r] // √W_c0·(Y_0 − x̄)
		}
	}
	if err := Triangularize(u.Sp, u.pre, n, k, u.triP); err != nil {
		return fmt.Errorf("predict: %w", err)
	}
	if u.w.wc0 < 0 {
		for r := range mb {
			u.v[r] = -mb[r]
		}
		if err := u.rankOne(u.Sp, n, u.v, u.c, u.s); err != nil {
			return fmt.Errorf("predict: %w", err)
		}
	}
	if !finite(u.Sp) {
		return fmt.Errorf("%w: predicted square root", ErrNonFinite)
	}
	// Copied, not swapped: views from State keep seeing the current state.
	copy(u.x, u.xp)
	copy(u.S, u.Sp)
	u.prepared = false
	return nil
}

// Prepare passes fresh sigma points of the current state through h and
// computes ẑ, Sy and K̄ for the NIS and Update calls that follow. Rs is the
// m×m lower-triangular square root of R.
func (u *SRUKF) Prepare(h MeasurementModel, Rs []float64) error {
	u.prepared = false
	m, err := checkMeas(h, Rs)
	if err != nil {
		return err
	}
	u.growMeas(m)
	n, np := u.n, 2*u.n+1
	u.sigmaPoints()
	Z := u.Z[:np*m]
	for i := 0; i < np; i++ {
		h.Predict(Z[i*m:(i+1)*m], u.X[i*n:(i+1)*n])
	}
	if !finite(Z) {
		return fmt.Errorf("%w: measurement model output", ErrNonFinite)
	}
	// As in Predict: Dz_i = (Z_i ⊖ Z_0) − m̄ with m̄ = Σ W_i (Z_i ⊖ Z_0),
	// ẑ = Z_0 + m̄ and Dz_0 = −m̄.
	zhat, e, Dz := u.zhat[:m], u.e[:m], u.Dz[:np*m]
	z0 := Z[:m]
	mb := Dz[:m]
	for r := range mb {
		mb[r] = 0
	}
	for i := 1; i < np; i++ {
		di := Dz[i*m : (i+1)*m]
		h.Residual(di, Z[i*m:(i+1)*m], z0)
		for r, v := range di {
			mb[r] += v
		}
	}
	for r := range mb {
		mb[r] *= u.w.wi
		zhat[r] = z0[r] + mb[r]
	}
	for i := 1; i < np; i++ {
		di := Dz[i*m : (i+1)*m]
		for r := range di {
			di[r] -= mb[r]
		}
	}
	for r := range mb {
		mb[r] = -mb[r] // Dz_0
	}
	// Pair the symmetric sigma points: with a_j = Dz_{1+j}, b_j = Dz_{1+n+j},
	//   P_xz = Σ W_i (X_i − x)(Z_i − ẑ)ᵀ = S·Ψ,  Ψ row j = W_i·γ·(a_j − b_j)ᵀ
	// (X_i − x = ±γ·S_j; the zeroth term vanishes), and since W_i·γ² = ½,
	//   P_zz = R + Σ W_i Dz_i Dz_iᵀ + W_c0 Dz_0 Dz_0ᵀ = R̃ + ΨᵀΨ,
	//   R̃ = R + (W_i/2)·Σ_j (a_j + b_j)(a_j + b_j)ᵀ + W_c0·Dz_0·Dz_0ᵀ.
	// R̃'s square root is the QR of [Rs | √(W_i/2)(a_j + b_j)] with the
	// zeroth point as one more column √W_c0·Dz_0 (W_c0 > 0) or a Cholesky
	// downdate by √|W_c0|·Dz_0 (W_c0 < 0), which fails if R̃ is not
	// positive definite.
	// Then the update is the same orthogonal array as the SR-EKF's, with Ψᵀ
	// in the place of H·S:
	//   [ R̃s  Ψᵀ ]  → [ Sy  0  ]
	//   [ 0    S ]     [ K̄   S⁺ ]
	// P_zz, P_xz and P⁺ = P − P_xz·P_zz⁻¹·P_xzᵀ are those of van der Merwe &
	// Wan 2001, but S⁺ needs no downdates by the gain columns, which lose
	// accuracy when a measurement is very informative.
	k := m + n
	if u.w.wc0 > 0 {
		k++ // the zeroth point's column, see rankOne
	}
	pre := u.preU[:m*k]
	sh := math.Sqrt(u.w.wi / 2)
	s0 := math.Sqrt(math.Abs(u.w.wc0))
	for r := 0; r < m; r++ {
		row := pre[r*k : r*k+k]
		copy(row[:m], Rs[r*m:(r+1)*m])
		for j := 0; j < n; j++ {
			row[m+j] = sh * (Dz[(1+j)*m+r] + Dz[(1+n+j)*m+r])
		}
		if u.w.wc0 > 0 {
			row[m+n] = s0 * Dz[r]
		}
	}
	Rt := u.Rt[:m*m]
	if err := Triangularize(Rt, pre, m, k, u.triU); err != nil {
		return fmt.Errorf("update: %w", err)
	}
	if u.w.wc0 < 0 {
		copy(e, Dz[:m])
		if err := u.rankOne(Rt, m, e, u.cm, u.sm); err != nil {
			return fmt.Errorf("update: %w", err)
		}
	}
	N := m + n
	A := u.arr[:N*N]
	g := u.w.wi * u.w.gamma
	for r := 0; r < m; r++ {
		row := A[r*N : r*N+N]
		copy(row[:m], Rt[r*m:(r+1)*m])
		for j := 0; j < n; j++ {
			row[m+j] = g * (Dz[(1+j)*m+r] - Dz[(1+n+j)*m+r])
		}
	}
	for r := 0; r < n; r++ {
		row := A[(m+r)*N : (m+r)*N+N]
		for j := 0; j < m; j++ {
			row[j] = 0
		}
		copy(row[m:], u.S[r*n:(r+1)*n])
	}
	if err := triangularizeUpdate(u.Sy[:m*m], u.Kbar[:n*m], u.Spost, A, m, n, u.sgn[:N]); err != nil {
		return fmt.Errorf("update: %w", err)
	}
	u.h, u.m, u.prepared = h, m, true
	return nil
}

// NIS returns (z ⊖ ẑ)ᵀ·P_zz⁻¹·(z ⊖ ẑ) against the prepared prediction, +Inf
// when z is unusable or nothing is prepared.
func (u *SRUKF) NIS(z []float64) float64 { return u.whiten(z) }

// Update corrects the state with z and returns its NIS, taking the
// posterior square root prepared by Prepare. On error the state is
// unchanged.
func (u *SRUKF) Update(z []float64) (float64, error) {
	return u.core.update(&u.innovation, u.Spost, z)
}

// CopyFrom makes u an exact copy of src (a *SRUKF of the same dimension and
// unscented parameters).
func (u *SRUKF) CopyFrom(src Filter) error {
	o, ok := src.(*SRUKF)
	if !ok {
		return fmt.Errorf("%w: CopyFrom %T into *SRUKF", ErrBadParameter, src)
	}
	if o.n != u.n {
		return fmt.Errorf("%w: CopyFrom dimension %d into %d", ErrDimension, o.n, u.n)
	}
	if o == u {
		return nil
	}
	u.f = o.f
	u.w = o.w
	copy(u.x, o.x)
	copy(u.S, o.S)
	if o.prepared {
		u.growMeas(o.m)
		copy(u.Spost, o.Spost)
	}
	u.innovation.copyFrom(&o.innovation, u.n)
	return nil
}

var _ Filter = (*SRUKF)(nil)
