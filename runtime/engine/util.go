package engine

import (
	"math"

	"github.com/godwit-fusion/godwit/filters"
)

// Sensor kinds the engine knows (DESIGN.md, "Measurement models").
const (
	kindPositionXY = iota
	kindRangeBearing
	kindRangeBearingRate
	kindPinhole
	kindGNSS
	kindOdometry
)

var kindNames = [...]string{"position_xy", "range_bearing", "range_bearing_rate", "pinhole", "gnss", "odometry"}
var kindDims = [...]int{2, 2, 3, 2, 2, 2}

func kindByName(s string) (int, bool) {
	for i, n := range kindNames {
		if n == s {
			return i, true
		}
	}
	return 0, false
}

// Pose is the platform's planar state in the site frame at one instant:
// position (m), heading (rad, counter-clockwise from east), velocity (m/s)
// and yaw rate (rad/s).
type Pose struct {
	X, Y, Yaw, VX, VY, YawRate float64
}

// wrapAngle maps a to (−π, π].
func wrapAngle(a float64) float64 {
	a = math.Mod(a+math.Pi, 2*math.Pi) // (−2π, 2π)
	if a <= 0 {
		a += 2 * math.Pi // (0, 2π]
	}
	return a - math.Pi
}

// sensorGeom is a tracking sensor seen from the site frame: the measurement
// function of its kind (filters.MeasurementModel, sensor frame x forward,
// y left), its field of view and range, and the inverse measurement used
// for track birth and for the coarse pre-gate. SetPlatform must be called
// with the platform pose at the scan time before anything else.
type sensorGeom struct {
	kind     int
	motion   filters.MotionModel
	n        int
	mx, my   float64 // mount on the platform
	myaw     float64
	maxRange float64 // 0: unlimited
	halfFOV  float64 // rad; ≥ π: all round
	fx, cx   float64 // pinhole
	// sensor pose in the site frame for the current scan
	sx, sy, syaw, svx, svy, c, s float64
	pv                           [4]float64
	jpv                          []float64 // 4×n, ∂[px,py,vx,vy]/∂x
}

func newSensorGeom(kind int, motion filters.MotionModel, mount Pose, maxRange, fovDeg, fx, cx float64) *sensorGeom {
	g := &sensorGeom{kind: kind, motion: motion, n: motion.Dim(), mx: mount.X, my: mount.Y, myaw: mount.Yaw,
		maxRange: maxRange, halfFOV: math.Pi, fx: fx, cx: cx}
	if fovDeg > 0 && fovDeg < 360 {
		g.halfFOV = fovDeg * math.Pi / 360
	}
	g.jpv = make([]float64, 4*g.n)
	return g
}

// SetPlatform places the sensor for the current scan: mount rotated by the
// platform heading; the sensor velocity adds ω × lever arm to the platform
// velocity (rigid body).
func (g *sensorGeom) SetPlatform(p Pose) {
	cy, sy := math.Cos(p.Yaw), math.Sin(p.Yaw)
	rx, ry := cy*g.mx-sy*g.my, sy*g.mx+cy*g.my
	g.sx, g.sy = p.X+rx, p.Y+ry
	g.syaw = p.Yaw + g.myaw
	g.svx, g.svy = p.VX-p.YawRate*ry, p.VY+p.YawRate*rx
	g.c, g.s = math.Cos(g.syaw), math.Sin(g.syaw)
}

func (g *sensorGeom) Dim() int { return kindDims[g.kind] }

// toSensor gives the target position in the sensor frame.
func (g *sensorGeom) toSensor(px, py float64) (xs, ys float64) {
	dx, dy := px-g.sx, py-g.sy
	return g.c*dx + g.s*dy, -g.s*dx + g.c*dy
}

func (g *sensorGeom) Predict(z, x []float64) {
	g.motion.PosVel(g.pv[:], x, nil)
	g.predictPV(z, g.pv)
}

func (g *sensorGeom) predictPV(z []float64, pv [4]float64) {
	xs, ys := g.toSensor(pv[0], pv[1])
	switch g.kind {
	case kindPositionXY:
		z[0], z[1] = xs, ys
	case kindRangeBearing, kindRangeBearingRate:
		r := math.Hypot(xs, ys)
		z[0], z[1] = r, math.Atan2(ys, xs)
		if g.kind == kindRangeBearingRate {
			dx, dy := pv[0]-g.sx, pv[1]-g.sy
			dvx, dvy := pv[2]-g.svx, pv[3]-g.svy
			if r > 0 {
				z[2] = (dx*dvx + dy*dvy) / r
			} else {
				z[2] = 0
			}
		}
	case kindPinhole:
		// u = cx − fx·y/x: an object to the left (y > 0) lies left of the
		// principal point in the image (common practice, image columns grow
		// to the right).
		if xs > 1e-6 {
			z[0] = g.cx - g.fx*ys/xs
		} else {
			z[0] = g.cx - g.fx*ys/1e-6
		}
		z[1] = math.Hypot(xs, ys)
	}
}

// Jacobian chains ∂z/∂[px,py,vx,vy] with the motion model's PosVel Jacobian.
func (g *sensorGeom) Jacobian(H, x []float64) {
	g.motion.PosVel(g.pv[:], x, g.jpv)
	pv := g.pv
	m, n := g.Dim(), g.n
	var dz [3][4]float64 // ∂z/∂(px,py,vx,vy)
	dx, dy := pv[0]-g.sx, pv[1]-g.sy
	xs, ys := g.toSensor(pv[0], pv[1])
	switch g.kind {
	case kindPositionXY:
		dz[0] = [4]float64{g.c, g.s, 0, 0}
		dz[1] = [4]float64{-g.s, g.c, 0, 0}
	case kindRangeBearing, kindRangeBearingRate:
		r2 := dx*dx + dy*dy
		r := math.Sqrt(r2)
		if r < 1e-9 {
			r, r2 = 1e-9, 1e-18
		}
		dz[0] = [4]float64{dx / r, dy / r, 0, 0}
		dz[1] = [4]float64{-dy / r2, dx / r2, 0, 0}
		if g.kind == kindRangeBearingRate {
			dvx, dvy := pv[2]-g.svx, pv[3]-g.svy
			rr := (dx*dvx + dy*dvy) / r
			dz[2] = [4]float64{(dvx - rr*dx/r) / r, (dvy - rr*dy/r) / r, dx / r, dy / r}
		}
	case kindPinhole:
		if xs < 1e-6 {
			xs = 1e-6
		}
		// u = cx − fx·ys/xs; ∂xs/∂(dx,dy) = (c, s), ∂ys/∂(dx,dy) = (−s, c).
		du_dxs, du_dys := g.fx*ys/(xs*xs), -g.fx/xs
		dz[0] = [4]float64{du_dxs*g.c - du_dys*g.s, du_dxs*g.s + du_dys*g.c, 0, 0}
		r := math.Hypot(dx, dy)
		if r < 1e-9 {
			r = 1e-9
		}
		dz[1] = [4]float64{dx / r, dy / r, 0, 0}
	}
	for i := 0; i < m; i++ {
		for j := 0; j < n; j++ {
			var s float64
			for k := 0; k < 4; k++ {
				s += dz[i][k] * g.jpv[k*n+j]
			}
			H[i*n+j] = s
		}
	}
}

func (g *sensorGeom) Residual(dst, a, b []float64) {
	m := g.Dim()
	for i := 0; i < m; i++ {
		dst[i] = a[i] - b[i]
	}
	if g.kind == kindRangeBearing || g.kind == kindRangeBearingRate {
		dst[1] = wrapAngle(dst[1])
	}
}

// Visible reports whether a site point lies inside the sensor's field of
// view and range, i.e. whether a miss there is information.
func (g *sensorGeom) Visible(px, py float64) bool {
	xs, ys := g.toSensor(px, py)
	r := math.Hypot(xs, ys)
	if g.maxRange > 0 && r > g.maxRange {
		return false
	}
	if g.kind == kindPinhole && xs <= 0 {
		return false
	}
	if g.halfFOV >= math.Pi {
		return true
	}
	return math.Abs(math.Atan2(ys, xs)) <= g.halfFOV
}

// Inverse maps a detection z with covariance R (m×m row-major) to a site
// position and its 2×2 covariance by first-order propagation. It reports
// false when z cannot be inverted (e.g. a non-positive range).
func (g *sensorGeom) Inverse(z, R []float64, pos *[2]float64, cov *[4]float64) bool {
	m := g.Dim()
	var xs, ys float64
	var J [2][2]float64 // ∂(xs,ys)/∂(z0,z1)
	switch g.kind {
	case kindPositionXY:
		xs, ys = z[0], z[1]
		J = [2][2]float64{{1, 0}, {0, 1}}
	case kindRangeBearing, kindRangeBearingRate:
		r, b := z[0], z[1]
		if !(r > 0) {
			return false
		}
		cb, sb := math.Cos(b), math.Sin(b)
		xs, ys = r*cb, r*sb
		J = [2][2]float64{{cb, -r * sb}, {sb, r * cb}}
	case kindPinhole:
		u, r := z[0], z[1]
		if !(r > 0) || !(g.fx > 0) {
			return false
		}
		t := (g.cx - u) / g.fx // tan(bearing)
		b := math.Atan(t)
		cb, sb := math.Cos(b), math.Sin(b)
		xs, ys = r*cb, r*sb
		db_du := -1 / g.fx / (1 + t*t)
		J = [2][2]float64{{-r * sb * db_du, cb}, {r * cb * db_du, sb}}
	default:
		return false
	}
	pos[0] = g.sx + g.c*xs - g.s*ys
	pos[1] = g.sy + g.s*xs + g.c*ys
	// C = (Rot·J)·R₂·(Rot·J)ᵀ with R₂ the leading 2×2 block of R.
	var A [2][2]float64
	for i := 0; i < 2; i++ {
		r0 := [2]float64{g.c, -g.s}
		if i == 1 {
			r0 = [2]float64{g.s, g.c}
		}
		A[i][0] = r0[0]*J[0][0] + r0[1]*J[1][0]
		A[i][1] = r0[0]*J[0][1] + r0[1]*J[1][1]
	}
	var AR [2][2]float64
	for i := 0; i < 2; i++ {
		for j := 0; j < 2; j++ {
			AR[i][j] = A[i][0]*R[0*m+j] + A[i][1]*R[1*m+j]
		}
	}
	for i := 0; i < 2; i++ {
		for j := 0; j < 2; j++ {
			cov[i*2+j] = AR[i][0]*A[j][0] + AR[i][1]*A[j][1]
		}
	}
	return true
}

// maxEig2 is the larger eigenvalue of a symmetric 2×2 matrix [a b; b d].
func maxEig2(a, b, d float64) float64 {
	h := (a + d) / 2
	return h + math.Sqrt(math.Max(0, (a-d)*(a-d)/4+b*b))
}

// chol factors the m×m symmetric matrix A (row-major) into lower-triangular
// L with A = L·Lᵀ. It reports false when A is not positive definite.
func chol(L, A []float64, m int) bool {
	for i := range L[:m*m] {
		L[i] = 0
	}
	for j := 0; j < m; j++ {
		s := A[j*m+j]
		for k := 0; k < j; k++ {
			s -= L[j*m+k] * L[j*m+k]
		}
		if !(s > 0) || math.IsInf(s, 0) {
			return false
		}
		d := math.Sqrt(s)
		L[j*m+j] = d
		for i := j + 1; i < m; i++ {
			s := A[i*m+j]
			for k := 0; k < j; k++ {
				s -= L[i*m+k] * L[j*m+k]
			}
			L[i*m+j] = s / d
		}
	}
	return true
}
