package models

import (
	"math"
	"testing"

	"github.com/godwit-fusion/godwit/filters"
	"pgregory.net/rapid"
)

// The agreed interfaces (filters/filter.go).
var (
	_ filters.MotionModel      = (*CV)(nil)
	_ filters.MotionModel      = (*CA)(nil)
	_ filters.MotionModel      = (*CTRV)(nil)
	_ filters.MotionModel      = (*Ego)(nil)
	_ filters.MotionModel      = Motion(nil)
	_ filters.MeasurementModel = (*PositionXY)(nil)
	_ filters.MeasurementModel = (*RangeBearing)(nil)
	_ filters.MeasurementModel = (*RangeBearingRate)(nil)
	_ filters.MeasurementModel = (*Pinhole)(nil)
	_ filters.MeasurementModel = (*GNSS)(nil)
	_ filters.MeasurementModel = (*Odometry)(nil)
	_ filters.MeasurementModel = TargetSensor(nil)
)

func mustCV(t testing.TB, sd float64) *CV {
	m, err := NewCV(sd)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

func mustCA(t testing.TB, sd float64) *CA {
	m, err := NewCA(sd)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

func mustCTRV(t testing.TB, a, w float64) *CTRV {
	m, err := NewCTRV(a, w)
	if err != nil {
		t.Fatal(err)
	}
	return m
}

// fdMotionJacobian is the central finite difference of f about x, using the
// model's Residual so a wrapped yaw does not produce a 2π jump.
func fdMotionJacobian(m filters.MotionModel, x []float64, dt float64) []float64 {
	n := m.Dim()
	F := make([]float64, n*n)
	xp, xm := make([]float64, n), make([]float64, n)
	fp, fm, d := make([]float64, n), make([]float64, n), make([]float64, n)
	for j := 0; j < n; j++ {
		h := 1e-6 * math.Max(1, math.Abs(x[j]))
		copy(xp, x)
		copy(xm, x)
		xp[j] += h
		xm[j] -= h
		m.Propagate(fp, xp, dt)
		m.Propagate(fm, xm, dt)
		m.Residual(d, fp, fm)
		for i := 0; i < n; i++ {
			F[i*n+j] = d[i] / (2 * h)
		}
	}
	return F
}

func maxAbsDiff(a, b []float64) float64 {
	var d float64
	for i := range a {
		d = math.Max(d, math.Abs(a[i]-b[i]))
	}
	return d
}

// Analytic Jacobians against central finite differences (truncation error of
// order h² ≈ 1e-12, rounding ≈ eps/h ≈ 1e-10; tolerance 1e-6 leaves margin
// for the |x|-scaled steps). Yaw rates straddle the series switch and zero.
func TestMotionJacobians(t *testing.T) {
	cv, ca, ctrv := mustCV(t, 1), mustCA(t, 1), mustCTRV(t, 1, 1)
	dt := 0.1
	rates := []float64{0, 1e-12, -1e-9, 1e-5, 0.49, 2.5 - 1e-9, 2.5 + 1e-9, -2.51, -0.7, 2.4, -6, 12}
	for _, w := range rates {
		x := []float64{3, -4, 7.5, 2.9, w}
		got := make([]float64, 25)
		ctrv.Jacobian(got, x, dt)
		want := fdMotionJacobian(ctrv, x, dt)
		if d := maxAbsDiff(got, want); d > 1e-6 {
			t.Errorf("CTRV ω=%g: |F − F_fd| = %g", w, d)
		}
	}
	rapid.Check(t, func(rt *rapid.T) {
		dt := rapid.Float64Range(0, 2).Draw(rt, "dt")
		for _, m := range []filters.MotionModel{cv, ca, ctrv} {
			n := m.Dim()
			x := make([]float64, n)
			for i := range x {
				x[i] = rapid.Float64Range(-20, 20).Draw(rt, "x")
			}
			m.Normalize(x)
			got := make([]float64, n*n)
			m.Jacobian(got, x, dt)
			want := fdMotionJacobian(m, x, dt)
			if d := maxAbsDiff(got, want); d > 1e-5 {
				rt.Fatalf("%T x=%v dt=%v: |F − F_fd| = %g", m, x, dt, d)
			}
		}
	})
}

// CTRV against the textbook closed form (Schubert, Richter & Wanielik 2008,
// eq. for CTRV): p' = p + v/ω·[sin(ψ+ωT) − sinψ, cosψ − cos(ψ+ωT)], and
// against straight-line motion at ω = 0.
func TestCTRVClosedForm(t *testing.T) {
	m := mustCTRV(t, 1, 1)
	dst := make([]float64, 5)
	for _, c := range []struct{ v, yaw, w, dt float64 }{
		{5, 0.3, 0.8, 0.5}, {12, -2.9, -1.5, 0.2}, {1, 3.1, 0.2, 2}, {7, 1, 3, 1},
		{9, 0.5, 0.4, 0.5}, {6, -1, -0.9, 0.25}, // |ωT| < 0.25: the series branch
	} {
		x := []float64{10, 20, c.v, c.yaw, c.w}
		m.Propagate(dst, x, c.dt)
		wantX := 10 + c.v/c.w*(math.Sin(c.yaw+c.w*c.dt)-math.Sin(c.yaw))
		wantY := 20 + c.v/c.w*(math.Cos(c.yaw)-math.Cos(c.yaw+c.w*c.dt))
		if math.Abs(dst[0]-wantX) > 1e-12 || math.Abs(dst[1]-wantY) > 1e-12 {
			t.Errorf("%+v: got (%v,%v), want (%v,%v)", c, dst[0], dst[1], wantX, wantY)
		}
		if d := WrapAngle(dst[3] - (c.yaw + c.w*c.dt)); math.Abs(d) > 1e-15 {
			t.Errorf("%+v: yaw off by %g", c, d)
		}
	}
	// Straight line (ω = 0): p' = p + v·T·(cosψ, sinψ).
	x := []float64{1, 2, 4, 0.7, 0}
	m.Propagate(dst, x, 3)
	if math.Abs(dst[0]-(1+12*math.Cos(0.7))) > 1e-12 || math.Abs(dst[1]-(2+12*math.Sin(0.7))) > 1e-12 {
		t.Errorf("straight line: got %v", dst[:2])
	}
}

// The series and the closed forms of s, c and their derivatives must agree
// at the switch point (both are the same analytic functions).
func TestTurnFnsContinuity(t *testing.T) {
	for _, θ := range []float64{turnSeriesBelow, -turnSeriesBelow} {
		lo := math.Nextafter(θ, 0) // series side
		a := [4]float64{}
		b := [4]float64{}
		a[0], a[1], a[2], a[3] = turnFns(lo)
		b[0], b[1], b[2], b[3] = turnFns(θ)
		for i := range a {
			if math.Abs(a[i]-b[i]) > 1e-14 {
				t.Errorf("θ=%v fn %d: series %v vs closed %v", θ, i, a[i], b[i])
			}
		}
	}
	// turnSC is the same s and c.
	for _, θ := range []float64{0, 1e-8, -0.03, turnSeriesBelow, 0.2, -1.7} {
		s, c, _, _ := turnFns(θ)
		s2, c2 := turnSC(θ)
		if s != s2 || c != c2 {
			t.Errorf("θ=%v: turnSC (%v, %v), turnFns (%v, %v)", θ, s2, c2, s, c)
		}
	}
	// Limits at zero: s → 1, c → 0, s' → 0, c' → 1/2 (Taylor series of
	// sinθ/θ and (1−cosθ)/θ, common practice).
	s, c, ds, dc := turnFns(0)
	if s != 1 || c != 0 || ds != 0 || dc != 0.5 {
		t.Errorf("turnFns(0) = %v %v %v %v", s, c, ds, dc)
	}
}

// Process noise: G·Gᵀ against the BLK 2001 matrices written out plainly
// (§6.2.2 eq. 6.2.2-12 for CWNA, §6.2.3 eq. 6.2.3-8 for white-noise jerk).
func TestNoiseFactorsMatchBLK(t *testing.T) {
	q := 2.25 // accel_sd 1.5 → q̃ = 2.25
	for _, T := range []float64{0, 0.05, 0.1, 1, 3} {
		Q := ggt(mustCV(t, 1.5), nil, T)
		want := []float64{ // per axis [[T³/3, T²/2], [T²/2, T]]·q̃
			T * T * T / 3, 0, T * T / 2, 0,
			0, T * T * T / 3, 0, T * T / 2,
			T * T / 2, 0, T, 0,
			0, T * T / 2, 0, T,
		}
		scale(want, q)
		if d := maxAbsDiff(Q, want); d > 1e-12*math.Max(1, T*T*T) {
			t.Errorf("CV T=%v: |GGᵀ − Q| = %g", T, d)
		}

		Q = ggt(mustCA(t, 1.5), nil, T)
		T2, T3, T4, T5 := T*T, T*T*T, T*T*T*T, T*T*T*T*T
		b := [3][3]float64{{T5 / 20, T4 / 8, T3 / 6}, {T4 / 8, T3 / 3, T2 / 2}, {T3 / 6, T2 / 2, T}}
		want = make([]float64, 36)
		for ax := 0; ax < 2; ax++ {
			for i := 0; i < 3; i++ {
				for j := 0; j < 3; j++ {
					want[(2*i+ax)*6+(2*j+ax)] = q * b[i][j]
				}
			}
		}
		if d := maxAbsDiff(Q, want); d > 1e-12*math.Max(1, T5) {
			t.Errorf("CA T=%v: |GGᵀ − Q| = %g", T, d)
		}
	}
}

// The CWNA matrix is the exact discretisation ∫₀ᵀ e^{Fτ}·L·q̃·Lᵀ·e^{Fᵀτ} dτ
// (Van Loan 1978, "Computing integrals involving the matrix exponential").
// Check CV's Q against that integral done by composite Simpson quadrature.
func TestCVNoiseIsIntegral(t *testing.T) {
	T, q := 0.7, 0.8
	Q := ggt(mustCV(t, math.Sqrt(q)), nil, T)
	// One axis: e^{Fτ}L = [τ, 1]ᵀ, so the integrand is q̃·[[τ², τ], [τ, 1]].
	const k = 1000
	var i00, i01, i11 float64
	for s := 0; s <= k; s++ {
		τ := T * float64(s) / k
		w := 2.0
		if s == 0 || s == k {
			w = 1
		} else if s%2 == 1 {
			w = 4
		}
		i00 += w * τ * τ
		i01 += w * τ
		i11 += w
	}
	h := T / k / 3
	i00, i01, i11 = q*h*i00, q*h*i01, q*h*i11
	if math.Abs(Q[0]-i00) > 1e-12 || math.Abs(Q[0*4+2]-i01) > 1e-12 || math.Abs(Q[2*4+2]-i11) > 1e-12 {
		t.Errorf("CV Q = %v %v %v, integral %v %v %v", Q[0], Q[2], Q[10], i00, i01, i11)
	}
}

// CTRV noise: CWNA along the mid-interval heading and on (yaw, yawrate);
// the matrix written out plainly, and singular as documented.
func TestCTRVNoise(t *testing.T) {
	a, w := 1.2, 0.4
	m := mustCTRV(t, a, w)
	x := []float64{0, 0, 5, 0.3, 0.8}
	T := 0.25
	Q := ggt(m, x, T)
	h := 0.3 + 0.8*T/2
	c, s := math.Cos(h), math.Sin(h)
	qa, qw := a*a, w*w
	p, pv, v := T*T*T/3, T*T/2, T
	want := []float64{
		qa * p * c * c, qa * p * c * s, qa * pv * c, 0, 0,
		qa * p * c * s, qa * p * s * s, qa * pv * s, 0, 0,
		qa * pv * c, qa * pv * s, qa * v, 0, 0,
		0, 0, 0, qw * p, qw * pv,
		0, 0, 0, qw * pv, qw * v,
	}
	if d := maxAbsDiff(Q, want); d > 1e-14 {
		t.Errorf("|GGᵀ − Q| = %g", d)
	}
	// Cross-track direction (−s, c, 0, 0, 0) carries no noise: Q·n = 0.
	n := []float64{-s, c, 0, 0, 0}
	for i := 0; i < 5; i++ {
		var r float64
		for j := 0; j < 5; j++ {
			r += Q[i*5+j] * n[j]
		}
		if math.Abs(r) > 1e-15 {
			t.Errorf("Q·n_cross[%d] = %g, want 0", i, r)
		}
	}
}

func ggt(m filters.MotionModel, x []float64, dt float64) []float64 {
	n := m.Dim()
	if x == nil {
		x = make([]float64, n)
	}
	G := make([]float64, n*n)
	for i := range G {
		G[i] = math.NaN() // NoiseFactor must write every element
	}
	m.NoiseFactor(G, x, dt)
	Q := make([]float64, n*n)
	for i := 0; i < n; i++ {
		for j := 0; j < n; j++ {
			var s float64
			for k := 0; k < n; k++ {
				s += G[i*n+k] * G[j*n+k]
			}
			Q[i*n+j] = s
		}
	}
	return Q
}

func scale(a []float64, s float64) {
	for i := range a {
		a[i] *= s
	}
}

// WrapAngle lands in (−π, π] and changes the angle by a multiple of 2π.
func TestWrapAngle(t *testing.T) {
	// Boundary cases: −π maps to +π (the interval is open at −π).
	for _, c := range []struct{ in, want float64 }{
		{0, 0}, {math.Pi, math.Pi}, {-math.Pi, math.Pi}, {3 * math.Pi, math.Pi},
		{-3 * math.Pi, math.Pi}, {2 * math.Pi, 0}, {-0.5, -0.5},
	} {
		if got := WrapAngle(c.in); math.Abs(got-c.want) > 1e-15 {
			t.Errorf("WrapAngle(%v) = %v, want %v", c.in, got, c.want)
		}
	}
	if !math.IsNaN(WrapAngle(math.Inf(1))) {
		t.Error("WrapAngle(+Inf) is not NaN")
	}
	rapid.Check(t, func(t *rapid.T) {
		a := rapid.Float64Range(-1e4, 1e4).Draw(t, "a")
		w := WrapAngle(a)
		if !(w > -math.Pi && w <= math.Pi) {
			t.Fatalf("WrapAngle(%v) = %v out of (−π, π]", a, w)
		}
		k := (a - w) / (2 * math.Pi)
		if math.Abs(k-math.Round(k)) > 1e-9 {
			t.Fatalf("WrapAngle(%v) = %v: not a 2π multiple away", a, w)
		}
	})
}

func TestMotionBadParams(t *testing.T) {
	for _, v := range []float64{-1, math.NaN(), math.Inf(1)} {
		if _, err := NewCV(v); err == nil {
			t.Errorf("NewCV(%v) accepted", v)
		}
		if _, err := NewCA(v); err == nil {
			t.Errorf("NewCA(%v) accepted", v)
		}
		if _, err := NewCTRV(1, v); err == nil {
			t.Errorf("NewCTRV(1, %v) accepted", v)
		}
		if _, err := NewEgo(v, 1); err == nil {
			t.Errorf("NewEgo(%v, 1) accepted", v)
		}
	}
	if _, err := NewMotion("singer", 1, 1); err == nil {
		t.Error("unknown motion accepted")
	}
	for _, k := range []string{"cv", "ca", "ctrv"} {
		if m, err := NewMotion(k, 1, 1); err != nil || m == nil {
			t.Errorf("NewMotion(%q): %v", k, err)
		}
	}
}

func TestMotionZeroAllocs(t *testing.T) {
	for _, m := range []filters.MotionModel{mustCV(t, 1), mustCA(t, 1), mustCTRV(t, 1, 1)} {
		n := m.Dim()
		x, y := make([]float64, n), make([]float64, n)
		F, G, pv, J := make([]float64, n*n), make([]float64, n*n), make([]float64, 4), make([]float64, 4*n)
		x[n-1] = 0.3
		if a := testing.AllocsPerRun(50, func() {
			m.Propagate(y, x, 0.1)
			m.Jacobian(F, x, 0.1)
			m.NoiseFactor(G, x, 0.1)
			m.Residual(y, y, x)
			m.Normalize(y)
			m.PosVel(pv, x, J)
		}); a != 0 {
			t.Errorf("%T: %v allocs", m, a)
		}
	}
}

func BenchmarkCTRVPropagateJacobianNoise(b *testing.B) {
	m := mustCTRV(b, 1, 1)
	x := []float64{1, 2, 5, 0.3, 0.2}
	y, F, G := make([]float64, 5), make([]float64, 25), make([]float64, 25)
	b.ReportAllocs()
	for b.Loop() {
		m.Propagate(y, x, 0.05)
		m.Jacobian(F, x, 0.05)
		m.NoiseFactor(G, x, 0.05)
	}
}

// The sampling fast path equals Propagate plus NoiseFactor's G·ξ (ξ padded
// with zeros beyond NoiseDim), and Position equals PosVel's first two.
func TestPropagateNoisyMatchesNoiseFactor(t *testing.T) {
	type sampler interface {
		filters.MotionModel
		NoiseDim() int
		PropagateNoisy(dst, x []float64, dt float64, xi []float64)
		Position(x []float64) (px, py float64)
	}
	ms := []sampler{mustCV(t, 0.7), mustCA(t, 0.4), mustCTRV(t, 1.5, 0.6)}
	rapid.Check(t, func(rt *rapid.T) {
		dt := rapid.Float64Range(0, 2).Draw(rt, "dt")
		for _, m := range ms {
			n := m.Dim()
			x, ξ := make([]float64, n), make([]float64, n)
			for i := range x {
				x[i] = rapid.Float64Range(-20, 20).Draw(rt, "x")
			}
			m.Normalize(x)
			if n == 5 {
				x[4] = rapid.SampledFrom([]float64{0, 1e-7, -0.02, 0.3, -2}).Draw(rt, "w")
			}
			for i := 0; i < m.NoiseDim(); i++ {
				ξ[i] = rapid.Float64Range(-4, 4).Draw(rt, "xi")
			}
			got, want, G := make([]float64, n), make([]float64, n), make([]float64, n*n)
			m.PropagateNoisy(got, x, dt, ξ[:m.NoiseDim()])
			m.Propagate(want, x, dt)
			m.NoiseFactor(G, x, dt)
			for i := 0; i < n; i++ {
				for j := 0; j < n; j++ {
					want[i] += G[i*n+j] * ξ[j]
				}
			}
			m.Normalize(want)
			d := make([]float64, n)
			m.Residual(d, got, want)
			for i := range d {
				if math.Abs(d[i]) > 1e-12*math.Max(1, math.Abs(want[i])) {
					rt.Fatalf("%T: PropagateNoisy %v, Propagate + G·ξ %v", m, got, want)
				}
			}
			pv := make([]float64, 4)
			m.PosVel(pv, x, nil)
			if px, py := m.Position(x); px != pv[0] || py != pv[1] {
				rt.Fatalf("%T: Position differs from PosVel", m)
			}
		}
	})
}

// PosVel's Jacobian against central finite differences (it carries every
// target measurement Jacobian through the chain rule).
func TestPosVelJacobians(t *testing.T) {
	rapid.Check(t, func(rt *rapid.T) {
		for _, m := range []filters.MotionModel{mustCV(t, 1), mustCA(t, 1), mustCTRV(t, 1, 1)} {
			n := m.Dim()
			x := make([]float64, n)
			for i := range x {
				x[i] = rapid.Float64Range(-20, 20).Draw(rt, "x")
			}
			pv, J := make([]float64, 4), make([]float64, 4*n)
			m.PosVel(pv, x, J)
			xp, xm, pp, pm := make([]float64, n), make([]float64, n), make([]float64, 4), make([]float64, 4)
			for j := 0; j < n; j++ {
				h := 1e-6 * math.Max(1, math.Abs(x[j]))
				copy(xp, x)
				copy(xm, x)
				xp[j] += h
				xm[j] -= h
				m.PosVel(pp, xp, nil)
				m.PosVel(pm, xm, nil)
				for i := 0; i < 4; i++ {
					if d := math.Abs(J[i*n+j] - (pp[i]-pm[i])/(2*h)); d > 1e-6 {
						rt.Fatalf("%T: ∂pv[%d]/∂x[%d] off by %g", m, i, j, d)
					}
				}
			}
		}
	})
}
