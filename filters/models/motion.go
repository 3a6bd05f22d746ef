// Package models holds godwit's motion models (implementing
// filters.MotionModel) and measurement models (implementing
// filters.MeasurementModel), in the state layouts the rest of the project
// relies on:
//
//	CV    [px, py, vx, vy]
//	CA    [px, py, vx, vy, ax, ay]
//	CTRV  [px, py, v, yaw, yawrate]
//	Ego   [px, py, v, yaw, yawrate]  (the platform itself)
//
// Positions are site-frame metres (x east, y north), angles radians
// counter-clockwise from x, wrapped to (−π, π].
//
// Models keep small workspaces, so one model value must not be used from two
// goroutines at once; nothing allocates after construction.
//
// Process noise follows Bar-Shalom, Li & Kirubarajan, "Estimation with
// Applications to Tracking and Navigation", Wiley 2001 (BLK below), ch. 6.
// Section and equation numbers are quoted from memory.
package models

import (
	"errors"
	"fmt"
	"math"
)

// ErrParam reports an invalid model parameter.
var ErrParam = errors.New("models: invalid parameter")

func checkSD(name string, v float64) error {
	if !(v >= 0) || math.IsInf(v, 0) {
		return fmt.Errorf("%w: %s = %v, want a finite value ≥ 0", ErrParam, name, v)
	}
	return nil
}

// Cholesky factors of the dimensionless continuous-time noise matrices of
// BLK §6.2. With D = diag(T^(k−½), …, T^½) the discretised Q is
// q̃·D·A·D, so its factor is √q̃·D·L with L the constant factor of A below.
//
// CWNA (BLK §6.2.2, eq. 6.2.2-12): A = [[1/3, 1/2], [1/2, 1]].
var (
	cwna11 = 1 / math.Sqrt(3)
	cwna21 = math.Sqrt(3) / 2
	cwna22 = 0.5
)

// CWPA / white-noise jerk (BLK §6.2.3, eq. 6.2.3-8):
// A = [[1/20, 1/8, 1/6], [1/8, 1/3, 1/2], [1/6, 1/2, 1]].
var (
	cwpa11 = 1 / (2 * math.Sqrt(5))
	cwpa21 = math.Sqrt(5) / 4
	cwpa31 = math.Sqrt(5) / 3
	cwpa22 = 1 / (4 * math.Sqrt(3))
	cwpa32 = 1 / math.Sqrt(3)
	cwpa33 = 1.0 / 3
)

func zero(a []float64) {
	for i := range a {
		a[i] = 0
	}
}

func identity(F []float64, n int) {
	zero(F[:n*n])
	for i := 0; i < n; i++ {
		F[i*n+i] = 1
	}
}

// WrapAngle wraps a to (−π, π]. Non-finite input gives NaN.
func WrapAngle(a float64) float64 {
	if a > -math.Pi && a <= math.Pi {
		return a
	}
	// One turn off is the common case (a sum of two wrapped angles).
	if a > math.Pi && a <= 3*math.Pi {
		return a - 2*math.Pi
	}
	if a <= -math.Pi && a > -3*math.Pi {
		return a + 2*math.Pi
	}
	a = math.Remainder(a, 2*math.Pi) // in [−π, π]
	if a <= -math.Pi {
		a += 2 * math.Pi
	}
	return a
}

// ---------------------------------------------------------------- CV

// CV is the planar constant-velocity model, state [px, py, vx, vy], driven by
// continuous white-noise acceleration (CWNA, BLK §6.2.2) independently on
// each axis.
type CV struct {
	sq float64 // √q̃
}

// NewCV returns a CV model. accelSD is √q̃, the square root of the
// acceleration noise power spectral density in m/s²/√Hz (numerically the s.d.
// of the velocity change accrued over one second, the usual "accel_sd").
func NewCV(accelSD float64) (*CV, error) {
	if err := checkSD("accel_sd", accelSD); err != nil {
		return nil, err
	}
	return &CV{sq: accelSD}, nil
}

// Dim is 4.
func (*CV) Dim() int { return 4 }

// Propagate is p += v·dt.
func (*CV) Propagate(dst, x []float64, dt float64) {
	dst[0] = x[0] + dt*x[2]
	dst[1] = x[1] + dt*x[3]
	dst[2] = x[2]
	dst[3] = x[3]
}

// Jacobian writes F = [[I, dt·I], [0, I]] (BLK eq. 6.2.2-13).
func (*CV) Jacobian(F, x []float64, dt float64) {
	identity(F, 4)
	F[0*4+2] = dt
	F[1*4+3] = dt
}

// NoiseFactor writes G with G·Gᵀ = Q(dt) = q̃·[[dt³/3, dt²/2], [dt²/2, dt]]
// per axis (BLK eq. 6.2.2-12), the exact discretisation of CWNA.
func (m *CV) NoiseFactor(G, x []float64, dt float64) {
	zero(G[:16])
	t := math.Abs(dt)
	rt := math.Sqrt(t)
	g11 := m.sq * cwna11 * t * rt
	g21 := m.sq * cwna21 * rt
	g22 := m.sq * cwna22 * rt
	for ax := 0; ax < 2; ax++ {
		p, v := ax, 2+ax
		G[p*4+p] = g11
		G[v*4+p] = g21
		G[v*4+v] = g22
	}
}

// Residual is a − b (no angles in the state).
func (*CV) Residual(dst, a, b []float64) {
	for i := 0; i < 4; i++ {
		dst[i] = a[i] - b[i]
	}
}

// Normalize does nothing: CV has no angle components.
func (*CV) Normalize([]float64) {}

// PosVel copies the state; J is the identity.
func (*CV) PosVel(pv, x, J []float64) {
	copy(pv[:4], x[:4])
	if J != nil {
		identity(J, 4)
	}
}

// Position returns (px, py) without the velocity.
func (*CV) Position(x []float64) (px, py float64) { return x[0], x[1] }

// NoiseDim is the number of standard normals PropagateNoisy consumes.
func (*CV) NoiseDim() int { return 4 }

// PropagateNoisy writes f(x, dt) + G·ξ (G from NoiseFactor, ξ of length
// NoiseDim) without forming G: the sampling fast path of particle filters.
func (m *CV) PropagateNoisy(dst, x []float64, dt float64, ξ []float64) {
	t := math.Abs(dt)
	rt := math.Sqrt(t)
	g11 := m.sq * cwna11 * t * rt
	g21 := m.sq * cwna21 * rt
	g22 := m.sq * cwna22 * rt
	dst[0] = x[0] + dt*x[2] + g11*ξ[0]
	dst[1] = x[1] + dt*x[3] + g11*ξ[1]
	dst[2] = x[2] + g21*ξ[0] + g22*ξ[2]
	dst[3] = x[3] + g21*ξ[1] + g22*ξ[3]
}

// ---------------------------------------------------------------- CA

// CA is the planar constant-acceleration model, state
// [px, py, vx, vy, ax, ay], driven by continuous white-noise jerk (the
// continuous Wiener process acceleration model, BLK §6.2.3) on each axis.
type CA struct {
	sq float64 // √q̃ of the jerk
}

// NewCA returns a CA model. jerkSD is √q̃ of the white-noise jerk, in
// m/s³/√Hz (numerically the s.d. of the acceleration change accrued over one
// second). When a configuration gives accel_sd for a CA tracker, passing it
// here keeps the same "change per second" reading one derivative higher.
func NewCA(jerkSD float64) (*CA, error) {
	if err := checkSD("jerk_sd", jerkSD); err != nil {
		return nil, err
	}
	return &CA{sq: jerkSD}, nil
}

// Dim is 6.
func (*CA) Dim() int { return 6 }

// Propagate is p += v·dt + a·dt²/2, v += a·dt.
func (*CA) Propagate(dst, x []float64, dt float64) {
	h := dt * dt / 2
	dst[0] = x[0] + dt*x[2] + h*x[4]
	dst[1] = x[1] + dt*x[3] + h*x[5]
	dst[2] = x[2] + dt*x[4]
	dst[3] = x[3] + dt*x[5]
	dst[4] = x[4]
	dst[5] = x[5]
}

// Jacobian writes the CA transition matrix (BLK eq. 6.2.3-7).
func (*CA) Jacobian(F, x []float64, dt float64) {
	identity(F, 6)
	h := dt * dt / 2
	F[0*6+2], F[0*6+4] = dt, h
	F[1*6+3], F[1*6+5] = dt, h
	F[2*6+4] = dt
	F[3*6+5] = dt
}

// NoiseFactor writes G with G·Gᵀ = Q(dt) of BLK eq. 6.2.3-8:
// q̃·[[dt⁵/20, dt⁴/8, dt³/6], [dt⁴/8, dt³/3, dt²/2], [dt³/6, dt²/2, dt]] per axis.
func (m *CA) NoiseFactor(G, x []float64, dt float64) {
	zero(G[:36])
	t := math.Abs(dt)
	r1 := m.sq * math.Sqrt(t) // √q̃·T^½
	r3 := r1 * t              // √q̃·T^(3/2)
	r5 := r3 * t              // √q̃·T^(5/2)
	for ax := 0; ax < 2; ax++ {
		p, v, a := ax, 2+ax, 4+ax
		G[p*6+p] = r5 * cwpa11
		G[v*6+p] = r3 * cwpa21
		G[a*6+p] = r1 * cwpa31
		G[v*6+v] = r3 * cwpa22
		G[a*6+v] = r1 * cwpa32
		G[a*6+a] = r1 * cwpa33
	}
}

// Residual is a − b (no angles in the state).
func (*CA) Residual(dst, a, b []float64) {
	for i := 0; i < 6; i++ {
		dst[i] = a[i] - b[i]
	}
}

// Normalize does nothing: CA has no angle components.
func (*CA) Normalize([]float64) {}

// PosVel copies the first four components; J = [I₄ | 0].
func (*CA) PosVel(pv, x, J []float64) {
	copy(pv[:4], x[:4])
	if J != nil {
		zero(J[:24])
		for i := 0; i < 4; i++ {
			J[i*6+i] = 1
		}
	}
}

// Position returns (px, py) without the velocity.
func (*CA) Position(x []float64) (px, py float64) { return x[0], x[1] }

// NoiseDim is the number of standard normals PropagateNoisy consumes.
func (*CA) NoiseDim() int { return 6 }

// PropagateNoisy writes f(x, dt) + G·ξ (G from NoiseFactor, ξ of length
// NoiseDim) without forming G.
func (m *CA) PropagateNoisy(dst, x []float64, dt float64, ξ []float64) {
	m.Propagate(dst, x, dt)
	t := math.Abs(dt)
	r1 := m.sq * math.Sqrt(t)
	r3 := r1 * t
	r5 := r3 * t
	for ax := 0; ax < 2; ax++ {
		p, v, a := ax, 2+ax, 4+ax
		dst[p] += r5 * cwpa11 * ξ[p]
		dst[v] += r3*cwpa21*ξ[p] + r3*cwpa22*ξ[v]
		dst[a] += r1*cwpa31*ξ[p] + r1*cwpa32*ξ[v] + r1*cwpa33*ξ[a]
	}
}

// ---------------------------------------------------------------- CTRV

// CTRV is the constant turn rate and velocity model, state
// [px, py, v, yaw, yawrate] (speed v along the heading yaw). See Schubert,
// Richter & Wanielik 2008, "Comparison and evaluation of advanced motion
// models for vehicle tracking" (FUSION 2008) for the transition.
//
// The transition is written as p += v·dt·(rotation of (s(θ), c(θ)) by yaw)
// with θ = yawrate·dt, s(θ) = sinθ/θ and c(θ) = (1−cosθ)/θ, which equals the
// usual v/ω·(sin(yaw+θ)−sin yaw) form but has no 0/0 as ω → 0: below
// |θ| < 0.05, s, c and their derivatives come from Taylor series, so the state
// and its Jacobian stay smooth through the straight-line limit.
//
// Process noise: white longitudinal acceleration (s.d. accelSD) and white
// yaw acceleration (s.d. yawAccelSD), each discretised as CWNA (BLK §6.2.2,
// eq. 6.2.2-12) on the pairs (along-track position, v) and (yaw, yawrate).
// The along-track direction is taken at the mid-interval heading. Q has rank 4
// of 5 (no cross-track position noise), so G has a zero column.
type CTRV struct {
	sa, sw float64 // √q̃ of acceleration and of yaw acceleration
}

// NewCTRV returns a CTRV model (see CTRV for the meaning of the arguments:
// √PSD in m/s²/√Hz and rad/s²/√Hz).
func NewCTRV(accelSD, yawAccelSD float64) (*CTRV, error) {
	if err := checkSD("accel_sd", accelSD); err != nil {
		return nil, err
	}
	if err := checkSD("yaw_accel_sd", yawAccelSD); err != nil {
		return nil, err
	}
	return &CTRV{sa: accelSD, sw: yawAccelSD}, nil
}

// Dim is 5.
func (*CTRV) Dim() int { return 5 }

// turnSeriesBelow is where s, c (and their derivatives) switch to Taylor
// series. Below 0.25 the dropped series terms are under 1e-20 relative; above
// it the closed forms lose at most ~4e-15 relative to cancellation. A wide
// series range keeps the sines off the hot path for yaw rates up to 5 rad/s
// at 20 Hz.
const turnSeriesBelow = 0.25

// turnFns returns s(θ)=sinθ/θ, c(θ)=(1−cosθ)/θ and their derivatives.
func turnFns(θ float64) (s, c, ds, dc float64) {
	if math.Abs(θ) < turnSeriesBelow {
		// Horner forms with constant reciprocals (no divisions in the hot path).
		t2 := θ * θ
		s, c = turnSeries(θ, t2)
		ds = -θ * (1.0 / 3) * (1 - t2*(1.0/10)*(1-t2*(1.0/28)*(1-t2*(1.0/54)*(1-t2*(1.0/88)*(1-t2*(1.0/130)*(1-t2*(1.0/180)))))))
		dc = 0.5 - t2*(1.0/8)*(1-t2*(1.0/18)*(1-t2*(1.0/40)*(1-t2*(1.0/70)*(1-t2*(1.0/108)*(1-t2*(1.0/154))))))
		return s, c, ds, dc
	}
	sθ, cθ := math.Sincos(θ)
	h := math.Sin(θ / 2)
	s = sθ / θ
	c = 2 * h * h / θ // 1−cosθ = 2sin²(θ/2), without cancellation
	ds = (cθ - s) / θ
	dc = (sθ - c) / θ
	return s, c, ds, dc
}

// turnSeries is the Taylor series of s(θ) and c(θ) in Horner form with
// constant reciprocals (no divisions on the hot path); t2 = θ².
func turnSeries(θ, t2 float64) (s, c float64) {
	s = 1 - t2*(1.0/6)*(1-t2*(1.0/20)*(1-t2*(1.0/42)*(1-t2*(1.0/72)*(1-t2*(1.0/110)*(1-t2*(1.0/156))))))
	c = θ * 0.5 * (1 - t2*(1.0/12)*(1-t2*(1.0/30)*(1-t2*(1.0/56)*(1-t2*(1.0/90)*(1-t2*(1.0/132)*(1-t2*(1.0/182)))))))
	return s, c
}

// turnSC is turnFns without the derivatives (the propagation hot path).
func turnSC(θ float64) (s, c float64) {
	if math.Abs(θ) < turnSeriesBelow {
		return turnSeries(θ, θ*θ)
	}
	h := math.Sin(θ / 2)
	return math.Sin(θ) / θ, 2 * h * h / θ
}

// Propagate applies the CTRV transition.
func (*CTRV) Propagate(dst, x []float64, dt float64) {
	v, yaw, w := x[2], x[3], x[4]
	s, c := turnSC(w * dt)
	sy, cy := math.Sincos(yaw)
	vt := v * dt
	dst[0] = x[0] + vt*(cy*s-sy*c)
	dst[1] = x[1] + vt*(sy*s+cy*c)
	dst[2] = v
	dst[3] = WrapAngle(yaw + w*dt)
	dst[4] = w
}

// Jacobian writes ∂f/∂x of the CTRV transition (analytic, smooth at ω = 0).
func (*CTRV) Jacobian(F, x []float64, dt float64) {
	v, yaw, w := x[2], x[3], x[4]
	s, c, ds, dc := turnFns(w * dt)
	sy, cy := math.Sincos(yaw)
	vt := v * dt
	identity(F, 5)
	F[0*5+2] = dt * (cy*s - sy*c)
	F[0*5+3] = vt * (-sy*s - cy*c)
	F[0*5+4] = vt * dt * (cy*ds - sy*dc)
	F[1*5+2] = dt * (sy*s + cy*c)
	F[1*5+3] = vt * (cy*s - sy*c)
	F[1*5+4] = vt * dt * (sy*ds + cy*dc)
	F[3*5+4] = dt
}

// NoiseFactor writes G (5×5, last column zero); see CTRV.
func (m *CTRV) NoiseFactor(G, x []float64, dt float64) {
	zero(G[:25])
	t := math.Abs(dt)
	rt := math.Sqrt(t)
	sh, ch := math.Sincos(x[3] + x[4]*dt/2)
	a11, a21, a22 := m.sa*cwna11*t*rt, m.sa*cwna21*rt, m.sa*cwna22*rt
	G[0*5+0] = a11 * ch
	G[1*5+0] = a11 * sh
	G[2*5+0] = a21
	G[2*5+1] = a22
	G[3*5+2] = m.sw * cwna11 * t * rt
	G[4*5+2] = m.sw * cwna21 * rt
	G[4*5+3] = m.sw * cwna22 * rt
}

// Residual is a − b with the yaw difference wrapped.
func (*CTRV) Residual(dst, a, b []float64) {
	dst[0] = a[0] - b[0]
	dst[1] = a[1] - b[1]
	dst[2] = a[2] - b[2]
	dst[3] = WrapAngle(a[3] - b[3])
	dst[4] = a[4] - b[4]
}

// Normalize wraps the yaw.
func (*CTRV) Normalize(x []float64) { x[3] = WrapAngle(x[3]) }

// PosVel writes [px, py, v·cos yaw, v·sin yaw] and its Jacobian.
func (*CTRV) PosVel(pv, x, J []float64) {
	sy, cy := math.Sincos(x[3])
	pv[0], pv[1] = x[0], x[1]
	pv[2], pv[3] = x[2]*cy, x[2]*sy
	if J != nil {
		zero(J[:20])
		J[0*5+0] = 1
		J[1*5+1] = 1
		J[2*5+2], J[2*5+3] = cy, -x[2]*sy
		J[3*5+2], J[3*5+3] = sy, x[2]*cy
	}
}

// Position returns (px, py) without the velocity.
func (*CTRV) Position(x []float64) (px, py float64) { return x[0], x[1] }

// NoiseDim is 4: Q has rank 4 (see CTRV).
func (*CTRV) NoiseDim() int { return 4 }

// halfTurn returns sin and cos of θ/2, by series below the turn-series
// switch (dropped terms < 1e-19 relative there).
func halfTurn(θ float64) (sh, ch float64) {
	if math.Abs(θ) < turnSeriesBelow {
		h := θ * 0.5
		h2 := h * h
		sh = h * (1 - h2*(1.0/6)*(1-h2*(1.0/20)*(1-h2*(1.0/42)*(1-h2*(1.0/72)*(1-h2*(1.0/110))))))
		ch = 1 - h2*0.5*(1-h2*(1.0/12)*(1-h2*(1.0/30)*(1-h2*(1.0/56)*(1-h2*(1.0/90)*(1-h2*(1.0/132))))))
		return sh, ch
	}
	return math.Sincos(θ / 2)
}

// PropagateNoisy writes f(x, dt) + G(x, dt)·ξ (G from NoiseFactor, ξ of
// length NoiseDim) without forming G and with one sine/cosine of the yaw:
// the mid-interval heading comes from the angle-addition formulas.
func (m *CTRV) PropagateNoisy(dst, x []float64, dt float64, ξ []float64) {
	v, yaw, w := x[2], x[3], x[4]
	θ := w * dt
	s, c := turnSC(θ)
	sy, cy := math.Sincos(yaw)
	sh, ch := halfTurn(θ)
	smid, cmid := sy*ch+cy*sh, cy*ch-sy*sh
	t := math.Abs(dt)
	rt := math.Sqrt(t)
	a := m.sa * cwna11 * t * rt * ξ[0]
	vt := v * dt
	dst[0] = x[0] + vt*(cy*s-sy*c) + a*cmid
	dst[1] = x[1] + vt*(sy*s+cy*c) + a*smid
	dst[2] = v + m.sa*rt*(cwna21*ξ[0]+cwna22*ξ[1])
	dst[3] = WrapAngle(yaw + θ + m.sw*cwna11*t*rt*ξ[2])
	dst[4] = w + m.sw*rt*(cwna21*ξ[2]+cwna22*ξ[3])
}

// ---------------------------------------------------------------- Ego

// Ego is the planar platform model, state [px, py, v, yaw, yawrate]: the
// vehicle carrying the sensors, driven by its own speed v and yaw rate (a
// unicycle). Its kinematics and noise are those of CTRV; it is a separate
// type so that configuration and odometry (z = [v, yawrate] reading x[2] and
// x[4]) name what they mean. GNSS and Odometry expect this layout.
type Ego struct {
	CTRV
}

// NewEgo returns the platform model (arguments as for NewCTRV).
func NewEgo(accelSD, yawAccelSD float64) (*Ego, error) {
	c, err := NewCTRV(accelSD, yawAccelSD)
	if err != nil {
		return nil, err
	}
	return &Ego{CTRV: *c}, nil
}
