package bench

import (
	"errors"
	"fmt"
	"math"
	"math/rand/v2"
	"runtime"
	"time"

	"github.com/godwit-fusion/godwit/filters"
	"github.com/godwit-fusion/godwit/filters/models"
	"github.com/godwit-fusion/godwit/filters/particle"
	"gonum.org/v1/gonum/mat"
)

// Timing is one measured loop: wall ns per operation and heap allocations
// per operation (runtime.MemStats.Mallocs before and after).
type Timing struct {
	N           int
	NsPerOp     float64
	AllocsPerOp float64
}

// Measure runs op in a loop long enough to take about d (after one warm-up
// call and a short calibration) and reports ns/op and allocs/op. op gets
// the iteration index.
func Measure(d time.Duration, op func(i int) error) (Timing, error) {
	if err := op(0); err != nil {
		return Timing{}, err
	}
	n := 1
	for {
		t0 := time.Now()
		for i := 0; i < n; i++ {
			if err := op(i); err != nil {
				return Timing{}, err
			}
		}
		el := time.Since(t0)
		if el >= d/10 || n >= 1<<30 {
			// Scale to the target duration from this calibration.
			if el > 0 {
				n = int(math.Min(float64(n)*float64(d)/float64(el), 1<<30))
			}
			break
		}
		n *= 4
	}
	n = max(n, 1)
	var m0, m1 runtime.MemStats
	runtime.GC()
	runtime.ReadMemStats(&m0)
	t0 := time.Now()
	for i := 0; i < n; i++ {
		if err := op(i); err != nil {
			return Timing{}, err
		}
	}
	el := time.Since(t0)
	runtime.ReadMemStats(&m1)
	return Timing{N: n, NsPerOp: float64(el.Nanoseconds()) / float64(n),
		AllocsPerOp: float64(m1.Mallocs-m0.Mallocs) / float64(n)}, nil
}

const filterDt = 0.05
const filterSteps = 2000

// filterProblem is one track's measurement sequence from a known truth.
type filterProblem struct {
	f      filters.MotionModel
	h      filters.MeasurementModel
	Rs, R  []float64
	x0, S0 []float64
	zs     [][]float64
}

// ctrvProblem: a yard tractor on a 25 m circle (5 m/s, 0.2 rad/s) seen by a
// fixed range_bearing_rate radar at the origin.
func ctrvProblem() (filterProblem, error) {
	f, err := models.NewCTRV(1.5, 0.6)
	if err != nil {
		return filterProblem{}, err
	}
	h, err := models.NewRangeBearingRate(f, models.Mount{})
	if err != nil {
		return filterProblem{}, err
	}
	sd := []float64{0.3, 0.01, 0.15}
	p := filterProblem{f: f, h: h, Rs: make([]float64, 9), R: make([]float64, 9),
		x0: []float64{20.5, 9.5, 4, 0.1, 0.1}, S0: diag(1, 1, 1, 0.3, 0.2)}
	if err := models.DiagSqrt(p.Rs, sd); err != nil {
		return filterProblem{}, err
	}
	for i := range sd {
		p.R[i*3+i] = sd[i] * sd[i]
	}
	rng := rand.New(rand.NewPCG(71, 72))
	truth, next := []float64{20, 10, 5, 0, 0.2}, make([]float64, 5)
	for k := 0; k < filterSteps; k++ {
		f.Propagate(next, truth, filterDt)
		copy(truth, next)
		z := make([]float64, 3)
		h.Predict(z, truth)
		for i := range z {
			z[i] += sd[i] * rng.NormFloat64()
		}
		p.zs = append(p.zs, z)
	}
	return p, nil
}

// cvProblem: a warehouse robot driving straight at 5 m/s, position fixes
// with 0.5 m s.d.
func cvProblem() (filterProblem, error) {
	f, err := models.NewCV(1.0)
	if err != nil {
		return filterProblem{}, err
	}
	h, err := models.NewPositionXY(f, models.Mount{})
	if err != nil {
		return filterProblem{}, err
	}
	p := filterProblem{f: f, h: h, Rs: diag(0.5, 0.5), R: diag(0.25, 0.25),
		x0: []float64{1, -1, 4, 3}, S0: diag(2, 2, 2, 2)}
	rng := rand.New(rand.NewPCG(73, 74))
	for k := 0; k < filterSteps; k++ {
		t := float64(k+1) * filterDt
		p.zs = append(p.zs, []float64{4*t + 0.5*rng.NormFloat64(), 3*t + 0.5*rng.NormFloat64()})
	}
	return p, nil
}

func diag(v ...float64) []float64 {
	n := len(v)
	d := make([]float64, n*n)
	for i, x := range v {
		d[i*n+i] = x
	}
	return d
}

// stepper is one filter driven through predict + update of one measurement.
type stepper interface {
	reset() error
	step(z []float64) error
}

type sqrtStepper struct {
	kf filters.Filter
	p  *filterProblem
}

func (s *sqrtStepper) reset() error { return s.kf.Init(s.p.x0, s.p.S0) }
func (s *sqrtStepper) step(z []float64) error {
	if err := s.kf.Predict(filterDt); err != nil {
		return err
	}
	if err := s.kf.Prepare(s.p.h, s.p.Rs); err != nil {
		return err
	}
	_, err := s.kf.Update(z)
	return err
}

func measureStepper(d time.Duration, s stepper, p *filterProblem) (Timing, error) {
	if err := s.reset(); err != nil {
		return Timing{}, err
	}
	k := 0
	return Measure(d, func(int) error {
		if k == filterSteps {
			k = 0
			if err := s.reset(); err != nil {
				return err
			}
		}
		k++
		return s.step(p.zs[k-1])
	})
}

// FilterRows measures one predict + update of a single track for each
// square-root filter and its plain covariance-form baseline, side by side.
func FilterRows(d time.Duration) ([]Row, error) {
	cv, err := cvProblem()
	if err != nil {
		return nil, err
	}
	ct, err := ctrvProblem()
	if err != nil {
		return nil, err
	}
	srkf, err := filters.NewSRKF(cv.f)
	if err != nil {
		return nil, err
	}
	srukf, err := filters.NewSRUKF(ct.f, filters.DefaultUTParams())
	if err != nil {
		return nil, err
	}
	pf, err := particle.New(ct.f, particle.Config{Particles: 500, Seed1: 1, Seed2: 2})
	if err != nil {
		return nil, err
	}
	kfBase := &plainKF{p: &cv}
	ukfBase := &plainUKF{p: &ct, ut: filters.DefaultUTParams()}
	type pair struct {
		name, base string
		s, b       stepper
		p          *filterProblem
	}
	pairs := []pair{
		{"SR-KF step, CV + position_xy", "plain KF", &sqrtStepper{srkf, &cv}, kfBase, &cv},
		{"SR-UKF step, CTRV + range_bearing_rate", "plain UKF", &sqrtStepper{srukf, &ct}, ukfBase, &ct},
		{"particle step (500), CTRV + range_bearing_rate", "plain UKF", &sqrtStepper{pf, &ct}, ukfBase, &ct},
	}
	var rows []Row
	for _, pr := range pairs {
		ts, err := measureStepper(d, pr.s, pr.p)
		if err != nil {
			return rows, fmt.Errorf("bench: %s: %w", pr.name, err)
		}
		tb, err := measureStepper(d, pr.b, pr.p)
		if err != nil {
			return rows, fmt.Errorf("bench: %s baseline: %w", pr.name, err)
		}
		r := Row{Section: "filter", Name: pr.name, Note: "ratio = ns/op ÷ " + pr.base + " (gonum mat, covariance form)"}
		r.add("ns/op", ts.NsPerOp, "")
		r.add("allocs/op", ts.AllocsPerOp, "")
		r.add("base ns/op", tb.NsPerOp, "")
		r.add("base allocs/op", tb.AllocsPerOp, "")
		r.add("ratio", ts.NsPerOp/tb.NsPerOp, "")
		rows = append(rows, r)
	}
	return rows, nil
}

var errNotPD = errors.New("bench: baseline covariance not positive definite")

// plainKF is the textbook covariance-form Kalman filter (Kalman 1960) written
// straightforwardly with gonum mat, allocating as such code does:
//
//	x = F x,  P = F P Fᵀ + Q;  S = H P Hᵀ + R,  K = P Hᵀ S⁻¹,
//	x = x + K (z − H x),  P = (I − K H) P.
type plainKF struct {
	p *filterProblem
	x *mat.VecDense
	P *mat.Dense
}

func (k *plainKF) reset() error {
	n := k.p.f.Dim()
	k.x = mat.NewVecDense(n, append([]float64(nil), k.p.x0...))
	S := mat.NewDense(n, n, append([]float64(nil), k.p.S0...))
	k.P = mat.NewDense(n, n, nil)
	k.P.Mul(S, S.T())
	return nil
}

func (k *plainKF) step(z []float64) error {
	f, h := k.p.f, k.p.h
	n, m := f.Dim(), h.Dim()
	Fd := make([]float64, n*n)
	f.Jacobian(Fd, k.x.RawVector().Data, filterDt)
	F := mat.NewDense(n, n, Fd)
	xp := make([]float64, n)
	f.Propagate(xp, k.x.RawVector().Data, filterDt)
	Gd := make([]float64, n*n)
	f.NoiseFactor(Gd, k.x.RawVector().Data, filterDt)
	G := mat.NewDense(n, n, Gd)
	var FP, P, Q mat.Dense
	FP.Mul(F, k.P)
	P.Mul(&FP, F.T())
	Q.Mul(G, G.T())
	P.Add(&P, &Q)
	Hd := make([]float64, m*n)
	h.Jacobian(Hd, xp)
	H := mat.NewDense(m, n, Hd)
	var HP, S, PHt mat.Dense
	HP.Mul(H, &P)
	S.Mul(&HP, H.T())
	S.Add(&S, mat.NewDense(m, m, k.p.R))
	var Si mat.Dense
	if err := Si.Inverse(&S); err != nil {
		return errNotPD
	}
	PHt.Mul(&P, H.T())
	var K mat.Dense
	K.Mul(&PHt, &Si)
	zh := make([]float64, m)
	h.Predict(zh, xp)
	y := make([]float64, m)
	h.Residual(y, z, zh)
	var dx mat.VecDense
	dx.MulVec(&K, mat.NewVecDense(m, y))
	x := mat.NewVecDense(n, xp)
	x.AddVec(x, &dx)
	var KH, IKH mat.Dense
	KH.Mul(&K, H)
	I := mat.NewDiagDense(n, nil)
	for i := 0; i < n; i++ {
		I.SetDiag(i, 1)
	}
	IKH.Sub(I, &KH)
	var Pn mat.Dense
	Pn.Mul(&IKH, &P)
	k.x, k.P = x, &Pn
	return nil
}

// plainUKF is the covariance-form unscented Kalman filter with scaled sigma
// points (Julier & Uhlmann 1997; Wan & van der Merwe 2000, eq. 15 for the
// weights), written straightforwardly with gonum mat: sigma points from a
// Cholesky factor of P at each step, P itself kept between steps.
type plainUKF struct {
	p  *filterProblem
	ut filters.UTParams
	x  []float64
	P  *mat.SymDense
}

func (u *plainUKF) reset() error {
	n := u.p.f.Dim()
	u.x = append([]float64(nil), u.p.x0...)
	S := mat.NewDense(n, n, append([]float64(nil), u.p.S0...))
	var P mat.Dense
	P.Mul(S, S.T())
	u.P = mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			u.P.SetSym(i, j, P.At(i, j))
		}
	}
	return nil
}

func (u *plainUKF) weights() (lambda, wm0, wc0, wi float64) {
	n := float64(u.p.f.Dim())
	a := u.ut.Alpha
	lambda = a*a*(n+u.ut.Kappa) - n
	wm0 = lambda / (n + lambda)
	wc0 = wm0 + 1 - a*a + u.ut.Beta
	wi = 1 / (2 * (n + lambda))
	return
}

func (u *plainUKF) sigma(x []float64, P *mat.SymDense) ([][]float64, error) {
	n := len(x)
	var ch mat.Cholesky
	if !ch.Factorize(P) {
		return nil, errNotPD
	}
	var L mat.TriDense
	ch.LTo(&L)
	lambda, _, _, _ := u.weights()
	g := math.Sqrt(float64(n) + lambda)
	pts := make([][]float64, 2*n+1)
	pts[0] = append([]float64(nil), x...)
	for i := 0; i < n; i++ {
		a, b := make([]float64, n), make([]float64, n)
		for r := 0; r < n; r++ {
			a[r] = x[r] + g*L.At(r, i)
			b[r] = x[r] - g*L.At(r, i)
		}
		pts[1+i], pts[1+n+i] = a, b
	}
	return pts, nil
}

func (u *plainUKF) step(z []float64) error {
	f, h := u.p.f, u.p.h
	n, m := f.Dim(), h.Dim()
	_, wm0, wc0, wi := u.weights()
	w := func(i int) (float64, float64) {
		if i == 0 {
			return wm0, wc0
		}
		return wi, wi
	}
	// Predict.
	X, err := u.sigma(u.x, u.P)
	if err != nil {
		return err
	}
	Y := make([][]float64, len(X))
	for i := range X {
		Y[i] = make([]float64, n)
		f.Propagate(Y[i], X[i], filterDt)
	}
	xm := append([]float64(nil), Y[0]...)
	d := make([]float64, n)
	for i := 1; i < len(Y); i++ {
		f.Residual(d, Y[i], Y[0])
		wm, _ := w(i)
		for r := range xm {
			xm[r] += wm * d[r]
		}
	}
	f.Normalize(xm)
	P := mat.NewSymDense(n, nil)
	for i := range Y {
		f.Residual(d, Y[i], xm)
		_, wc := w(i)
		P.SymRankOne(P, wc, mat.NewVecDense(n, append([]float64(nil), d...)))
	}
	Gd := make([]float64, n*n)
	f.NoiseFactor(Gd, u.x, filterDt)
	var Q mat.SymDense
	Q.SymOuterK(1, mat.NewDense(n, n, Gd))
	P.AddSym(P, &Q)
	// Update, from fresh sigma points of the predicted state.
	X, err = u.sigma(xm, P)
	if err != nil {
		return err
	}
	Z := make([][]float64, len(X))
	for i := range X {
		Z[i] = make([]float64, m)
		h.Predict(Z[i], X[i])
	}
	zh := append([]float64(nil), Z[0]...)
	e := make([]float64, m)
	for i := 1; i < len(Z); i++ {
		h.Residual(e, Z[i], Z[0])
		wm, _ := w(i)
		for r := range zh {
			zh[r] += wm * e[r]
		}
	}
	Pzz := mat.NewSymDense(m, append([]float64(nil), u.p.R...))
	Pxz := mat.NewDense(n, m, nil)
	for i := range Z {
		dz, dx := make([]float64, m), make([]float64, n)
		h.Residual(dz, Z[i], zh)
		f.Residual(dx, X[i], xm)
		_, wc := w(i)
		Pzz.SymRankOne(Pzz, wc, mat.NewVecDense(m, dz))
		var o mat.Dense
		o.Outer(wc, mat.NewVecDense(n, dx), mat.NewVecDense(m, dz))
		Pxz.Add(Pxz, &o)
	}
	var Pi mat.Dense
	if err := Pi.Inverse(Pzz); err != nil {
		return errNotPD
	}
	var K mat.Dense
	K.Mul(Pxz, &Pi)
	y := make([]float64, m)
	h.Residual(y, z, zh)
	var dx mat.VecDense
	dx.MulVec(&K, mat.NewVecDense(m, y))
	for r := range xm {
		xm[r] += dx.AtVec(r)
	}
	f.Normalize(xm)
	// P = P − K Pzz Kᵀ, symmetrised.
	var KP, KPK mat.Dense
	KP.Mul(&K, Pzz)
	KPK.Mul(&KP, K.T())
	Pn := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			Pn.SetSym(i, j, P.At(i, j)-0.5*(KPK.At(i, j)+KPK.At(j, i)))
		}
	}
	u.x, u.P = xm, Pn
	return nil
}
