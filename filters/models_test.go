package filters_test

import (
	"math"
	"math/rand/v2"
	"testing"

	"github.com/godwit-fusion/godwit/filters"
)

// Test-local models. They are deliberately independent of filters/models so
// that these tests check the filters against equations written here, next
// to the references that use them.

// linearMotion is x' = F·x + w, Q = G·Gᵀ.
type linearMotion struct {
	n    int
	F, G []float64
}

func (l *linearMotion) Dim() int { return l.n }
func (l *linearMotion) Propagate(dst, x []float64, dt float64) {
	matVec(dst, l.F, x, l.n, l.n)
}
func (l *linearMotion) Jacobian(F, x []float64, dt float64)    { copy(F, l.F) }
func (l *linearMotion) NoiseFactor(G, x []float64, dt float64) { copy(G, l.G) }
func (l *linearMotion) Residual(dst, a, b []float64) {
	for i := range dst[:l.n] {
		dst[i] = a[i] - b[i]
	}
}
func (l *linearMotion) Normalize(x []float64) {}
func (l *linearMotion) PosVel(pv, x, J []float64) {
	for i := range pv {
		pv[i] = x[i%l.n]
	}
}

// linearMeas is z = H·x + v.
type linearMeas struct {
	m, n int
	H    []float64
}

func (l *linearMeas) Dim() int                { return l.m }
func (l *linearMeas) Predict(z, x []float64)  { matVec(z, l.H, x, l.m, l.n) }
func (l *linearMeas) Jacobian(H, x []float64) { copy(H, l.H) }
func (l *linearMeas) Residual(dst, a, b []float64) {
	for i := range dst[:l.m] {
		dst[i] = a[i] - b[i]
	}
}

func matVec(dst, A, x []float64, r, c int) {
	for i := 0; i < r; i++ {
		var s float64
		for j := 0; j < c; j++ {
			s += A[i*c+j] * x[j]
		}
		dst[i] = s
	}
}

// cvMotion is the planar constant-velocity model [px,py,vx,vy] with the
// discretised continuous white-noise acceleration of Bar-Shalom, Li &
// Kirubarajan 2001 §6.2.2: per axis Q = q·[[dt³/3, dt²/2],[dt²/2, dt]],
// whose Cholesky factor is √q·[[√(dt³/3), 0],[√(3dt)/2, √(dt)/2]].
type cvMotion struct{ q float64 }

func (cvMotion) Dim() int { return 4 }
func (cvMotion) Propagate(dst, x []float64, dt float64) {
	dst[0] = x[0] + dt*x[2]
	dst[1] = x[1] + dt*x[3]
	dst[2] = x[2]
	dst[3] = x[3]
}
func (cvMotion) Jacobian(F, x []float64, dt float64) {
	for i := range F[:16] {
		F[i] = 0
	}
	F[0], F[5], F[10], F[15] = 1, 1, 1, 1
	F[2], F[7] = dt, dt
}
func (c cvMotion) NoiseFactor(G, x []float64, dt float64) {
	for i := range G[:16] {
		G[i] = 0
	}
	s := math.Sqrt(c.q)
	a := s * math.Sqrt(dt*dt*dt/3)
	b := s * math.Sqrt(3*dt) / 2
	d := s * math.Sqrt(dt) / 2
	// Rows px, py, vx, vy; columns two per axis.
	G[0*4+0] = a
	G[2*4+0] = b
	G[2*4+2] = d
	G[1*4+1] = a
	G[3*4+1] = b
	G[3*4+3] = d
}
func (cvMotion) Residual(dst, a, b []float64) {
	for i := 0; i < 4; i++ {
		dst[i] = a[i] - b[i]
	}
}
func (cvMotion) Normalize(x []float64) {}
func (cvMotion) PosVel(pv, x, J []float64) {
	copy(pv, x[:4])
}

// wrap maps an angle to (−π, π].
func wrap(a float64) float64 {
	a = math.Mod(a, 2*math.Pi)
	if a <= -math.Pi {
		a += 2 * math.Pi
	} else if a > math.Pi {
		a -= 2 * math.Pi
	}
	return a
}

// ctrvMotion is the constant turn rate and velocity model [px,py,v,yaw,ω]
// with exact integration of the turn (straight line when |ω| is tiny) and
// noise from a white linear and yaw acceleration held over dt.
type ctrvMotion struct{ accelSD, yawAccelSD float64 }

func (ctrvMotion) Dim() int { return 5 }
func (ctrvMotion) Propagate(dst, x []float64, dt float64) {
	px, py, v, yaw, w := x[0], x[1], x[2], x[3], x[4]
	if math.Abs(w) < 1e-6 {
		dst[0] = px + v*math.Cos(yaw)*dt
		dst[1] = py + v*math.Sin(yaw)*dt
	} else {
		dst[0] = px + v/w*(math.Sin(yaw+w*dt)-math.Sin(yaw))
		dst[1] = py + v/w*(math.Cos(yaw)-math.Cos(yaw+w*dt))
	}
	dst[2] = v
	dst[3] = wrap(yaw + w*dt)
	dst[4] = w
}
func (c ctrvMotion) Jacobian(F, x []float64, dt float64) {
	for i := range F[:25] {
		F[i] = 0
	}
	for i := 0; i < 5; i++ {
		F[i*5+i] = 1
	}
	v, yaw, w := x[2], x[3], x[4]
	s0, c0 := math.Sincos(yaw)
	if math.Abs(w) < 1e-6 {
		F[0*5+2], F[0*5+3], F[0*5+4] = c0*dt, -v*s0*dt, -v*s0*dt*dt/2
		F[1*5+2], F[1*5+3], F[1*5+4] = s0*dt, v*c0*dt, v*c0*dt*dt/2
	} else {
		s1, c1 := math.Sincos(yaw + w*dt)
		F[0*5+2] = (s1 - s0) / w
		F[0*5+3] = v / w * (c1 - c0)
		F[0*5+4] = -v/(w*w)*(s1-s0) + v/w*dt*c1
		F[1*5+2] = (c0 - c1) / w
		F[1*5+3] = v / w * (s1 - s0)
		F[1*5+4] = -v/(w*w)*(c0-c1) + v/w*dt*s1
	}
	F[3*5+4] = dt
}
func (c ctrvMotion) NoiseFactor(G, x []float64, dt float64) {
	for i := range G[:25] {
		G[i] = 0
	}
	yaw := x[3]
	a, y := c.accelSD, c.yawAccelSD
	// Column 0: linear acceleration; column 1: yaw acceleration.
	G[0*5+0] = 0.5 * dt * dt * math.Cos(yaw) * a
	G[1*5+0] = 0.5 * dt * dt * math.Sin(yaw) * a
	G[2*5+0] = dt * a
	G[3*5+1] = 0.5 * dt * dt * y
	G[4*5+1] = dt * y
}
func (ctrvMotion) Residual(dst, a, b []float64) {
	for i := 0; i < 5; i++ {
		dst[i] = a[i] - b[i]
	}
	dst[3] = wrap(dst[3])
}
func (ctrvMotion) Normalize(x []float64) { x[3] = wrap(x[3]) }
func (ctrvMotion) PosVel(pv, x, J []float64) {
	pv[0], pv[1] = x[0], x[1]
	pv[2], pv[3] = x[2]*math.Cos(x[3]), x[2]*math.Sin(x[3])
}

// rbrMeas is range, bearing and range rate of a CTRV target seen from a
// sensor at the origin: r = √(x²+y²), b = atan2(y, x), ṙ = (x·vx + y·vy)/r.
type rbrMeas struct{}

func (rbrMeas) Dim() int { return 3 }
func (rbrMeas) Predict(z, x []float64) {
	px, py := x[0], x[1]
	vx, vy := x[2]*math.Cos(x[3]), x[2]*math.Sin(x[3])
	r := math.Hypot(px, py)
	z[0] = r
	z[1] = math.Atan2(py, px)
	z[2] = (px*vx + py*vy) / r
}
func (rbrMeas) Jacobian(H, x []float64) {
	px, py, v := x[0], x[1], x[2]
	s, c := math.Sincos(x[3])
	vx, vy := v*c, v*s
	r2 := px*px + py*py
	r := math.Sqrt(r2)
	rr := (px*vx + py*vy) / r
	for i := range H[:15] {
		H[i] = 0
	}
	H[0], H[1] = px/r, py/r
	H[5], H[6] = -py/r2, px/r2
	H[10], H[11] = vx/r-rr*px/r2, vy/r-rr*py/r2
	H[12], H[13] = (px*c+py*s)/r, (-px*vy+py*vx)/r
}
func (rbrMeas) Residual(dst, a, b []float64) {
	dst[0] = a[0] - b[0]
	dst[1] = wrap(a[1] - b[1])
	dst[2] = a[2] - b[2]
}

// numJac is a central-difference Jacobian, used to check the analytic ones.
func numJac(J []float64, r, c int, x []float64, f func(dst, x []float64), res func(dst, a, b []float64)) {
	xp := make([]float64, c)
	xm := make([]float64, c)
	fp := make([]float64, r)
	fm := make([]float64, r)
	d := make([]float64, r)
	for j := 0; j < c; j++ {
		copy(xp, x)
		copy(xm, x)
		h := 1e-6 * math.Max(1, math.Abs(x[j]))
		xp[j] += h
		xm[j] -= h
		f(fp, xp)
		f(fm, xm)
		res(d, fp, fm)
		for i := 0; i < r; i++ {
			J[i*c+j] = d[i] / (2 * h)
		}
	}
}

// randomLower returns an n×n lower-triangular matrix with a positive
// diagonal in [lo, hi] and off-diagonal entries of size ≤ off.
func randomLower(rng *rand.Rand, n int, lo, hi, off float64) []float64 {
	L := make([]float64, n*n)
	for i := 0; i < n; i++ {
		for j := 0; j < i; j++ {
			L[i*n+j] = off * (2*rng.Float64() - 1)
		}
		L[i*n+i] = lo + (hi-lo)*rng.Float64()
	}
	return L
}

func randomMatrix(rng *rand.Rand, r, c int, scale float64) []float64 {
	A := make([]float64, r*c)
	for i := range A {
		A[i] = scale * (2*rng.Float64() - 1)
	}
	return A
}

var (
	_ filters.MotionModel      = (*linearMotion)(nil)
	_ filters.MotionModel      = cvMotion{}
	_ filters.MotionModel      = ctrvMotion{}
	_ filters.MeasurementModel = (*linearMeas)(nil)
	_ filters.MeasurementModel = rbrMeas{}
)

func TestTestModelJacobians(t *testing.T) {
	// The analytic Jacobians of the test models against central differences
	// (error O(h²) ≈ 1e-12 relative; 1e-6 leaves room for rounding).
	f := ctrvMotion{accelSD: 1, yawAccelSD: 1}
	for _, x := range [][]float64{{3, -2, 4, 0.7, 0.3}, {3, -2, 4, 2.9, 1e-2}, {-5, 1, 2, -1, -0.5}} {
		got := make([]float64, 25)
		want := make([]float64, 25)
		f.Jacobian(got, x, 0.2)
		numJac(want, 5, 5, x, func(dst, x []float64) { f.Propagate(dst, x, 0.2) }, f.Residual)
		if d := maxRelDiff(got, want); d > 1e-6 {
			t.Errorf("CTRV Jacobian at %v differs from central differences by %g", x, d)
		}
		gh := make([]float64, 15)
		wh := make([]float64, 15)
		rbrMeas{}.Jacobian(gh, x)
		numJac(wh, 3, 5, x, rbrMeas{}.Predict, rbrMeas{}.Residual)
		if d := maxRelDiff(gh, wh); d > 1e-6 {
			t.Errorf("range-bearing-rate Jacobian at %v differs by %g", x, d)
		}
	}
}
