package models

import (
	"math"
	"slices"
	"testing"

	"github.com/godwit-fusion/godwit/filters"
	"github.com/godwit-fusion/godwit/filters/geo"
	"pgregory.net/rapid"
)

type platformed interface {
	filters.MeasurementModel
	SetPlatform(Platform) error
}

// fdMeasJacobian is the central finite difference of h, differenced with
// the model's Residual so a bearing near ±π does not jump by 2π.
func fdMeasJacobian(h filters.MeasurementModel, x []float64) []float64 {
	m, n := h.Dim(), len(x)
	H := make([]float64, m*n)
	xp, xm := make([]float64, n), make([]float64, n)
	zp, zm, d := make([]float64, m), make([]float64, m), make([]float64, m)
	for j := 0; j < n; j++ {
		step := 1e-6 * math.Max(1, math.Abs(x[j]))
		copy(xp, x)
		copy(xm, x)
		xp[j] += step
		xm[j] -= step
		h.Predict(zp, xp)
		h.Predict(zm, xm)
		h.Residual(d, zp, zm)
		for i := 0; i < m; i++ {
			H[i*n+j] = d[i] / (2 * step)
		}
	}
	return H
}

func newTargetModels(t interface{ Fatal(...any) }, k Kinematics, mount Mount) []platformed {
	p, err := NewPositionXY(k, mount)
	if err != nil {
		t.Fatal(err)
	}
	rb, err := NewRangeBearing(k, mount)
	if err != nil {
		t.Fatal(err)
	}
	rbr, err := NewRangeBearingRate(k, mount)
	if err != nil {
		t.Fatal(err)
	}
	ph, err := NewPinhole(k, mount, 800, 640)
	if err != nil {
		t.Fatal(err)
	}
	return []platformed{p, rb, rbr, ph}
}

// Every measurement Jacobian against central finite differences, through
// every target motion model's PosVel, with random mounts and moving
// platforms, including CTRV with a yaw rate near zero. Tolerance: relative
// 1e-5 of the Jacobian's scale (h² truncation and eps/h rounding are far
// smaller; pixels scale H by fx = 800).
func TestMeasurementJacobians(t *testing.T) {
	motions := []filters.MotionModel{mustCV(t, 1), mustCA(t, 1), mustCTRV(t, 1, 1)}
	rapid.Check(t, func(rt *rapid.T) {
		mount := Mount{
			X:   rapid.Float64Range(-3, 5).Draw(rt, "mx"),
			Y:   rapid.Float64Range(-2, 2).Draw(rt, "my"),
			Yaw: rapid.Float64Range(-math.Pi, math.Pi).Draw(rt, "myaw"),
		}
		plat := Platform{
			X: rapid.Float64Range(-50, 50).Draw(rt, "px"), Y: rapid.Float64Range(-50, 50).Draw(rt, "py"),
			Yaw: rapid.Float64Range(-math.Pi, math.Pi).Draw(rt, "pyaw"),
			VX:  rapid.Float64Range(-10, 10).Draw(rt, "pvx"), VY: rapid.Float64Range(-10, 10).Draw(rt, "pvy"),
			YawRate: rapid.Float64Range(-1, 1).Draw(rt, "pw"),
		}
		for _, mo := range motions {
			n := mo.Dim()
			x := make([]float64, n)
			for _, h := range newTargetModels(rt, mo, mount) {
				if err := h.SetPlatform(plat); err != nil {
					rt.Fatal(err)
				}
				// Put the target 5–80 m in front of the sensor so the
				// pinhole depth is positive and the geometry is regular.
				f := h.(interface {
					ToSite(xs, ys float64) (float64, float64)
				})
				rng := rapid.Float64Range(5, 80).Draw(rt, "range")
				brg := rapid.Float64Range(-1.2, 1.2).Draw(rt, "bearing")
				x[0], x[1] = f.ToSite(rng*math.Cos(brg), rng*math.Sin(brg))
				for i := 2; i < n; i++ {
					x[i] = rapid.Float64Range(-10, 10).Draw(rt, "x")
				}
				if n == 5 {
					x[3] = rapid.Float64Range(-math.Pi, math.Pi).Draw(rt, "yaw")
					x[4] = rapid.SampledFrom([]float64{0, 1e-10, -1e-6, 0.3}).Draw(rt, "yawrate")
				}
				got := make([]float64, h.Dim()*n)
				h.Jacobian(got, x)
				want := fdMeasJacobian(h, x)
				scale := 1.0
				for _, v := range want {
					scale = math.Max(scale, math.Abs(v))
				}
				if d := maxAbsDiff(got, want); d > 1e-5*scale {
					rt.Fatalf("%T with %T at x=%v: |H − H_fd| = %g (scale %g)\n got %v\nwant %v", h, mo, x, d, scale, got, want)
				}
			}
		}
	})
}

// onlyKinematics hides every optional fast path of a motion model.
type onlyKinematics struct{ Kinematics }

// A motion model without the Position fast path predicts the same.
func TestKinematicsWithoutFastPath(t *testing.T) {
	ctrv := mustCTRV(t, 1, 1)
	x := []float64{20, -7, 3, 0.4, 0.1}
	fast := newTargetModels(t, ctrv, Mount{X: 1, Yaw: 0.1})
	slow := newTargetModels(t, onlyKinematics{ctrv}, Mount{X: 1, Yaw: 0.1})
	for i := range fast {
		a, b := make([]float64, 3), make([]float64, 3)
		fast[i].Predict(a, x)
		slow[i].Predict(b, x)
		if !slices.Equal(a, b) {
			t.Errorf("%T: %v with the fast path, %v without", fast[i], a, b)
		}
	}
}

// Geometry by hand: a sensor mounted 2 m forward, 1 m left, yawed +90° on a
// platform at (10, 5) heading 90° looks along −x of the site frame
// (90° + 90° = 180°). A target at site (0, 5) is then at sensor (x_s, y_s)
// = (8, −1)... worked out below from plane geometry (common practice).
func TestGeometryByHand(t *testing.T) {
	cv := mustCV(t, 1)
	mount := Mount{X: 2, Y: 1, Yaw: math.Pi / 2}
	p, _ := NewPositionXY(cv, mount)
	rb, _ := NewRangeBearing(cv, mount)
	if err := p.SetPlatform(Platform{X: 10, Y: 5, Yaw: math.Pi / 2}); err != nil {
		t.Fatal(err)
	}
	_ = rb.SetPlatform(Platform{X: 10, Y: 5, Yaw: math.Pi / 2})
	// Lever arm rotated by 90°: (2, 1) → (−1, 2); sensor at (9, 7), facing −x.
	sx, sy, syaw := p.SensorPose()
	if math.Abs(sx-9) > 1e-12 || math.Abs(sy-7) > 1e-12 || math.Abs(math.Abs(syaw)-math.Pi) > 1e-12 {
		t.Fatalf("sensor pose (%v, %v, %v), want (9, 7, π)", sx, sy, syaw)
	}
	// Target at (0, 5): offset (−9, −2); facing −x, forward = 9, left = +2
	// (site −y is the sensor's left when looking along −x).
	z := make([]float64, 2)
	p.Predict(z, []float64{0, 5, 0, 0})
	if math.Abs(z[0]-9) > 1e-12 || math.Abs(z[1]-2) > 1e-12 {
		t.Errorf("position_xy = %v, want [9 2]", z)
	}
	rb.Predict(z, []float64{0, 5, 0, 0})
	if math.Abs(z[0]-math.Hypot(9, 2)) > 1e-12 || math.Abs(z[1]-math.Atan2(2, 9)) > 1e-12 {
		t.Errorf("range_bearing = %v, want [%v %v]", z, math.Hypot(9, 2), math.Atan2(2, 9))
	}
}

// Range rate is d|d|/dt for the target relative to the moving sensor. Check
// the model against the time derivative of the range obtained by moving the
// target and the rigid platform (lever arm rotating with the yaw rate)
// forward and back by a small Δt — the definition itself.
func TestRangeRateIsRangeDerivative(t *testing.T) {
	cv := mustCV(t, 1)
	mount := Mount{X: 3.6, Y: -0.8, Yaw: 0.2}
	rbr, _ := NewRangeBearingRate(cv, mount)
	rb, _ := NewRangeBearing(cv, mount)
	plat := Platform{X: 2, Y: -1, Yaw: 0.4, VX: 4, VY: 1.5, YawRate: 0.6}
	x := []float64{30, 12, -3, 2}
	_ = rbr.SetPlatform(plat)
	z := make([]float64, 3)
	rbr.Predict(z, x)

	rangeAt := func(dt float64) float64 {
		p := plat
		p.X += plat.VX * dt
		p.Y += plat.VY * dt
		p.Yaw += plat.YawRate * dt
		_ = rb.SetPlatform(p)
		zz := make([]float64, 2)
		rb.Predict(zz, []float64{x[0] + x[2]*dt, x[1] + x[3]*dt, x[2], x[3]})
		return zz[0]
	}
	const h = 1e-5
	want := (rangeAt(h) - rangeAt(-h)) / (2 * h)
	if math.Abs(z[2]-want) > 1e-6 {
		t.Errorf("range rate %v, d(range)/dt %v", z[2], want)
	}
	// A stationary target 50 m dead ahead of the sensor's position along the
	// platform's x axis, platform driving at 5 m/s without turning: ṙ = −5.
	_ = rbr.SetPlatform(Platform{VX: 5})
	rbr.Predict(z, []float64{50 + 3.6, -0.8, 0, 0})
	if math.Abs(z[2]-(-5)) > 1e-12 || math.Abs(z[0]-50) > 1e-12 || math.Abs(z[1]-(-0.2)) > 1e-12 {
		t.Errorf("closing target: z = %v, want [50 −0.2 −5]", z)
	}
}

// Pinhole camera: a point at bearing b (CCW, to the left) images at column
// u = cx − fx·tan b (central projection; Hartley & Zisserman 2003, ch. 6,
// from memory, with the image column growing to the right).
func TestPinholeProjection(t *testing.T) {
	cv := mustCV(t, 1)
	ph, _ := NewPinhole(cv, Mount{}, 800, 640)
	z := make([]float64, 2)
	for _, b := range []float64{0, 0.3, -0.5} {
		r := 20.0
		ph.Predict(z, []float64{r * math.Cos(b), r * math.Sin(b), 0, 0})
		if math.Abs(z[0]-(640-800*math.Tan(b))) > 1e-9 || math.Abs(z[1]-r) > 1e-12 {
			t.Errorf("b=%v: z = %v", b, z)
		}
	}
	// Behind the camera: finite, not visible.
	ph.Predict(z, []float64{-5, 1, 0, 0})
	if !finite(z...) {
		t.Errorf("behind the camera: z = %v", z)
	}
	if ph.Visible(-5, 1) {
		t.Error("point behind the camera is visible")
	}
	// Range-dependent noise: σ_r = √(σ0² + (frac·r)²).
	if err := ph.SetNoise([]float64{3, 0.5}); err != nil {
		t.Fatal(err)
	}
	if err := ph.SetRangeSDFrac(0.05); err != nil {
		t.Fatal(err)
	}
	Rs := make([]float64, 4)
	if err := ph.NoiseSqrtAtRange(Rs, 40); err != nil {
		t.Fatal(err)
	}
	if Rs[0] != 3 || Rs[1] != 0 || Rs[2] != 0 || math.Abs(Rs[3]-math.Sqrt(0.25+4)) > 1e-15 {
		t.Errorf("Rs = %v", Rs)
	}
	if err := ph.NoiseSqrt(Rs, []float64{30, 40, 0, 0}); err != nil || math.Abs(Rs[3]-math.Sqrt(0.25+6.25)) > 1e-15 {
		t.Errorf("NoiseSqrt at range 50: %v %v", Rs, err)
	}
	if err := ph.NoiseSqrtAtRange(Rs, math.NaN()); err == nil {
		t.Error("NaN range accepted")
	}
}

// Birth is the inverse measurement: h(birth(z)) = z, and the birth
// covariance is the first-order Hp⁻¹·R·Hp⁻ᵀ, Hp = ∂h/∂p from finite
// differences (independent of the analytic code).
func TestBirthInvertsPredict(t *testing.T) {
	cv := mustCV(t, 1)
	mount := Mount{X: 1.5, Y: 0.4, Yaw: -0.3}
	plat := Platform{X: 7, Y: -3, Yaw: 2.2, VX: 1, VY: 0.5, YawRate: 0.1}
	zs := map[string][]float64{
		"*models.PositionXY":       {12, -4},
		"*models.RangeBearing":     {25, 0.4},
		"*models.RangeBearingRate": {25, -0.7, 1.1},
		"*models.Pinhole":          {500, 18},
	}
	for _, h := range newTargetModels(t, cv, mount) {
		_ = h.SetPlatform(plat)
		ts := h.(TargetSensor)
		m := h.Dim()
		z := zs[typeName(h)]
		Rs := make([]float64, m*m)
		// A correlated noise square root (lower triangular).
		Rs[0] = 0.3
		Rs[m] = 0.004
		Rs[m+1] = 0.02
		if m == 3 {
			Rs[8] = 0.1
		}
		if _, ok := h.(*Pinhole); ok {
			Rs[0], Rs[2], Rs[3] = 2, 0.1, 0.5
		}
		pos, cov := make([]float64, 2), make([]float64, 4)
		if err := ts.Birth(pos, cov, z, Rs); err != nil {
			t.Fatalf("%T: %v", h, err)
		}
		x := []float64{pos[0], pos[1], 0, 0}
		zp := make([]float64, m)
		h.Predict(zp, x)
		for i := 0; i < 2; i++ { // the range rate is not inverted
			if math.Abs(zp[i]-z[i]) > 1e-9 {
				t.Errorf("%T: h(birth(z)) = %v, z = %v", h, zp, z)
			}
		}
		// Expected covariance from the finite-difference position Jacobian.
		H := fdMeasJacobian(h, x)
		a, b, c, d := H[0], H[1], H[4], H[5] // ∂(z0,z1)/∂(px,py)
		det := a*d - b*c
		ia, ib, ic, id := d/det, -b/det, -c/det, a/det
		var C [4]float64
		covFromSqrt(C[:], Rs, m, 2)
		w00, w01, w11 := sandwich(ia, ib, ic, id, C[0], C[1], C[3])
		want := []float64{w00, w01, w01, w11}
		for i := range want {
			if math.Abs(cov[i]-want[i]) > 1e-6*math.Max(1, math.Abs(want[i])) {
				t.Errorf("%T: birth cov %v, want %v", h, cov, want)
				break
			}
		}
		// Bad detections: error, outputs untouched.
		pos[0], pos[1] = 42, 42
		bad := append([]float64(nil), z...)
		bad[0] = math.NaN()
		if err := ts.Birth(pos, cov, bad, Rs); err == nil || pos[0] != 42 {
			t.Errorf("%T: NaN detection accepted (pos %v)", h, pos)
		}
		if err := ts.Birth(pos, cov, z[:1], Rs); err == nil {
			t.Errorf("%T: short detection accepted", h)
		}
	}
}

func typeName(v any) string {
	switch v.(type) {
	case *PositionXY:
		return "*models.PositionXY"
	case *RangeBearing:
		return "*models.RangeBearing"
	case *RangeBearingRate:
		return "*models.RangeBearingRate"
	case *Pinhole:
		return "*models.Pinhole"
	}
	return ""
}

func TestVisible(t *testing.T) {
	rb, _ := NewRangeBearing(mustCV(t, 1), Mount{X: 1, Yaw: math.Pi / 2})
	if err := rb.SetCoverage(Coverage{MaxRange: 50, FOV: 90 * math.Pi / 180}); err != nil {
		t.Fatal(err)
	}
	_ = rb.SetPlatform(Platform{}) // sensor at (1, 0) looking along +y
	cases := []struct {
		x, y float64
		want bool
	}{
		{1, 10, true},   // straight ahead
		{1, 49, true},   // inside range
		{1, 51, false},  // beyond max range
		{1, -10, false}, // behind
		{10, 10, true},  // 45° right edge, 9 m across: atan(9/10) < 45°
		{12, 10, false}, // atan(11/10) > 45°
		{1, 0, false},   // at the sensor
		{-8, 10, true},  // atan(9/10) left
		{-10.5, 10, false},
	}
	for _, c := range cases {
		if got := rb.Visible(c.x, c.y); got != c.want {
			t.Errorf("Visible(%v, %v) = %v, want %v", c.x, c.y, got, c.want)
		}
	}
	if err := rb.SetCoverage(Coverage{MaxRange: -1}); err == nil {
		t.Error("negative range accepted")
	}
}

func TestGNSS(t *testing.T) {
	ego, _ := NewEgo(1, 1)
	const lat0, lon0, h0 = 1.25, 103.5, 15.0 // an invented site
	g, err := NewGNSS(ego, lat0, lon0, h0, Mount{X: 0.5, Y: -0.2})
	if err != nil {
		t.Fatal(err)
	}
	// A fix 120 m east and 80 m north of the origin, made by the geo
	// package (checked against WGS 84 there), must come back in metres.
	l, _ := geo.NewLocal(lat0, lon0, h0)
	lat, lon, _ := l.ENUToGeodetic(120, 80, 0)
	z := []float64{lat, lon}
	if err := g.Preprocess(z, z); err != nil {
		t.Fatal(err)
	}
	// The fix is taken at the origin's height; curvature makes u ≈ −1.6 mm
	// at 144 m, so east/north move by less than 1 mm.
	if math.Abs(z[0]-120) > 1e-3 || math.Abs(z[1]-80) > 1e-3 {
		t.Errorf("preprocessed fix %v, want [120 80]", z)
	}
	// Antenna lever arm: yaw 90° turns (0.5, −0.2) into (0.2, 0.5).
	zp := make([]float64, 2)
	g.Predict(zp, []float64{10, 20, 3, math.Pi / 2, 0})
	if math.Abs(zp[0]-10.2) > 1e-12 || math.Abs(zp[1]-20.5) > 1e-12 {
		t.Errorf("antenna at %v, want [10.2 20.5]", zp)
	}
	for _, raw := range [][]float64{{91, 0}, {math.NaN(), 0}, {0, math.Inf(-1)}, {1}} {
		dst := []float64{7, 7}
		if err := g.Preprocess(dst, raw); err == nil || dst[0] != 7 {
			t.Errorf("Preprocess(%v) accepted or wrote %v", raw, dst)
		}
	}
	if _, err := NewGNSS(mustCV(t, 1), 0, 0, 0, Mount{}); err == nil {
		t.Error("gnss accepted a CV state")
	}
	if _, err := NewGNSS(ego, 95, 0, 0, Mount{}); err == nil {
		t.Error("gnss accepted latitude 95")
	}
}

func TestEgoJacobians(t *testing.T) {
	ego, _ := NewEgo(1, 1)
	g, _ := NewGNSS(ego, 0, 0, 0, Mount{X: 1.1, Y: 0.3})
	o, _ := NewOdometry(ego)
	rapid.Check(t, func(rt *rapid.T) {
		x := []float64{
			rapid.Float64Range(-100, 100).Draw(rt, "px"), rapid.Float64Range(-100, 100).Draw(rt, "py"),
			rapid.Float64Range(-5, 20).Draw(rt, "v"), rapid.Float64Range(-math.Pi, math.Pi).Draw(rt, "yaw"),
			rapid.Float64Range(-1, 1).Draw(rt, "w"),
		}
		for _, h := range []filters.MeasurementModel{g, o} {
			got := make([]float64, 10)
			h.Jacobian(got, x)
			if d := maxAbsDiff(got, fdMeasJacobian(h, x)); d > 1e-6 {
				rt.Fatalf("%T: |H − H_fd| = %g", h, d)
			}
		}
	})
	z := make([]float64, 2)
	o.Predict(z, []float64{1, 2, 3, 4, 5})
	if z[0] != 3 || z[1] != 5 {
		t.Errorf("odometry reads %v, want [3 5] (x[2], x[4])", z)
	}
}

// Residuals wrap the bearing to (−π, π] for any pair of bearings.
func TestResidualWrapping(t *testing.T) {
	cv := mustCV(t, 1)
	rb, _ := NewRangeBearing(cv, Mount{})
	rbr, _ := NewRangeBearingRate(cv, Mount{})
	rapid.Check(t, func(t *rapid.T) {
		a := []float64{10, rapid.Float64Range(-math.Pi, math.Pi).Draw(t, "a"), 1}
		b := []float64{9, rapid.Float64Range(-math.Pi, math.Pi).Draw(t, "b"), 2}
		for _, h := range []filters.MeasurementModel{rb, rbr} {
			d := make([]float64, 3)
			h.Residual(d, a, b)
			if !(d[1] > -math.Pi && d[1] <= math.Pi) || math.Abs(math.Sin(d[1])-math.Sin(a[1]-b[1])) > 1e-12 {
				t.Fatalf("%T: bearing residual %v for %v − %v", h, d[1], a[1], b[1])
			}
			// dst may alias a.
			aa := append([]float64(nil), a...)
			h.Residual(aa, aa, b)
			if aa[1] != d[1] || aa[0] != d[0] {
				t.Fatalf("%T: aliased residual differs", h)
			}
		}
	})
}

func TestMeasurementBadInput(t *testing.T) {
	cv := mustCV(t, 1)
	if _, err := NewRangeBearing(nil, Mount{}); err == nil {
		t.Error("nil kinematics accepted")
	}
	if _, err := NewPositionXY(cv, Mount{X: math.NaN()}); err == nil {
		t.Error("NaN mount accepted")
	}
	if _, err := NewPinhole(cv, Mount{}, 0, 640); err == nil {
		t.Error("fx = 0 accepted")
	}
	if _, err := NewOdometry(cv); err == nil {
		t.Error("odometry accepted a CV state")
	}
	rb, _ := NewRangeBearing(cv, Mount{})
	good := Platform{X: 1, Y: 2, Yaw: 0.3}
	_ = rb.SetPlatform(good)
	if err := rb.SetPlatform(Platform{X: math.Inf(1)}); err == nil {
		t.Error("infinite platform accepted")
	}
	if rb.Platform() != good {
		t.Error("refused platform changed the pose")
	}
	if err := rb.SetNoise([]float64{1}); err == nil {
		t.Error("short noise_sd accepted")
	}
	if err := rb.SetNoise([]float64{1, 0}); err == nil {
		t.Error("zero noise_sd accepted")
	}
	Rs := make([]float64, 4)
	if err := rb.NoiseSqrt(Rs, nil); err == nil {
		t.Error("NoiseSqrt without configured noise accepted")
	}
	// Target exactly at the sensor: finite prediction and Jacobian.
	z, H := make([]float64, 3), make([]float64, 12)
	rbr, _ := NewRangeBearingRate(cv, Mount{})
	rbr.Predict(z, []float64{0, 0, 1, 1})
	rbr.Jacobian(H, []float64{0, 0, 1, 1})
	if !finite(z...) || !finite(H...) {
		t.Errorf("target on the sensor: z %v H %v", z, H)
	}
}

func TestNewTargetSensor(t *testing.T) {
	ctrv := mustCTRV(t, 1, 1)
	spec := Spec{Kind: "range_bearing_rate", Mount: Mount{X: 3.6}, NoiseSD: []float64{0.3, 0.01, 0.15},
		Coverage: Coverage{MaxRange: 120, FOV: 2 * math.Pi / 3}}
	s, err := NewTargetSensor(ctrv, spec)
	if err != nil {
		t.Fatal(err)
	}
	if s.Dim() != 3 {
		t.Errorf("dim %d", s.Dim())
	}
	Rs := make([]float64, 9)
	if err := s.NoiseSqrt(Rs, nil); err != nil || Rs[0] != 0.3 || Rs[4] != 0.01 || Rs[8] != 0.15 {
		t.Errorf("Rs %v err %v", Rs, err)
	}
	if !s.Visible(50, 0) || s.Visible(130, 0) {
		t.Error("coverage not applied")
	}
	for _, bad := range []Spec{
		{Kind: "sonar", NoiseSD: []float64{1, 1}},
		{Kind: "range_bearing", NoiseSD: []float64{1, 1, 1}},
		{Kind: "pinhole", NoiseSD: []float64{1, 1}}, // fx missing
		{Kind: "gnss", NoiseSD: []float64{1, 1}},
		{Kind: "position_xy", NoiseSD: []float64{1, 1}, Coverage: Coverage{FOV: math.NaN()}},
	} {
		if _, err := NewTargetSensor(ctrv, bad); err == nil {
			t.Errorf("spec %+v accepted", bad)
		}
	}
	for kind, want := range map[string]int{"position_xy": 2, "range_bearing_rate": 3, "gnss": 2, "odometry": 2, "pinhole": 2} {
		if m, err := MeasurementDim(kind); err != nil || m != want {
			t.Errorf("MeasurementDim(%q) = %d, %v", kind, m, err)
		}
	}
}

func TestMeasurementZeroAllocs(t *testing.T) {
	ctrv := mustCTRV(t, 1, 1)
	x := []float64{20, 5, 3, 0.2, 0.1}
	for _, h := range newTargetModels(t, ctrv, Mount{X: 1}) {
		z, H, d := make([]float64, 3), make([]float64, 15), make([]float64, 3)
		if a := testing.AllocsPerRun(50, func() {
			_ = h.SetPlatform(Platform{X: 1, VX: 2, YawRate: 0.1})
			h.Predict(z, x)
			h.Jacobian(H, x)
			h.Residual(d, z, z)
		}); a != 0 {
			t.Errorf("%T: %v allocs", h, a)
		}
	}
}

func BenchmarkRangeBearingRatePredictJacobian(b *testing.B) {
	ctrv := mustCTRV(b, 1, 1)
	h, _ := NewRangeBearingRate(ctrv, Mount{X: 3.6})
	_ = h.SetPlatform(Platform{VX: 3, YawRate: 0.1})
	x := []float64{20, 5, 3, 0.2, 0.1}
	z, H := make([]float64, 3), make([]float64, 15)
	b.ReportAllocs()
	for b.Loop() {
		h.Predict(z, x)
		h.Jacobian(H, x)
	}
}

// PlatformJacobian against central finite differences in the platform pose
// (x, y, yaw), with a moving, turning platform and an offset mount.
func TestPlatformJacobians(t *testing.T) {
	ctrv := mustCTRV(t, 1, 1)
	rapid.Check(t, func(rt *rapid.T) {
		mount := Mount{X: rapid.Float64Range(-3, 5).Draw(rt, "mx"), Y: rapid.Float64Range(-2, 2).Draw(rt, "my"),
			Yaw: rapid.Float64Range(-math.Pi, math.Pi).Draw(rt, "myaw")}
		plat := Platform{X: rapid.Float64Range(-50, 50).Draw(rt, "px"), Y: rapid.Float64Range(-50, 50).Draw(rt, "py"),
			Yaw: rapid.Float64Range(-math.Pi, math.Pi).Draw(rt, "pyaw"),
			VX:  rapid.Float64Range(-10, 10).Draw(rt, "vx"), VY: rapid.Float64Range(-10, 10).Draw(rt, "vy"),
			YawRate: rapid.Float64Range(-1, 1).Draw(rt, "w")}
		for _, h := range newTargetModels(rt, ctrv, mount) {
			ts := h.(TargetSensor)
			_ = h.SetPlatform(plat)
			f := h.(interface {
				ToSite(xs, ys float64) (float64, float64)
			})
			rng := rapid.Float64Range(5, 80).Draw(rt, "range")
			brg := rapid.Float64Range(-1.2, 1.2).Draw(rt, "bearing")
			x := []float64{0, 0, rapid.Float64Range(-10, 10).Draw(rt, "v"), rapid.Float64Range(-3, 3).Draw(rt, "yaw"), 0.2}
			x[0], x[1] = f.ToSite(rng*math.Cos(brg), rng*math.Sin(brg))
			m := h.Dim()
			got := make([]float64, m*3)
			ts.PlatformJacobian(got, x)
			zp, zm, d := make([]float64, m), make([]float64, m), make([]float64, m)
			for j := 0; j < 3; j++ {
				const step = 1e-6
				pp, pm := plat, plat
				switch j {
				case 0:
					pp.X, pm.X = plat.X+step, plat.X-step
				case 1:
					pp.Y, pm.Y = plat.Y+step, plat.Y-step
				case 2:
					pp.Yaw, pm.Yaw = plat.Yaw+step, plat.Yaw-step
				}
				_ = h.SetPlatform(pp)
				h.Predict(zp, x)
				_ = h.SetPlatform(pm)
				h.Predict(zm, x)
				h.Residual(d, zp, zm)
				for i := 0; i < m; i++ {
					want := d[i] / (2 * step)
					if diff := math.Abs(got[i*3+j] - want); diff > 1e-5*math.Max(1, math.Abs(want)) {
						rt.Fatalf("%T: ∂z[%d]/∂pose[%d] = %v, finite difference %v", h, i, j, got[i*3+j], want)
					}
				}
			}
			_ = h.SetPlatform(plat)
		}
	})
}
