// Package particle is a sampling importance resampling (SIR, "bootstrap")
// particle filter after Gordon, Salmond & Smith 1993, "Novel approach to
// nonlinear/non-Gaussian Bayesian state estimation", IEE Proc. F 140(2).
//
// Particles are propagated through the motion model with process noise
// drawn through its NoiseFactor, weighted by the Gaussian measurement
// likelihood, and resampled systematically (Kitagawa 1996) when the
// effective sample size falls below a configured fraction of N. Weights are
// kept as logarithms so that sharp likelihoods cannot underflow them.
//
// For the engine the filter looks Gaussian: State is the weighted mean and
// the Cholesky factor of the weighted sample covariance, and Prepare/NIS
// use a Gaussian approximation of the predicted measurement. The random
// source is a PCG seeded from Config and is part of the filter's state, so a
// run repeats exactly and CopyFrom snapshots reproduce the future too.
//
// Nothing allocates after New, except the first Prepare with a measurement
// dimension larger than 3.
package particle

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/godwit-fusion/godwit/filters"
	"gonum.org/v1/gonum/blas"
	"gonum.org/v1/gonum/blas/blas64"
	"gonum.org/v1/gonum/lapack/lapack64"
)

// ErrInput reports bad input to the filter; the state is left unchanged.
var ErrInput = errors.New("particle: bad input")

// Config sets up a particle filter.
type Config struct {
	// Particles is N, at least 2.
	Particles int
	// ResampleBelow: resample when ESS/N falls below it, 0 < ResampleBelow
	// ≤ 1 (1 resamples after every update). Zero selects 0.5, a common
	// choice (Doucet, Godsill & Andrieu 2000 discuss the ESS criterion).
	ResampleBelow float64
	// Seed1, Seed2 seed the PCG random source.
	Seed1, Seed2 uint64
}

// Sampler is an optional fast path a motion model may offer:
// PropagateNoisy writes f(x, dt) + G(x, dt)·ξ for ξ of length NoiseDim,
// with G·Gᵀ = Q(dt) exactly as NoiseFactor would give (padded with zero
// columns), leaving angle components wrapped as Normalize would. Models in
// filters/models implement it; without it the filter forms G with
// NoiseFactor for every particle.
type Sampler interface {
	NoiseDim() int
	PropagateNoisy(dst, x []float64, dt float64, xi []float64)
}

// Filter is a SIR particle filter implementing filters.Filter. It is not
// safe for concurrent use.
type Filter struct {
	f        filters.MotionModel
	sampler  Sampler // f, when it offers the fast path
	nNoise   int     // normals per particle and step
	n, np    int
	below    float64
	pcg      rand.PCG
	rng      *rand.Rand // draws from &pcg
	x, xNext []float64  // particles, np×n row-major, and the scratch set
	logw     []float64  // normalised log-weights: log Σ exp(logw) = 0
	w        []float64  // exp(logw)
	lwNext   []float64
	G, xi    []float64 // noise factor and standard normal draws
	xbuf     []float64 // one propagated particle
	ess      float64
	resample int

	// Gaussian summary, recomputed on demand.
	mean, S, P []float64
	summaryOK  bool

	// Prepared measurement.
	h        filters.MeasurementModel
	m        int
	zhat     []float64 // np×m
	zbar, Sy []float64
	Rs       []float64
	mwork    []float64 // m×m
	rsInv    []float64 // 1/diag(Rs)
	r, y     []float64 // m
	prepared bool
}

var _ filters.Filter = (*Filter)(nil)

const defaultBelow = 0.5

// New returns a particle filter for motion model f. Init must be called
// before use.
func New(f filters.MotionModel, c Config) (*Filter, error) {
	if f == nil {
		return nil, fmt.Errorf("%w: nil motion model", ErrInput)
	}
	n := f.Dim()
	if n < 1 {
		return nil, fmt.Errorf("%w: motion model dimension %d", ErrInput, n)
	}
	if c.Particles < 2 {
		return nil, fmt.Errorf("%w: %d particles, want at least 2", ErrInput, c.Particles)
	}
	below := c.ResampleBelow
	if below == 0 {
		below = defaultBelow
	}
	if !(below > 0 && below <= 1) {
		return nil, fmt.Errorf("%w: resample fraction %v, want 0 < fraction ≤ 1", ErrInput, c.ResampleBelow)
	}
	np := c.Particles
	p := &Filter{
		f: f, n: n, np: np, below: below,
		x: make([]float64, np*n), xNext: make([]float64, np*n),
		logw: make([]float64, np), w: make([]float64, np), lwNext: make([]float64, np),
		G: make([]float64, n*n), xi: make([]float64, n), xbuf: make([]float64, n),
		mean: make([]float64, n), S: make([]float64, n*n), P: make([]float64, n*n),
	}
	p.nNoise = n
	if s, ok := f.(Sampler); ok && s.NoiseDim() >= 0 && s.NoiseDim() <= n {
		p.sampler, p.nNoise = s, s.NoiseDim()
	}
	p.pcg.Seed(c.Seed1, c.Seed2)
	p.rng = rand.New(&p.pcg)
	p.growMeas(3)
	p.setUniform()
	return p, nil
}

func (p *Filter) growMeas(m int) {
	if cap(p.zhat) >= p.np*m && cap(p.Sy) >= m*m {
		return
	}
	p.zhat = make([]float64, p.np*m)
	p.zbar = make([]float64, m)
	p.Sy = make([]float64, m*m)
	p.Rs = make([]float64, m*m)
	p.mwork = make([]float64, m*m)
	p.r = make([]float64, m)
	p.rsInv = make([]float64, m)
	p.y = make([]float64, m)
}

func (p *Filter) setUniform() {
	lw := -math.Log(float64(p.np))
	for i := range p.logw {
		p.logw[i] = lw
		p.w[i] = 1 / float64(p.np)
	}
	p.ess = float64(p.np)
}

func allFinite(v []float64) bool {
	for _, a := range v {
		if a-a != 0 { // NaN for ±Inf and NaN, 0 otherwise
			return false
		}
	}
	return true
}

// Init draws the particles from N(x0, S0·S0ᵀ) with equal weights.
func (p *Filter) Init(x0, S0 []float64) error {
	n := p.n
	if len(x0) != n || len(S0) != n*n {
		return fmt.Errorf("%w: init with %d and %d values, need %d and %d", ErrInput, len(x0), len(S0), n, n*n)
	}
	if !allFinite(x0) || !allFinite(S0) {
		return fmt.Errorf("%w: init values not finite", ErrInput)
	}
	for i := 0; i < n; i++ {
		if S0[i*n+i] < 0 {
			return fmt.Errorf("%w: S0 diagonal %d is negative", ErrInput, i)
		}
		for j := i + 1; j < n; j++ {
			if S0[i*n+j] != 0 {
				return fmt.Errorf("%w: S0 is not lower triangular", ErrInput)
			}
		}
	}
	for k := 0; k < p.np; k++ {
		xk := p.x[k*n : (k+1)*n]
		for j := range p.xi {
			p.xi[j] = p.rng.NormFloat64()
		}
		for i := 0; i < n; i++ {
			s := x0[i]
			for j := 0; j <= i; j++ {
				s += S0[i*n+j] * p.xi[j]
			}
			xk[i] = s
		}
		p.f.Normalize(xk)
	}
	p.setUniform()
	p.summaryOK = false
	p.prepared = false
	return nil
}

// Predict moves every particle through the motion model and adds process
// noise G·ξ, ξ ~ N(0, I), with Q(dt) = G·Gᵀ from the model's NoiseFactor.
func (p *Filter) Predict(dt float64) error {
	if !(dt >= 0) || math.IsInf(dt, 0) {
		return fmt.Errorf("%w: dt = %v, want finite ≥ 0", ErrInput, dt)
	}
	n := p.n
	saved := p.pcg
	if p.sampler != nil {
		ξ := p.xi[:p.nNoise]
		for k := 0; k < p.np; k++ {
			dst := p.xNext[k*n : (k+1)*n]
			for j := range ξ {
				ξ[j] = p.rng.NormFloat64()
			}
			p.sampler.PropagateNoisy(dst, p.x[k*n:(k+1)*n], dt, ξ)
		}
	} else {
		p.predictGeneric(dt)
	}
	if !allFinite(p.xNext) {
		p.pcg = saved
		return fmt.Errorf("%w: prediction over %v s produced a non-finite particle", ErrInput, dt)
	}
	p.x, p.xNext = p.xNext, p.x
	p.summaryOK = false
	p.prepared = false
	return nil
}

// predictGeneric samples through NoiseFactor's G for every particle.
func (p *Filter) predictGeneric(dt float64) {
	n := p.n
	for k := 0; k < p.np; k++ {
		xk := p.x[k*n : (k+1)*n]
		dst := p.xNext[k*n : (k+1)*n]
		p.f.NoiseFactor(p.G, xk, dt)
		p.f.Propagate(dst, xk, dt)
		for j := range p.xi {
			p.xi[j] = p.rng.NormFloat64()
		}
		for i := 0; i < n; i++ {
			g := p.G[i*n : (i+1)*n]
			var s float64
			for j, e := range p.xi {
				s += g[j] * e
			}
			dst[i] += s
		}
		p.f.Normalize(dst)
	}
}

// State returns the weighted mean and a square root of the weighted sample
// covariance Σ wᵢ·dᵢ·dᵢᵀ (dᵢ = xᵢ ⊖ mean). The mean is taken relative to the
// heaviest particle through the model's Residual, so angles average
// correctly. When the sample covariance is not positive definite (after
// resampling from a singular Q, say) it is regularised by the smallest
// jitter δ·I, δ = 1e-12·max(trace/n, 1e-18)·100ᵏ, k = 0…7, that makes the
// Cholesky factorisation succeed; as a last resort S is the diagonal of
// standard deviations (floored at 1e-15 so the diagonal stays positive). The view is valid until the next call that changes the filter.
func (p *Filter) State() filters.Gaussian {
	if !p.summaryOK {
		p.summarise()
	}
	return filters.Gaussian{X: p.mean, S: p.S}
}

func (p *Filter) heaviest() int {
	best := 0
	for k, lw := range p.logw {
		if lw > p.logw[best] {
			best = k
		}
	}
	return best
}

func (p *Filter) summarise() {
	n := p.n
	ref := p.x[p.heaviest()*n:][:n]
	d, δ := p.xbuf, p.xi
	for i := range δ {
		δ[i] = 0
	}
	for i := range p.P {
		p.P[i] = 0
	}
	// One pass relative to the heaviest particle: with dᵢ = xᵢ ⊖ ref and
	// δ = Σ wᵢ·dᵢ, mean = ref ⊕ δ and Σ wᵢ(dᵢ−δ)(dᵢ−δ)ᵀ = Σ wᵢ·dᵢ·dᵢᵀ − δ·δᵀ
	// (valid while the cloud spans less than half a turn in each angle).
	for k := 0; k < p.np; k++ {
		p.f.Residual(d, p.x[k*n:(k+1)*n], ref)
		wk := p.w[k]
		for i := 0; i < n; i++ {
			wd := wk * d[i]
			δ[i] += wd
			row := p.P[i*n : i*n+i+1]
			for j := range row {
				row[j] += wd * d[j]
			}
		}
	}
	for i := 0; i < n; i++ {
		p.mean[i] = ref[i] + δ[i]
		for j := 0; j <= i; j++ {
			p.P[i*n+j] -= δ[i] * δ[j]
		}
	}
	p.f.Normalize(p.mean)
	var tr float64
	for i := 0; i < n; i++ {
		tr += p.P[i*n+i]
	}
	// The floor keeps the jitter positive when every particle coincides.
	jitter := 1e-12 * math.Max(tr/float64(n), 1e-18)
	for try := 0; ; try++ {
		copy(p.S, p.P)
		if try > 0 {
			for i := 0; i < n; i++ {
				p.S[i*n+i] += jitter
			}
			jitter *= 100
		}
		if cholLower(p.S, n) {
			break
		}
		if try == 8 {
			for i := range p.S {
				p.S[i] = 0
			}
			for i := 0; i < n; i++ {
				p.S[i*n+i] = math.Sqrt(math.Max(p.P[i*n+i], 1e-30))
			}
			break
		}
	}
	p.summaryOK = true
}

// cholLower overwrites the lower triangle of the row-major symmetric A
// (n×n) with its Cholesky factor L (A = L·Lᵀ, LAPACK dpotrf) and zeroes the
// strict upper triangle. It reports false when A is not positive definite.
func cholLower(A []float64, n int) bool {
	_, ok := lapack64.Potrf(blas64.Symmetric{Uplo: blas.Lower, N: n, Stride: n, Data: A})
	if !ok {
		return false
	}
	for i := 0; i < n; i++ {
		if !(A[i*n+i] > 0) {
			return false
		}
		for j := i + 1; j < n; j++ {
			A[i*n+j] = 0
		}
	}
	return true
}

// Prepare computes each particle's predicted measurement and the Gaussian
// approximation of the predicted measurement: weighted mean ẑ and the square
// root Sy of Σ wᵢ·(zᵢ ⊖ ẑ)(zᵢ ⊖ ẑ)ᵀ + Rs·Rsᵀ.
//
// A failed Prepare leaves the estimate untouched but discards any earlier
// prepared prediction, so a following Update fails instead of using it.
func (p *Filter) Prepare(h filters.MeasurementModel, Rs []float64) error {
	p.prepared = false
	if h == nil {
		return fmt.Errorf("%w: nil measurement model", ErrInput)
	}
	m := h.Dim()
	if m < 1 || len(Rs) != m*m {
		return fmt.Errorf("%w: measurement dimension %d with %d noise values", ErrInput, m, len(Rs))
	}
	if !allFinite(Rs) {
		return fmt.Errorf("%w: noise square root not finite", ErrInput)
	}
	for i := 0; i < m; i++ {
		if !(Rs[i*m+i] > 0) {
			return fmt.Errorf("%w: noise square root diagonal %d is %v, want > 0 (R not positive definite)", ErrInput, i, Rs[i*m+i])
		}
		for j := i + 1; j < m; j++ {
			if Rs[i*m+j] != 0 {
				return fmt.Errorf("%w: noise square root is not lower triangular", ErrInput)
			}
		}
	}
	p.growMeas(m)
	zhat := p.zhat[:p.np*m]
	for k := 0; k < p.np; k++ {
		h.Predict(zhat[k*m:(k+1)*m], p.x[k*p.n:(k+1)*p.n])
	}
	if !allFinite(zhat) {
		return fmt.Errorf("%w: a particle's predicted measurement is not finite", ErrInput)
	}
	// Weighted mean and covariance in one pass relative to the heaviest
	// particle's prediction, as in summarise; then R = Rs·Rsᵀ is added
	// (lower triangles suffice for the factorisation).
	ref := zhat[p.heaviest()*m:][:m]
	zbar, r, C := p.zbar[:m], p.r[:m], p.mwork[:m*m]
	for i := range zbar {
		zbar[i] = 0
	}
	for i := range C {
		C[i] = 0
	}
	for k := 0; k < p.np; k++ {
		h.Residual(r, zhat[k*m:(k+1)*m], ref)
		wk := p.w[k]
		for i := 0; i < m; i++ {
			wr := wk * r[i]
			zbar[i] += wr
			for j := 0; j <= i; j++ {
				C[i*m+j] += wr * r[j]
			}
		}
	}
	for i := 0; i < m; i++ {
		for j := 0; j <= i; j++ {
			s := -zbar[i] * zbar[j]
			for l := 0; l <= j; l++ {
				s += Rs[i*m+l] * Rs[j*m+l]
			}
			C[i*m+j] += s
		}
	}
	for i := range zbar {
		zbar[i] += ref[i]
	}
	Sy := p.Sy[:m*m]
	copy(Sy, C)
	if !cholLower(Sy, m) {
		return fmt.Errorf("%w: predicted measurement covariance not positive definite", ErrInput)
	}
	copy(p.Rs[:m*m], Rs)
	for i := 0; i < m; i++ {
		p.rsInv[i] = 1 / Rs[i*m+i]
	}
	p.h, p.m, p.prepared = h, m, true
	return nil
}

// NIS returns (z ⊖ ẑ)ᵀ·(Sy·Syᵀ)⁻¹·(z ⊖ ẑ) against the prepared Gaussian
// approximation, or +Inf when nothing is prepared or z is unusable.
func (p *Filter) NIS(z []float64) float64 {
	if !p.prepared || len(z) != p.m || !allFinite(z) {
		return math.Inf(1)
	}
	r := p.r[:p.m]
	p.h.Residual(r, z, p.zbar[:p.m])
	q, err := filters.NormalisedSquare(r, p.Sy[:p.m*p.m])
	if err != nil {
		return math.Inf(1)
	}
	return q
}

// Update reweights the particles by the likelihood N(z; h(xᵢ), R),
// logwᵢ ← logwᵢ − ½·|Rs⁻¹(z ⊖ h(xᵢ))|² (the normalising constant is common
// to all particles and cancels), normalises by log-sum-exp, and resamples
// systematically when ESS = 1/Σwᵢ² falls below the configured fraction of N.
// It returns the NIS of z against the prepared prediction.
func (p *Filter) Update(z []float64) (float64, error) {
	if !p.prepared {
		return math.Inf(1), fmt.Errorf("%w: Update without Prepare", ErrInput)
	}
	m := p.m
	if len(z) != m || !allFinite(z) {
		return math.Inf(1), fmt.Errorf("%w: measurement has %d values (need %d) or is not finite", ErrInput, len(z), m)
	}
	nis := p.NIS(z)
	r, y, Rs, zhat, rinv := p.r[:m], p.y[:m], p.Rs[:m*m], p.zhat[:p.np*m], p.rsInv[:m]
	maxLw := math.Inf(-1)
	for k := 0; k < p.np; k++ {
		p.h.Residual(r, z, zhat[k*m:(k+1)*m])
		var q float64
		for i := 0; i < m; i++ {
			s := r[i]
			for j := 0; j < i; j++ {
				s -= Rs[i*m+j] * y[j]
			}
			y[i] = s * rinv[i]
			q += y[i] * y[i]
		}
		lw := p.logw[k] - q/2
		p.lwNext[k] = lw
		if lw > maxLw {
			maxLw = lw
		}
	}
	if math.IsNaN(maxLw) || math.IsInf(maxLw, 0) {
		return math.Inf(1), fmt.Errorf("%w: every particle has zero likelihood", ErrInput)
	}
	// Log-sum-exp about the largest log-weight. The linear weights are
	// normalised in the shifted frame so that Σw = 1 to rounding even when
	// the log-weights are huge and negative (an outlier far from every
	// particle).
	var sum float64
	for k, lw := range p.lwNext {
		a := lw - maxLw
		p.lwNext[k] = a
		e := math.Exp(a)
		p.w[k] = e
		sum += e
	}
	logSum := math.Log(sum)
	inv := 1 / sum
	var sq float64
	for k, a := range p.lwNext {
		wk := p.w[k] * inv
		p.w[k] = wk
		p.lwNext[k] = a - logSum
		sq += wk * wk
	}
	p.logw, p.lwNext = p.lwNext, p.logw
	p.ess = 1 / sq
	if p.ess < p.below*float64(p.np) {
		p.systematicResample()
	}
	p.summaryOK = false
	p.prepared = false
	return nis, nil
}

// systematicResample draws N particles with one uniform offset: particle i
// is copied once for each u₀ + j/N (u₀ ~ U[0, 1/N)) falling in its slice of
// the cumulative weights (Kitagawa 1996, "Monte Carlo filter and smoother
// for non-Gaussian nonlinear state space models", JCGS 5(1)). Each particle
// is kept ⌊N·wᵢ⌋ or ⌈N·wᵢ⌉ times.
func (p *Filter) systematicResample() {
	n, np := p.n, p.np
	step := 1 / float64(np)
	u := p.rng.Float64() * step
	cum := p.w[0]
	i := 0
	for j := 0; j < np; j++ {
		for u > cum && i < np-1 {
			i++
			cum += p.w[i]
		}
		copy(p.xNext[j*n:(j+1)*n], p.x[i*n:(i+1)*n])
		u += step
	}
	p.x, p.xNext = p.xNext, p.x
	p.setUniform()
	p.resample++
}

// CopyFrom makes p an exact copy of src (a *Filter with the same state
// dimension and particle count), random source included.
func (p *Filter) CopyFrom(src filters.Filter) error {
	o, ok := src.(*Filter)
	if !ok || o == nil {
		return fmt.Errorf("%w: CopyFrom a %T, want *particle.Filter", ErrInput, src)
	}
	if o == p {
		return nil
	}
	if o.n != p.n || o.np != p.np {
		return fmt.Errorf("%w: CopyFrom dimension %d×%d into %d×%d", ErrInput, o.np, o.n, p.np, p.n)
	}
	p.f, p.sampler, p.nNoise, p.below = o.f, o.sampler, o.nNoise, o.below
	p.pcg = o.pcg
	copy(p.x, o.x)
	copy(p.logw, o.logw)
	copy(p.w, o.w)
	p.ess, p.resample = o.ess, o.resample
	copy(p.mean, o.mean)
	copy(p.S, o.S)
	copy(p.P, o.P)
	p.summaryOK = o.summaryOK
	p.prepared = o.prepared
	if o.prepared {
		m := o.m
		p.growMeas(m)
		copy(p.zhat[:p.np*m], o.zhat[:o.np*m])
		copy(p.zbar[:m], o.zbar[:m])
		copy(p.Sy[:m*m], o.Sy[:m*m])
		copy(p.Rs[:m*m], o.Rs[:m*m])
		copy(p.rsInv[:m], o.rsInv[:m])
		p.h, p.m = o.h, m
	}
	return nil
}

// Reseed restarts the random source from (seed1, seed2), as New seeds it,
// and leaves the particles and weights as they are. Filters copied from one
// template share its random source and would draw the same noise in step;
// a caller reseeds each copy (the engine from its track id) to give each
// its own sequence while keeping runs repeatable. It does not allocate.
func (p *Filter) Reseed(seed1, seed2 uint64) {
	p.pcg.Seed(seed1, seed2)
}

// ESS is the effective sample size 1/Σwᵢ² after the last update (N after
// resampling or Init).
func (p *Filter) ESS() float64 { return p.ess }

// Resamples counts the resampling steps so far.
func (p *Filter) Resamples() int { return p.resample }

// Particles returns a view of the particle states (N×n row-major) and their
// normalised weights, valid until the next call that changes the filter.
func (p *Filter) Particles() (x, w []float64) { return p.x, p.w }
