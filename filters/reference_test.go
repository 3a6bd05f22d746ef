package filters_test

import (
	"errors"
	"math"

	"gonum.org/v1/gonum/mat"

	"github.com/godwit-fusion/godwit/filters"
)

// The covariance-form filters below are written plainly with gonum mat, as
// such code usually is (allocating on every step). They are the references
// the square-root filters are checked against, and plainUKF is also the
// performance baseline of the benchmarks.

// ekfRef is the textbook (extended) Kalman filter in covariance form
// (Kalman 1960; the EKF linearises f and h about the current mean):
//
//	predict: x = f(x), P = F·P·Fᵀ + Q
//	update:  y = z ⊖ h(x), S = H·P·Hᵀ + R, K = P·Hᵀ·S⁻¹,
//	         x = x + K·y,  P = P − K·H·P (the "plain" form).
type ekfRef struct {
	f filters.MotionModel
	x *mat.VecDense
	P *mat.SymDense
}

func newEKFRef(f filters.MotionModel, x0, P0 []float64) *ekfRef {
	n := f.Dim()
	return &ekfRef{f: f, x: mat.NewVecDense(n, append([]float64(nil), x0...)), P: mat.NewSymDense(n, append([]float64(nil), P0...))}
}

func (r *ekfRef) predict(dt float64) {
	n := r.f.Dim()
	xd := make([]float64, n)
	Fd := make([]float64, n*n)
	Gd := make([]float64, n*n)
	r.f.Jacobian(Fd, r.x.RawVector().Data, dt)
	r.f.NoiseFactor(Gd, r.x.RawVector().Data, dt)
	r.f.Propagate(xd, r.x.RawVector().Data, dt)
	F := mat.NewDense(n, n, Fd)
	G := mat.NewDense(n, n, Gd)
	var FP, FPFt, Q mat.Dense
	FP.Mul(F, r.P)
	FPFt.Mul(&FP, F.T())
	Q.Mul(G, G.T())
	FPFt.Add(&FPFt, &Q)
	r.x = mat.NewVecDense(n, xd)
	r.P = symOf(&FPFt)
}

func (r *ekfRef) update(h filters.MeasurementModel, R []float64, z []float64) (nis float64) {
	nis, err := r.tryUpdate(h, R, z)
	if err != nil {
		panic(err)
	}
	return nis
}

// tryUpdate is update that reports an innovation covariance gonum cannot
// invert instead of panicking.
func (r *ekfRef) tryUpdate(h filters.MeasurementModel, R []float64, z []float64) (nis float64, err error) {
	n, m := r.f.Dim(), h.Dim()
	zh := make([]float64, m)
	Hd := make([]float64, m*n)
	h.Predict(zh, r.x.RawVector().Data)
	h.Jacobian(Hd, r.x.RawVector().Data)
	y := make([]float64, m)
	h.Residual(y, z, zh)
	H := mat.NewDense(m, n, Hd)
	var PHt, S, Sinv, K, KHP mat.Dense
	PHt.Mul(r.P, H.T())
	S.Mul(H, &PHt)
	S.Add(&S, mat.NewDense(m, m, R))
	if err := Sinv.Inverse(&S); err != nil {
		var c mat.Condition
		if !errors.As(err, &c) || math.IsInf(float64(c), 1) {
			return 0, err
		}
		// Ill-conditioned but invertible: carry on as plain code would.
	}
	K.Mul(&PHt, &Sinv)
	yv := mat.NewVecDense(m, y)
	var t mat.VecDense
	t.MulVec(&Sinv, yv)
	nis = mat.Dot(yv, &t)
	var dx mat.VecDense
	dx.MulVec(&K, mat.NewVecDense(m, y))
	xn := make([]float64, n)
	for i := range xn {
		xn[i] = r.x.AtVec(i) + dx.AtVec(i)
	}
	r.f.Normalize(xn)
	KHP.Mul(&K, PHt.T())
	var P mat.Dense
	P.Sub(r.P, &KHP)
	r.x = mat.NewVecDense(n, xn)
	r.P = symOf(&P)
	return nis, nil
}

// symOf symmetrises A into a SymDense by averaging, as covariance code
// usually does after each step.
func symOf(A *mat.Dense) *mat.SymDense {
	n, _ := A.Dims()
	S := mat.NewSymDense(n, nil)
	for i := 0; i < n; i++ {
		for j := i; j < n; j++ {
			S.SetSym(i, j, 0.5*(A.At(i, j)+A.At(j, i)))
		}
	}
	return S
}

// plainUKF is the covariance-form unscented Kalman filter with the scaled
// sigma points of Wan & van der Merwe 2000 (eq. 15) and additive noise:
//
//	X = [x, x + γ·√P_i, x − γ·√P_i],  √P the Cholesky factor of P,
//	x̄ = Σ W_m,i Y_i,  P = Σ W_c,i (Y_i − x̄)(Y_i − x̄)ᵀ + Q,
//	P_zz = Σ W_c,i (Z_i − ẑ)(Z_i − ẑ)ᵀ + R,  P_xz = Σ W_c,i (X_i − x)(Z_i − ẑ)ᵀ,
//	K = P_xz·P_zz⁻¹,  x = x + K·(z − ẑ),  P = P − K·P_zz·Kᵀ.
//
// Differences are angle-safe in the same way as the square-root filter
// (model Residual relative to the zeroth point), so the two can be compared.
type plainUKF struct {
	f                   filters.MotionModel
	alpha, beta, kappa  float64
	x                   *mat.VecDense
	P                   *mat.SymDense
	lambda, wm0, wc0, w float64
}

var errNotPD = errors.New("plain UKF: covariance not positive definite")

func newPlainUKF(f filters.MotionModel, p filters.UTParams, x0, P0 []float64) *plainUKF {
	n := float64(f.Dim())
	u := &plainUKF{f: f, alpha: p.Alpha, beta: p.Beta, kappa: p.Kappa}
	u.lambda = p.Alpha*p.Alpha*(n+p.Kappa) - n
	u.wm0 = u.lambda / (n + u.lambda)
	u.wc0 = u.wm0 + 1 - p.Alpha*p.Alpha + p.Beta
	u.w = 1 / (2 * (n + u.lambda))
	u.x = mat.NewVecDense(f.Dim(), append([]float64(nil), x0...))
	u.P = mat.NewSymDense(f.Dim(), append([]float64(nil), P0...))
	return u
}

func (u *plainUKF) sigma() ([][]float64, error) {
	n := u.f.Dim()
	var ch mat.Cholesky
	if !ch.Factorize(u.P) {
		return nil, errNotPD
	}
	var L mat.TriDense
	ch.LTo(&L)
	g := math.Sqrt(float64(n) + u.lambda)
	pts := make([][]float64, 2*n+1)
	pts[0] = append([]float64(nil), u.x.RawVector().Data...)
	for i := 0; i < n; i++ {
		p := make([]float64, n)
		q := make([]float64, n)
		for r := 0; r < n; r++ {
			p[r] = u.x.AtVec(r) + g*L.At(r, i)
			q[r] = u.x.AtVec(r) - g*L.At(r, i)
		}
		pts[1+i] = p
		pts[1+n+i] = q
	}
	return pts, nil
}

func (u *plainUKF) weights(i int) (wm, wc float64) {
	if i == 0 {
		return u.wm0, u.wc0
	}
	return u.w, u.w
}

func (u *plainUKF) predict(dt float64) error {
	n := u.f.Dim()
	X, err := u.sigma()
	if err != nil {
		return err
	}
	Y := make([][]float64, len(X))
	for i := range X {
		Y[i] = make([]float64, n)
		u.f.Propagate(Y[i], X[i], dt)
	}
	mean := mat.NewVecDense(n, append([]float64(nil), Y[0]...))
	d := make([]float64, n)
	for i := 1; i < len(Y); i++ {
		u.f.Residual(d, Y[i], Y[0])
		wm, _ := u.weights(i)
		mean.AddScaledVec(mean, wm, mat.NewVecDense(n, d))
	}
	u.f.Normalize(mean.RawVector().Data)
	P := mat.NewSymDense(n, nil)
	for i := range Y {
		dd := make([]float64, n)
		u.f.Residual(dd, Y[i], mean.RawVector().Data)
		_, wc := u.weights(i)
		P.SymRankOne(P, wc, mat.NewVecDense(n, dd))
	}
	Gd := make([]float64, n*n)
	u.f.NoiseFactor(Gd, u.x.RawVector().Data, dt)
	G := mat.NewDense(n, n, Gd)
	var Q mat.SymDense
	Q.SymOuterK(1, G)
	P.AddSym(P, &Q)
	u.x, u.P = mean, P
	return nil
}

func (u *plainUKF) update(h filters.MeasurementModel, R []float64, z []float64) (nis float64, err error) {
	n, m := u.f.Dim(), h.Dim()
	X, err := u.sigma()
	if err != nil {
		return 0, err
	}
	Z := make([][]float64, len(X))
	for i := range X {
		Z[i] = make([]float64, m)
		h.Predict(Z[i], X[i])
	}
	zh := mat.NewVecDense(m, append([]float64(nil), Z[0]...))
	e := make([]float64, m)
	for i := 1; i < len(Z); i++ {
		h.Residual(e, Z[i], Z[0])
		wm, _ := u.weights(i)
		zh.AddScaledVec(zh, wm, mat.NewVecDense(m, e))
	}
	Pzz := mat.NewSymDense(m, append([]float64(nil), R...))
	Pxz := mat.NewDense(n, m, nil)
	for i := range Z {
		dz := make([]float64, m)
		h.Residual(dz, Z[i], zh.RawVector().Data)
		dx := make([]float64, n)
		u.f.Residual(dx, X[i], u.x.RawVector().Data)
		_, wc := u.weights(i)
		Pzz.SymRankOne(Pzz, wc, mat.NewVecDense(m, dz))
		var o mat.Dense
		o.Outer(wc, mat.NewVecDense(n, dx), mat.NewVecDense(m, dz))
		Pxz.Add(Pxz, &o)
	}
	var Pinv mat.Dense
	if err := Pinv.Inverse(Pzz); err != nil {
		return 0, err
	}
	var K mat.Dense
	K.Mul(Pxz, &Pinv)
	y := make([]float64, m)
	h.Residual(y, z, zh.RawVector().Data)
	yv := mat.NewVecDense(m, y)
	var t mat.VecDense
	t.MulVec(&Pinv, yv)
	nis = mat.Dot(yv, &t)
	var dx mat.VecDense
	dx.MulVec(&K, yv)
	xn := mat.NewVecDense(n, nil)
	xn.AddVec(u.x, &dx)
	u.f.Normalize(xn.RawVector().Data)
	var KP, KPK mat.Dense
	KP.Mul(&K, Pzz)
	KPK.Mul(&KP, K.T())
	var P mat.Dense
	P.Sub(u.P, &KPK)
	u.x, u.P = xn, symOf(&P)
	return nis, nil
}
