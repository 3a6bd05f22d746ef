package models

import (
	"fmt"
	"math"
)

// Mount is where a sensor sits on the platform: position (m) in the
// platform frame (x forward, y left) and yaw (rad, CCW from the platform's x).
type Mount struct {
	X, Y, Yaw float64
}

// Platform is the pose and motion of the platform in the site frame:
// position (m), yaw (rad), velocity of the platform's reference point (m/s,
// site axes) and yaw rate (rad/s). A fixed platform has zero velocity.
type Platform struct {
	X, Y, Yaw       float64
	VX, VY, YawRate float64
}

// Coverage bounds what a sensor can see: MaxRange (m) and FOV, the full
// horizontal field of view (rad) centred on the sensor's x axis. Zero means
// unlimited for either.
type Coverage struct {
	MaxRange, FOV float64
}

func finite(vs ...float64) bool {
	for _, v := range vs {
		if math.IsNaN(v) || math.IsInf(v, 0) {
			return false
		}
	}
	return true
}

// frame is the sensor geometry shared by the target measurement models: the
// mount, the platform pose set by the engine before each update, and the
// sensor pose and velocity in the site frame derived from both.
type frame struct {
	mount Mount
	plat  Platform
	cov   Coverage

	lx, ly   float64 // lever arm of the mount in site axes
	sx, sy   float64 // sensor position, site frame
	sin, cos float64 // of the sensor yaw in the site frame
	svx, svy float64 // sensor velocity, site frame
}

func newFrame(m Mount) (frame, error) {
	if !finite(m.X, m.Y, m.Yaw) {
		return frame{}, fmt.Errorf("%w: mount %+v is not finite", ErrParam, m)
	}
	f := frame{mount: m}
	f.update()
	return f, nil
}

func (f *frame) update() {
	sp, cp := math.Sincos(f.plat.Yaw)
	// Lever arm of the sensor in site axes.
	lx := cp*f.mount.X - sp*f.mount.Y
	ly := sp*f.mount.X + cp*f.mount.Y
	f.lx, f.ly = lx, ly
	f.sx, f.sy = f.plat.X+lx, f.plat.Y+ly
	f.sin, f.cos = math.Sincos(f.plat.Yaw + f.mount.Yaw)
	// Rigid body: v_sensor = v_platform + ω × lever arm.
	f.svx = f.plat.VX - f.plat.YawRate*ly
	f.svy = f.plat.VY + f.plat.YawRate*lx
}

// SetPlatform sets the platform pose used by the next Predict/Jacobian. A
// non-finite pose is refused and the previous one kept.
func (f *frame) SetPlatform(p Platform) error {
	if !finite(p.X, p.Y, p.Yaw, p.VX, p.VY, p.YawRate) {
		return fmt.Errorf("%w: platform pose %+v is not finite", ErrParam, p)
	}
	f.plat = p
	f.update()
	return nil
}

// Platform returns the platform pose in use.
func (f *frame) Platform() Platform { return f.plat }

// Mount returns the sensor mount.
func (f *frame) Mount() Mount { return f.mount }

// SetCoverage sets the range and field of view used by Visible.
func (f *frame) SetCoverage(c Coverage) error {
	if !finite(c.MaxRange, c.FOV) || c.MaxRange < 0 || c.FOV < 0 {
		return fmt.Errorf("%w: coverage %+v", ErrParam, c)
	}
	f.cov = c
	return nil
}

// Coverage returns the sensor coverage.
func (f *frame) Coverage() Coverage { return f.cov }

// SensorPose returns the sensor position (m) and yaw (rad) in the site frame.
func (f *frame) SensorPose() (x, y, yaw float64) {
	return f.sx, f.sy, math.Atan2(f.sin, f.cos)
}

// ToSensor expresses a site point in the sensor frame (x forward, y left).
func (f *frame) ToSensor(px, py float64) (xs, ys float64) {
	dx, dy := px-f.sx, py-f.sy
	return f.cos*dx + f.sin*dy, -f.sin*dx + f.cos*dy
}

// ToSite expresses a sensor-frame point in the site frame.
func (f *frame) ToSite(xs, ys float64) (px, py float64) {
	return f.sx + f.cos*xs - f.sin*ys, f.sy + f.sin*xs + f.cos*ys
}

// Visible reports whether the site point (px, py) lies inside the sensor's
// range and horizontal field of view. Points at the sensor itself are not
// visible (no bearing).
func (f *frame) Visible(px, py float64) bool {
	xs, ys := f.ToSensor(px, py)
	r := math.Hypot(xs, ys)
	if !(r > minRange) {
		return false
	}
	if f.cov.MaxRange > 0 && r > f.cov.MaxRange {
		return false
	}
	if f.cov.FOV > 0 && f.cov.FOV < 2*math.Pi && math.Abs(math.Atan2(ys, xs)) > f.cov.FOV/2 {
		return false
	}
	return true
}

// rotCov writes Rφ·C·Rφᵀ (2×2) for the sensor yaw φ into dst.
func (f *frame) rotCov(dst []float64, c00, c01, c11 float64) {
	c, s := f.cos, f.sin
	// Rφ = [[c, −s], [s, c]]
	a00, a01 := c*c00-s*c01, c*c01-s*c11
	a10, a11 := s*c00+c*c01, s*c01+c*c11
	dst[0] = a00*c - a01*s
	dst[1] = a00*s + a01*c
	dst[2] = dst[1] // symmetric by construction; keep it exactly so
	dst[3] = a10*s + a11*c
}

// minRange is the distance (m) below which bearing and range rate are
// undefined; Jacobian rows then read zero instead of dividing by zero.
const minRange = 1e-6

// chain writes H = D·J, D m×4, J 4×n (chain rule through PosVel).
func chain(H, D []float64, m int, J []float64, n int) {
	for i := 0; i < m; i++ {
		for j := 0; j < n; j++ {
			var s float64
			for k := 0; k < 4; k++ {
				s += D[i*4+k] * J[k*n+j]
			}
			H[i*n+j] = s
		}
	}
}

// DiagSqrt writes the m×m square root of a diagonal noise covariance with
// standard deviations sd into Rs. Each s.d. must be finite and positive.
func DiagSqrt(Rs, sd []float64) error {
	m := len(sd)
	if len(Rs) < m*m {
		return fmt.Errorf("%w: Rs has %d elements, need %d", ErrParam, len(Rs), m*m)
	}
	for i, v := range sd {
		if !(v > 0) || math.IsInf(v, 0) {
			return fmt.Errorf("%w: noise_sd[%d] = %v, want finite > 0", ErrParam, i, v)
		}
	}
	zero(Rs[:m*m])
	for i, v := range sd {
		Rs[i*m+i] = v
	}
	return nil
}

// covFromSqrt writes the top-left k×k block of Rs·Rsᵀ (Rs m×m lower
// triangular) into dst (k×k).
func covFromSqrt(dst, Rs []float64, m, k int) {
	for i := 0; i < k; i++ {
		for j := 0; j <= i; j++ {
			var s float64
			for l := 0; l <= j; l++ {
				s += Rs[i*m+l] * Rs[j*m+l]
			}
			dst[i*k+j], dst[j*k+i] = s, s
		}
	}
}
