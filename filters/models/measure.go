package models

import (
	"fmt"
	"math"
)

// Kinematics is the part of a target motion model that a measurement model
// needs: every filters.MotionModel satisfies it.
type Kinematics interface {
	Dim() int
	// PosVel writes [px, py, vx, vy] and, when J is not nil, ∂pv/∂x (4×n).
	PosVel(pv, x, J []float64)
}

// TargetSensor is a measurement model of a target seen from a sensor on the
// platform. Beyond filters.MeasurementModel it carries the geometry the
// engine needs: the platform pose (set before each update), the visibility
// test that decides whether a missed detection counts, the inverse
// measurement for track birth, and the configured noise.
type TargetSensor interface {
	Dim() int
	Predict(z, x []float64)
	Jacobian(H, x []float64)
	Residual(dst, a, b []float64)

	SetPlatform(p Platform) error
	Visible(px, py float64) bool
	// Birth writes the site position (2) and its covariance (2×2) implied by
	// detection z with noise square root Rs (m×m lower triangular).
	Birth(pos, cov, z, Rs []float64) error
	// NoiseSqrt writes the configured measurement noise square root (m×m
	// lower triangular) for a target with state x.
	NoiseSqrt(Rs, x []float64) error
	// PlatformJacobian writes ∂h/∂(platform x, y, yaw) at target state x
	// (m×3), for carrying the ego pose uncertainty into the measurement
	// noise: R + Hp·P_pose·Hpᵀ.
	PlatformJacobian(Hp, x []float64)
}

// positioner is an optional fast path for models whose position is cheaper
// than the full PosVel (CTRV's velocity costs a sine and a cosine, which a
// particle filter would pay per particle for nothing).
type positioner interface {
	Position(x []float64) (px, py float64)
}

// target is what all target measurement models share.
type target struct {
	frame
	k   Kinematics
	pos positioner // k when it has the fast path, else nil
	n   int
	m   int
	pv  [4]float64
	J   []float64   // 4×n, ∂pv/∂x
	D   [12]float64 // m×4, ∂z/∂pv
	sd  [3]float64  // configured noise s.d., zero until SetNoise
}

func newTarget(k Kinematics, mount Mount, m int) (target, error) {
	if k == nil {
		return target{}, fmt.Errorf("%w: nil motion model", ErrParam)
	}
	n := k.Dim()
	if n < 4 {
		return target{}, fmt.Errorf("%w: motion model dimension %d < 4", ErrParam, n)
	}
	f, err := newFrame(mount)
	if err != nil {
		return target{}, err
	}
	pos, _ := k.(positioner)
	return target{frame: f, k: k, pos: pos, n: n, m: m, J: make([]float64, 4*n)}, nil
}

// Dim is the measurement dimension.
func (t *target) Dim() int { return t.m }

// SetNoise sets the measurement noise standard deviations, one per
// component (the configuration's noise_sd).
func (t *target) SetNoise(sd []float64) error {
	if len(sd) != t.m {
		return fmt.Errorf("%w: noise_sd has %d values, need %d", ErrParam, len(sd), t.m)
	}
	for i, v := range sd {
		if !(v > 0) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: noise_sd[%d] = %v, want finite > 0", ErrParam, i, v)
		}
	}
	copy(t.sd[:], sd)
	return nil
}

// NoiseSqrt writes diag(noise_sd); x is unused.
func (t *target) NoiseSqrt(Rs, x []float64) error {
	if t.sd[0] == 0 {
		return fmt.Errorf("%w: noise not configured (SetNoise)", ErrParam)
	}
	return DiagSqrt(Rs, t.sd[:t.m])
}

// rel returns the target's offset from the sensor (site axes), range, and
// relative velocity; J is filled when jac is set.
func (t *target) rel(x []float64, jac bool) (dx, dy, r, ux, uy float64) {
	if jac {
		t.k.PosVel(t.pv[:], x, t.J)
	} else {
		t.k.PosVel(t.pv[:], x, nil)
	}
	dx, dy = t.pv[0]-t.sx, t.pv[1]-t.sy
	return dx, dy, math.Sqrt(dx*dx + dy*dy), t.pv[2] - t.svx, t.pv[3] - t.svy
}

// relPos returns the target's offset from the sensor (site axes) and range.
func (t *target) relPos(x []float64) (dx, dy, r float64) {
	var px, py float64
	if t.pos != nil {
		px, py = t.pos.Position(x)
	} else {
		t.k.PosVel(t.pv[:], x, nil)
		px, py = t.pv[0], t.pv[1]
	}
	dx, dy = px-t.sx, py-t.sy
	// Plain √ rather than Hypot: site distances are nowhere near overflow.
	return dx, dy, math.Sqrt(dx*dx + dy*dy)
}

// poseDerivs returns the derivatives of the offset d = p − s with respect
// to the platform yaw ψ, ∂d/∂ψ = (l_y, −l_x), and of the sensor-frame
// position (x_s, y_s) = Rφᵀ·d with respect to ψ (the sensor yaw φ turns with
// ψ): ∂(x_s, y_s)/∂ψ = (y_s, −x_s) + Rφᵀ·∂d/∂ψ. ∂d/∂(X, Y) = −I.
func (t *target) poseDerivs(dx, dy float64) (ddx, ddy, dxs, dys float64) {
	ddx, ddy = t.ly, -t.lx
	xs, ys := t.cos*dx+t.sin*dy, -t.sin*dx+t.cos*dy
	dxs = ys + t.cos*ddx + t.sin*ddy
	dys = -xs - t.sin*ddx + t.cos*ddy
	return ddx, ddy, dxs, dys
}

func (t *target) checkBirth(pos, cov, z, Rs []float64) error {
	if len(pos) < 2 || len(cov) < 4 {
		return fmt.Errorf("%w: birth needs pos[2] and cov[4]", ErrParam)
	}
	if len(z) != t.m || len(Rs) != t.m*t.m {
		return fmt.Errorf("%w: birth z has %d values, Rs %d; need %d and %d", ErrParam, len(z), len(Rs), t.m, t.m*t.m)
	}
	if !finite(z...) || !finite(Rs...) {
		return fmt.Errorf("%w: birth z or Rs not finite", ErrParam)
	}
	return nil
}

// polarToCart returns (xs, ys) for range r and bearing b, and the covariance
// of (xs, ys) from the covariance C of (r, b) by first-order propagation
// through J = ∂(x, y)/∂(r, b).
func polarToCart(r, b, c00, c01, c11 float64) (xs, ys, s00, s01, s11 float64) {
	sb, cb := math.Sincos(b)
	j00, j01 := cb, -r*sb
	j10, j11 := sb, r*cb
	s00, s01, s11 = sandwich(j00, j01, j10, j11, c00, c01, c11)
	return r * cb, r * sb, s00, s01, s11
}

// sandwich returns J·C·Jᵀ for 2×2 J and symmetric C.
func sandwich(j00, j01, j10, j11, c00, c01, c11 float64) (s00, s01, s11 float64) {
	a00, a01 := j00*c00+j01*c01, j00*c01+j01*c11
	a10, a11 := j10*c00+j11*c01, j10*c01+j11*c11
	return a00*j00 + a01*j01, a00*j10 + a01*j11, a10*j10 + a11*j11
}

// ---------------------------------------------------------------- position_xy

// PositionXY measures the target position in the sensor frame, z = [x, y].
type PositionXY struct{ target }

// NewPositionXY returns a position_xy model for targets moving with k.
func NewPositionXY(k Kinematics, mount Mount) (*PositionXY, error) {
	t, err := newTarget(k, mount, 2)
	if err != nil {
		return nil, err
	}
	return &PositionXY{t}, nil
}

// Predict writes the sensor-frame position of the target.
func (p *PositionXY) Predict(z, x []float64) {
	dx, dy, _ := p.relPos(x)
	z[0] = p.cos*dx + p.sin*dy
	z[1] = -p.sin*dx + p.cos*dy
}

// Jacobian writes H = Rφᵀ·∂p/∂x.
func (p *PositionXY) Jacobian(H, x []float64) {
	p.rel(x, true)
	D := p.D[:8]
	zero(D)
	D[0], D[1] = p.cos, p.sin
	D[4], D[5] = -p.sin, p.cos
	chain(H, D, 2, p.J, p.n)
}

// PlatformJacobian writes ∂z/∂(X, Y, ψ) of the platform pose (2×3).
func (p *PositionXY) PlatformJacobian(Hp, x []float64) {
	dx, dy, _ := p.relPos(x)
	_, _, dxs, dys := p.poseDerivs(dx, dy)
	Hp[0], Hp[1], Hp[2] = -p.cos, -p.sin, dxs
	Hp[3], Hp[4], Hp[5] = p.sin, -p.cos, dys
}

// Residual is a − b.
func (*PositionXY) Residual(dst, a, b []float64) {
	dst[0] = a[0] - b[0]
	dst[1] = a[1] - b[1]
}

// Birth maps the detection to the site frame.
func (p *PositionXY) Birth(pos, cov, z, Rs []float64) error {
	if err := p.checkBirth(pos, cov, z, Rs); err != nil {
		return err
	}
	var c [4]float64
	covFromSqrt(c[:], Rs, 2, 2)
	pos[0], pos[1] = p.ToSite(z[0], z[1])
	p.rotCov(cov, c[0], c[1], c[3])
	return nil
}

// ---------------------------------------------------------------- range_bearing

// RangeBearing measures z = [range, bearing] in the sensor frame; the bearing
// residual is wrapped to (−π, π].
type RangeBearing struct{ target }

// NewRangeBearing returns a range_bearing model for targets moving with k.
func NewRangeBearing(k Kinematics, mount Mount) (*RangeBearing, error) {
	t, err := newTarget(k, mount, 2)
	if err != nil {
		return nil, err
	}
	return &RangeBearing{t}, nil
}

// Predict writes range and bearing of the target.
func (p *RangeBearing) Predict(z, x []float64) {
	dx, dy, r := p.relPos(x)
	z[0] = r
	z[1] = math.Atan2(-p.sin*dx+p.cos*dy, p.cos*dx+p.sin*dy)
}

// Jacobian writes ∂[r, b]/∂x; rows are zero when the target sits on the
// sensor (r < 1 µm), where the bearing is undefined.
func (p *RangeBearing) Jacobian(H, x []float64) {
	dx, dy, r, _, _ := p.rel(x, true)
	D := p.D[:8]
	zero(D)
	if r > minRange {
		// Range and bearing derivatives are rotation invariant in the
		// position; the bearing is the site-frame angle minus the sensor yaw.
		D[0], D[1] = dx/r, dy/r
		r2 := r * r
		D[4], D[5] = -dy/r2, dx/r2
	}
	chain(H, D, 2, p.J, p.n)
}

// PlatformJacobian writes ∂[r, b]/∂(X, Y, ψ) of the platform pose (2×3);
// zero when the target sits on the sensor.
func (p *RangeBearing) PlatformJacobian(Hp, x []float64) {
	dx, dy, r := p.relPos(x)
	rangeBearingPose(Hp, &p.target, dx, dy, r)
}

// rangeBearingPose writes the range and bearing rows of the platform-pose
// Jacobian: ∂r/∂d = d̂, ∂b/∂d = (−d_y, d_x)/r², and the bearing also loses
// the sensor's own turn, ∂b/∂φ = −1.
func rangeBearingPose(Hp []float64, t *target, dx, dy, r float64) {
	zero(Hp[:6])
	if !(r > minRange) {
		return
	}
	ddx, ddy, _, _ := t.poseDerivs(dx, dy)
	ex, ey := dx/r, dy/r
	bx, by := -dy/(r*r), dx/(r*r)
	Hp[0], Hp[1], Hp[2] = -ex, -ey, ex*ddx+ey*ddy
	Hp[3], Hp[4], Hp[5] = -bx, -by, bx*ddx+by*ddy-1
}

// Residual is a − b with the bearing wrapped.
func (*RangeBearing) Residual(dst, a, b []float64) {
	dst[0] = a[0] - b[0]
	dst[1] = WrapAngle(a[1] - b[1])
}

// Birth converts (r, b) to the site frame with first-order covariance.
func (p *RangeBearing) Birth(pos, cov, z, Rs []float64) error {
	if err := p.checkBirth(pos, cov, z, Rs); err != nil {
		return err
	}
	return p.birthPolar(pos, cov, z, Rs, 2)
}

func (t *target) birthPolar(pos, cov, z, Rs []float64, m int) error {
	if !(z[0] > 0) {
		return fmt.Errorf("%w: birth range %v, want > 0", ErrParam, z[0])
	}
	var c [4]float64
	covFromSqrt(c[:], Rs, m, 2)
	xs, ys, s00, s01, s11 := polarToCart(z[0], z[1], c[0], c[1], c[3])
	pos[0], pos[1] = t.ToSite(xs, ys)
	t.rotCov(cov, s00, s01, s11)
	return nil
}

// ---------------------------------------------------------------- range_bearing_rate

// RangeBearingRate measures z = [range, bearing, range rate]. The range rate
// is d(range)/dt of the target relative to the sensor, which moves with the
// platform: v_sensor = v_platform + ω × (lever arm of the mount).
type RangeBearingRate struct{ target }

// NewRangeBearingRate returns a range_bearing_rate model for targets moving
// with k.
func NewRangeBearingRate(k Kinematics, mount Mount) (*RangeBearingRate, error) {
	t, err := newTarget(k, mount, 3)
	if err != nil {
		return nil, err
	}
	return &RangeBearingRate{t}, nil
}

// Predict writes range, bearing and range rate.
func (p *RangeBearingRate) Predict(z, x []float64) {
	dx, dy, r, ux, uy := p.rel(x, false)
	z[0] = r
	z[1] = math.Atan2(-p.sin*dx+p.cos*dy, p.cos*dx+p.sin*dy)
	z[2] = 0
	if r > minRange {
		z[2] = (dx*ux + dy*uy) / r
	}
}

// Jacobian writes ∂[r, b, ṙ]/∂x. With d the offset, u the relative velocity
// and d̂ = d/r: ∂ṙ/∂p = (u − ṙ·d̂)/r and ∂ṙ/∂v = d̂.
func (p *RangeBearingRate) Jacobian(H, x []float64) {
	dx, dy, r, ux, uy := p.rel(x, true)
	D := p.D[:12]
	zero(D)
	if r > minRange {
		ex, ey := dx/r, dy/r
		rr := ex*ux + ey*uy
		D[0], D[1] = ex, ey
		D[4], D[5] = -ey/r, ex/r
		D[8], D[9] = (ux-rr*ex)/r, (uy-rr*ey)/r
		D[10], D[11] = ex, ey
	}
	chain(H, D, 3, p.J, p.n)
}

// PlatformJacobian writes ∂[r, b, ṙ]/∂(X, Y, ψ) of the platform pose
// (3×3). The platform velocity and yaw rate are held fixed; turning the
// platform swings the lever arm, so the sensor velocity changes with ψ:
// ∂v_s/∂ψ = −ω·(l_x, l_y).
func (p *RangeBearingRate) PlatformJacobian(Hp, x []float64) {
	dx, dy, r, ux, uy := p.rel(x, false)
	rangeBearingPose(Hp, &p.target, dx, dy, r)
	Hp[6], Hp[7], Hp[8] = 0, 0, 0
	if !(r > minRange) {
		return
	}
	ddx, ddy, _, _ := p.poseDerivs(dx, dy)
	ex, ey := dx/r, dy/r
	rr := ex*ux + ey*uy
	gx, gy := (ux-rr*ex)/r, (uy-rr*ey)/r // ∂ṙ/∂d
	w := p.plat.YawRate
	Hp[6], Hp[7] = -gx, -gy
	Hp[8] = gx*ddx + gy*ddy + ex*w*p.lx + ey*w*p.ly
}

// Residual is a − b with the bearing wrapped.
func (*RangeBearingRate) Residual(dst, a, b []float64) {
	dst[0] = a[0] - b[0]
	dst[1] = WrapAngle(a[1] - b[1])
	dst[2] = a[2] - b[2]
}

// Birth converts (r, b) to the site frame; the range rate is not used.
func (p *RangeBearingRate) Birth(pos, cov, z, Rs []float64) error {
	if err := p.checkBirth(pos, cov, z, Rs); err != nil {
		return err
	}
	return p.birthPolar(pos, cov, z, Rs, 3)
}

// ---------------------------------------------------------------- pinhole

// Pinhole is a camera detector: z = [u, r] with u the image column of the
// object centre (pixels) and r the detector's range estimate (m).
//
// Sign convention: the image column grows to the right, so with the sensor
// frame x forward and y left, u = cx − fx·y_s/x_s. The range is the planar
// distance √(x_s² + y_s²). Its s.d. grows with range:
// σ_r(r) = √(σ_r0² + (range_sd_frac·r)²), independent error sources added in
// quadrature (common practice).
//
// Targets must be in front of the camera; Predict and Jacobian clamp the
// depth x_s to at least 1 cm so a track behind the camera yields a large,
// finite innovation instead of Inf. Use Visible to decide whether to gate.
type Pinhole struct {
	target
	fx, cx, rangeFrac float64
}

const minDepth = 0.01 // m

// NewPinhole returns a pinhole model with focal length fx and principal
// point column cx (pixels) for targets moving with k.
func NewPinhole(k Kinematics, mount Mount, fx, cx float64) (*Pinhole, error) {
	if !(fx > 0) || math.IsInf(fx, 0) || !finite(cx) {
		return nil, fmt.Errorf("%w: pinhole fx = %v, cx = %v (need fx > 0, finite)", ErrParam, fx, cx)
	}
	t, err := newTarget(k, mount, 2)
	if err != nil {
		return nil, err
	}
	return &Pinhole{target: t, fx: fx, cx: cx}, nil
}

// SetRangeSDFrac sets range_sd_frac, the part of the range s.d. that grows
// in proportion to range.
func (p *Pinhole) SetRangeSDFrac(frac float64) error {
	if err := checkSD("range_sd_frac", frac); err != nil {
		return err
	}
	p.rangeFrac = frac
	return nil
}

// Predict writes [u, r].
func (p *Pinhole) Predict(z, x []float64) {
	dx, dy, r := p.relPos(x)
	xs := math.Max(p.cos*dx+p.sin*dy, minDepth)
	ys := -p.sin*dx + p.cos*dy
	z[0] = p.cx - p.fx*ys/xs
	z[1] = r
}

// Jacobian writes ∂[u, r]/∂x.
func (p *Pinhole) Jacobian(H, x []float64) {
	dx, dy, r, _, _ := p.rel(x, true)
	xsRaw := p.cos*dx + p.sin*dy
	xs := math.Max(xsRaw, minDepth)
	ys := -p.sin*dx + p.cos*dy
	D := p.D[:8]
	zero(D)
	// du/dxs is zero where the depth is clamped (u does not move with xs).
	duxs := 0.0
	if xsRaw > minDepth {
		duxs = p.fx * ys / (xs * xs)
	}
	duys := -p.fx / xs
	// ∂(xs, ys)/∂(px, py) = [[cos, sin], [−sin, cos]].
	D[0] = duxs*p.cos - duys*p.sin
	D[1] = duxs*p.sin + duys*p.cos
	if r > minRange {
		D[4], D[5] = dx/r, dy/r
	}
	chain(H, D, 2, p.J, p.n)
}

// PlatformJacobian writes ∂[u, r]/∂(X, Y, ψ) of the platform pose (2×3).
func (p *Pinhole) PlatformJacobian(Hp, x []float64) {
	dx, dy, r := p.relPos(x)
	xsRaw := p.cos*dx + p.sin*dy
	xs := math.Max(xsRaw, minDepth)
	ys := -p.sin*dx + p.cos*dy
	ddx, ddy, dxs, dys := p.poseDerivs(dx, dy)
	duxs := 0.0
	if xsRaw > minDepth {
		duxs = p.fx * ys / (xs * xs)
	}
	duys := -p.fx / xs
	// ∂(x_s, y_s)/∂(X, Y) = −Rφᵀ.
	Hp[0] = -(duxs*p.cos - duys*p.sin)
	Hp[1] = -(duxs*p.sin + duys*p.cos)
	Hp[2] = duxs*dxs + duys*dys
	Hp[3], Hp[4], Hp[5] = 0, 0, 0
	if r > minRange {
		ex, ey := dx/r, dy/r
		Hp[3], Hp[4], Hp[5] = -ex, -ey, ex*ddx+ey*ddy
	}
}

// Residual is a − b (pixels and metres, no wrapping).
func (*Pinhole) Residual(dst, a, b []float64) {
	dst[0] = a[0] - b[0]
	dst[1] = a[1] - b[1]
}

// NoiseSqrtAtRange writes Rs = diag(σ_u, σ_r(rng)) from noise_sd = [σ_u, σ_r0]
// and range_sd_frac.
func (p *Pinhole) NoiseSqrtAtRange(Rs []float64, rng float64) error {
	if p.sd[0] == 0 {
		return fmt.Errorf("%w: noise not configured (SetNoise)", ErrParam)
	}
	if !finite(rng) || rng < 0 {
		return fmt.Errorf("%w: range %v", ErrParam, rng)
	}
	sd := [2]float64{p.sd[0], math.Hypot(p.sd[1], p.rangeFrac*rng)}
	return DiagSqrt(Rs, sd[:])
}

// NoiseSqrt writes the noise square root at the predicted range of x.
func (p *Pinhole) NoiseSqrt(Rs, x []float64) error {
	_, _, r := p.relPos(x)
	return p.NoiseSqrtAtRange(Rs, r)
}

// Birth converts (u, r) to the site frame: bearing b = atan((cx − u)/fx),
// then (r, b) as for range_bearing with ∂b/∂u = −1/(fx·(1 + t²)), t = (cx−u)/fx.
func (p *Pinhole) Birth(pos, cov, z, Rs []float64) error {
	if err := p.checkBirth(pos, cov, z, Rs); err != nil {
		return err
	}
	if !(z[1] > 0) {
		return fmt.Errorf("%w: birth range %v, want > 0", ErrParam, z[1])
	}
	var c [4]float64
	covFromSqrt(c[:], Rs, 2, 2)
	t := (p.cx - z[0]) / p.fx
	b := math.Atan(t)
	dbdu := -1 / (p.fx * (1 + t*t))
	// Covariance of (r, b) from that of (u, r): J = [[0, 1], [dbdu, 0]].
	c00, c01, c11 := sandwich(0, 1, dbdu, 0, c[0], c[1], c[3])
	xs, ys, s00, s01, s11 := polarToCart(z[1], b, c00, c01, c11)
	pos[0], pos[1] = p.ToSite(xs, ys)
	p.rotCov(cov, s00, s01, s11)
	return nil
}

// Visible additionally requires the target to be in front of the camera.
func (p *Pinhole) Visible(px, py float64) bool {
	xs, _ := p.ToSensor(px, py)
	return xs > minDepth && p.frame.Visible(px, py)
}
