package particle

import (
	"math"
	"math/rand/v2"
	"slices"
	"testing"

	"github.com/godwit-fusion/godwit/filters"
	"github.com/godwit-fusion/godwit/filters/models"
	"gonum.org/v1/gonum/mat"
	"pgregory.net/rapid"
)

// kalman is the plain covariance-form Kalman filter (Kalman 1960), written
// straightforwardly with gonum mat as the reference:
//
//	predict  x = F·x,  P = F·P·Fᵀ + Q
//	update   K = P·Hᵀ·(H·P·Hᵀ + R)⁻¹,  x += K·(z − H·x),  P = (I − K·H)·P
type kalman struct {
	x       *mat.VecDense
	P       *mat.Dense
	F, Q, H *mat.Dense
	R       *mat.Dense
}

func (k *kalman) predict() {
	var x mat.VecDense
	x.MulVec(k.F, k.x)
	k.x = &x
	var fp, p mat.Dense
	fp.Mul(k.F, k.P)
	p.Mul(&fp, k.F.T())
	p.Add(&p, k.Q)
	k.P = &p
}

func (k *kalman) update(z []float64) {
	var hp, s, sInv, pht, K mat.Dense
	hp.Mul(k.H, k.P)
	s.Mul(&hp, k.H.T())
	s.Add(&s, k.R)
	if err := sInv.Inverse(&s); err != nil {
		panic(err)
	}
	pht.Mul(k.P, k.H.T())
	K.Mul(&pht, &sInv)
	var hx, nu, dx mat.VecDense
	hx.MulVec(k.H, k.x)
	nu.SubVec(mat.NewVecDense(len(z), z), &hx)
	dx.MulVec(&K, &nu)
	k.x.AddVec(k.x, &dx)
	var kh, ikh, p mat.Dense
	kh.Mul(&K, k.H)
	r, _ := kh.Dims()
	ikh.Sub(eye(r), &kh)
	p.Mul(&ikh, k.P)
	k.P = &p
}

func eye(n int) *mat.Dense {
	d := mat.NewDense(n, n, nil)
	for i := 0; i < n; i++ {
		d.Set(i, i, 1)
	}
	return d
}

// cvQ is the CWNA process noise of Bar-Shalom, Li & Kirubarajan 2001,
// eq. 6.2.2-12, written out per axis for the state [px, py, vx, vy].
func cvQ(q, T float64) *mat.Dense {
	a, b, c := q*T*T*T/3, q*T*T/2, q*T
	return mat.NewDense(4, 4, []float64{
		a, 0, b, 0,
		0, a, 0, b,
		b, 0, c, 0,
		0, b, 0, c,
	})
}

// With many particles the SIR filter approximates the exact posterior, which
// on a linear-Gaussian model is the Kalman filter's.
//
// Tolerance: the Monte Carlo error of a particle filter's estimate is
// asymptotically normal with variance c/N (Chopin 2004, "Central limit
// theorem for sequential Monte Carlo methods", Ann. Statist. 32(6)), where c
// sums the contributions of every earlier step and is not known in closed
// form (the one-step figure P/ESS of Kong, Liu & Wong 1994 underestimates it
// once resampling noise has accumulated in the weakly observed velocities).
// So we measure it: R = 16 independent replicates on the same measurements
// give a mean and a standard error s/√R for every mean and covariance
// entry; the bias of the SIR estimates is O(1/N) (Chopin 2004), far below
// that standard error. The replicate mean must lie within 6 standard errors
// of the Kalman value: Student t with 15 dof exceeds 6 with probability
// 2.4e-5, so over the 12×14 comparisons a correct filter fails with
// probability below 0.5%, while a biased one (wrong noise, wrong weights)
// fails by tens of standard errors. A second check bounds the spread itself:
// the replicates' s.d. of each mean must stay below 0.15·√Pᵢᵢ, so the
// approximation is close, not merely unbiased. (Independent sampling would
// give 1/√N ≈ 0.016; a bootstrap filter loses diversity in the weakly
// observed velocities and we measure about 0.06. With 16 replicates the
// s.d. estimate itself is within ±18% (1σ), so 0.15 is a loose bound.)
func TestMatchesKalmanOnLinearGaussian(t *testing.T) {
	const (
		R     = 16
		N     = 4000
		steps = 12
		T     = 0.5
		acc   = 0.5
		rsd   = 1.0
	)
	x0 := []float64{0, 0, 1, 0.5}
	S0 := []float64{2, 0, 0, 0, 0, 2, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1}
	kf := &kalman{
		x: mat.NewVecDense(4, slices.Clone(x0)),
		P: mat.NewDense(4, 4, []float64{4, 0, 0, 0, 0, 4, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1}),
		F: mat.NewDense(4, 4, []float64{1, 0, T, 0, 0, 1, 0, T, 0, 0, 1, 0, 0, 0, 0, 1}),
		Q: cvQ(acc*acc, T),
		H: mat.NewDense(2, 4, []float64{1, 0, 0, 0, 0, 1, 0, 0}),
		R: mat.NewDense(2, 2, []float64{rsd * rsd, 0, 0, rsd * rsd}),
	}
	// Invented scenario: a warehouse robot cruising at (1, 0.5) m/s.
	truth := rand.New(rand.NewPCG(3, 3))
	tx := []float64{0.5, -0.3, 1, 0.5}
	zs := make([][]float64, steps)
	kx := make([][]float64, steps)
	kP := make([][]float64, steps)
	for k := range zs {
		tx[0] += T * tx[2]
		tx[1] += T * tx[3]
		zs[k] = []float64{tx[0] + rsd*truth.NormFloat64(), tx[1] + rsd*truth.NormFloat64()}
		kf.predict()
		kf.update(zs[k])
		kx[k] = slices.Clone(kf.x.RawVector().Data)
		kP[k] = slices.Clone(kf.P.RawMatrix().Data)
	}
	// est[k][0:4] = mean, est[k][4:20] = covariance, per replicate.
	est := make([][][20]float64, steps)
	for k := range est {
		est[k] = make([][20]float64, R)
	}
	Rs := []float64{rsd, 0, 0, rsd}
	P := make([]float64, 16)
	for rep := 0; rep < R; rep++ {
		cv, _ := models.NewCV(acc)
		pos, _ := models.NewPositionXY(cv, models.Mount{})
		var motion filters.MotionModel = cv
		if rep%2 == 1 {
			// Half the replicates sample through NoiseFactor's G instead
			// of the model's PropagateNoisy fast path.
			motion = onlyMotion{cv}
		}
		pf, err := New(motion, Config{Particles: N, ResampleBelow: 0.5, Seed1: uint64(rep), Seed2: 99})
		if err != nil {
			t.Fatal(err)
		}
		if err := pf.Init(x0, S0); err != nil {
			t.Fatal(err)
		}
		for k := 0; k < steps; k++ {
			if err := pf.Predict(T); err != nil {
				t.Fatal(err)
			}
			if err := pf.Prepare(pos, Rs); err != nil {
				t.Fatal(err)
			}
			if _, err := pf.Update(zs[k]); err != nil {
				t.Fatal(err)
			}
			st := pf.State()
			st.Covariance(P)
			copy(est[k][rep][:4], st.X)
			copy(est[k][rep][4:], P)
		}
	}
	worst, worstSpread := 0.0, 0.0
	for k := 0; k < steps; k++ {
		want := slices.Concat(kx[k], kP[k])
		for e := 0; e < 20; e++ {
			if e >= 4 && (e-4)/4 < (e-4)%4 {
				continue // covariance: lower triangle only
			}
			var mu, ss float64
			for rep := 0; rep < R; rep++ {
				mu += est[k][rep][e]
			}
			mu /= R
			for rep := 0; rep < R; rep++ {
				d := est[k][rep][e] - mu
				ss += d * d
			}
			se := math.Sqrt(ss/(R-1)) / math.Sqrt(R)
			if e < 4 {
				spread := math.Sqrt(ss/(R-1)) / math.Sqrt(kP[k][e*4+e])
				worstSpread = math.Max(worstSpread, spread)
				if spread > 0.15 {
					t.Errorf("step %d mean[%d]: replicate s.d. %.3f·√P, want ≤ 0.15", k, e, spread)
				}
			}
			tstat := math.Abs(mu-want[e]) / se
			worst = math.Max(worst, tstat)
			if tstat > 6 {
				t.Errorf("step %d element %d: replicate mean %.5f, KF %.5f, %.1f standard errors", k, e, mu, want[e], tstat)
			}
		}
	}
	t.Logf("%d replicates × %d particles: worst |t| = %.2f, worst replicate s.d. %.3f·√P", R, N, worst, worstSpread)
}

// onlyMotion hides a model's optional sampling fast path.
type onlyMotion struct{ filters.MotionModel }

// Systematic resampling keeps particle i ⌊N·wᵢ⌋ or ⌈N·wᵢ⌉ times (a known
// property of the scheme; Douc, Cappé & Moulines 2005, "Comparison of
// resampling schemes for particle filtering").
func TestSystematicResampleCounts(t *testing.T) {
	rapid.Check(t, func(rt *rapid.T) {
		np := rapid.IntRange(2, 60).Draw(rt, "N")
		cv, _ := models.NewCV(1)
		p, err := New(cv, Config{Particles: np, Seed1: rapid.Uint64().Draw(rt, "seed")})
		if err != nil {
			rt.Fatal(err)
		}
		var sum float64
		for i := range p.w {
			p.w[i] = rapid.Float64Range(0, 1).Draw(rt, "w")
			sum += p.w[i]
		}
		if sum == 0 {
			p.w[0], sum = 1, 1
		}
		want := make([]float64, np)
		for i := range p.w {
			p.w[i] /= sum
			want[i] = float64(np) * p.w[i]
			p.x[i*4] = float64(i) // tag each particle
		}
		p.systematicResample()
		counts := make([]int, np)
		for j := 0; j < np; j++ {
			counts[int(p.x[j*4])]++
		}
		for i, c := range counts {
			if float64(c) < math.Floor(want[i]-1e-9) || float64(c) > math.Ceil(want[i]+1e-9) {
				rt.Fatalf("particle %d (N·w = %.4f) kept %d times", i, want[i], c)
			}
		}
		if p.w[0] != 1/float64(np) || p.Resamples() != 1 {
			rt.Fatal("weights not reset to 1/N after resampling")
		}
	})
}

func newCTRVFilter(t interface{ Fatal(...any) }, np int, seed uint64) (*Filter, *models.RangeBearing) {
	ctrv, err := models.NewCTRV(1.5, 0.6)
	if err != nil {
		t.Fatal(err)
	}
	rb, err := models.NewRangeBearing(ctrv, models.Mount{X: 3.6})
	if err != nil {
		t.Fatal(err)
	}
	p, err := New(ctrv, Config{Particles: np, ResampleBelow: 0.5, Seed1: seed, Seed2: 5})
	if err != nil {
		t.Fatal(err)
	}
	S0 := make([]float64, 25)
	for i, sd := range []float64{1, 1, 1, 0.3, 0.1} {
		S0[i*5+i] = sd
	}
	if err := p.Init([]float64{30, 5, 4, 0.2, 0.05}, S0); err != nil {
		t.Fatal(err)
	}
	return p, rb
}

// Over long random sequences of predictions and updates the weights stay
// normalised (Σw = 1, log-weights ≤ 0, finite), the summary stays a valid
// square root (lower triangular, positive diagonal), and yaw stays wrapped.
func TestWeightsStayNormalised(t *testing.T) {
	rapid.Check(t, func(rt *rapid.T) {
		p, rb := newCTRVFilter(rt, rapid.IntRange(2, 300).Draw(rt, "N"), rapid.Uint64().Draw(rt, "seed"))
		Rs := []float64{rapid.Float64Range(0.01, 3).Draw(rt, "rsd"), 0, 0, rapid.Float64Range(1e-4, 0.2).Draw(rt, "bsd")}
		steps := rapid.IntRange(1, 40).Draw(rt, "steps")
		for k := 0; k < steps; k++ {
			if err := p.Predict(rapid.Float64Range(0, 1).Draw(rt, "dt")); err != nil {
				rt.Fatal(err)
			}
			if err := p.Prepare(rb, Rs); err != nil {
				rt.Fatal(err)
			}
			// Measurements anywhere, including far outliers.
			z := []float64{rapid.Float64Range(0.1, 200).Draw(rt, "r"), rapid.Float64Range(-math.Pi, math.Pi).Draw(rt, "b")}
			if _, err := p.Update(z); err != nil {
				rt.Fatal(err)
			}
			x, w := p.Particles()
			var sum float64
			for i, wi := range w {
				if !(wi >= 0) || !(p.logw[i] <= 1e-12) || math.IsInf(p.logw[i], 0) {
					rt.Fatalf("weight %d = %v (log %v)", i, wi, p.logw[i])
				}
				sum += wi
				if y := x[i*5+3]; !(y > -math.Pi && y <= math.Pi) {
					rt.Fatalf("particle %d yaw %v not wrapped", i, y)
				}
			}
			if math.Abs(sum-1) > 1e-12 {
				rt.Fatalf("Σw = %v", sum)
			}
			st := p.State()
			for i := 0; i < 5; i++ {
				if !(st.S[i*5+i] > 0) || math.IsInf(st.S[i*5+i], 0) {
					rt.Fatalf("S[%d,%d] = %v", i, i, st.S[i*5+i])
				}
				for j := i + 1; j < 5; j++ {
					if st.S[i*5+j] != 0 {
						rt.Fatalf("S not lower triangular")
					}
				}
			}
			if !allFinite(st.X) {
				rt.Fatalf("mean %v", st.X)
			}
		}
	})
}

// The summary averages angles on the circle: a cloud straddling ±π has its
// mean near ±π, not near 0 as a naive average would give.
func TestStateAveragesYawAcrossWrap(t *testing.T) {
	ctrv, _ := models.NewCTRV(1, 1)
	p, _ := New(ctrv, Config{Particles: 5000, Seed1: 2})
	S0 := make([]float64, 25)
	for i, sd := range []float64{1, 1, 1, 0.1, 0.05} {
		S0[i*5+i] = sd
	}
	if err := p.Init([]float64{0, 0, 3, math.Pi - 0.01, 0}, S0); err != nil {
		t.Fatal(err)
	}
	st := p.State()
	if d := models.WrapAngle(st.X[3] - (math.Pi - 0.01)); math.Abs(d) > 0.01 {
		t.Errorf("mean yaw %v, want π − 0.01 within 0.01 (5 MC s.d. = 5·0.1/√5000 ≈ 0.007)", st.X[3])
	}
	// Its s.d. is the cloud's (0.1), not that of a split ±π cloud (≈ π).
	P := make([]float64, 25)
	st.Covariance(P)
	if sd := math.Sqrt(P[3*5+3]); math.Abs(sd-0.1) > 0.01 {
		t.Errorf("yaw s.d. %v, want 0.1 ± 0.01 (relative MC s.d. √(1/2N) = 1%%)", sd)
	}
}

// Same seed, same inputs: bit-identical runs; and a snapshot taken with
// CopyFrom continues exactly like the original (random source included).
func TestRepeatableAndCopyFrom(t *testing.T) {
	run := func(p *Filter, rb *models.RangeBearing, from, to int) []float64 {
		Rs := []float64{0.5, 0, 0, 0.02}
		var out []float64
		for k := from; k < to; k++ {
			if err := p.Predict(0.1); err != nil {
				t.Fatal(err)
			}
			if err := p.Prepare(rb, Rs); err != nil {
				t.Fatal(err)
			}
			nis, err := p.Update([]float64{27 + 0.3*float64(k), 0.18})
			if err != nil {
				t.Fatal(err)
			}
			st := p.State()
			out = append(out, nis)
			out = append(out, st.X...)
			out = append(out, st.S...)
		}
		return out
	}
	a, rb := newCTRVFilter(t, 500, 11)
	b, _ := newCTRVFilter(t, 500, 11)
	ra, rbb := run(a, rb, 0, 10), run(b, rb, 0, 10)
	if !slices.Equal(ra, rbb) {
		t.Fatal("same seed gave different runs")
	}
	snap, _ := newCTRVFilter(t, 500, 99) // different seed: CopyFrom must overwrite it
	if err := snap.CopyFrom(a); err != nil {
		t.Fatal(err)
	}
	if !slices.Equal(run(a, rb, 10, 20), run(snap, rb, 10, 20)) {
		t.Fatal("snapshot diverged from the original")
	}
	other, _ := newCTRVFilter(t, 400, 1)
	if err := other.CopyFrom(a); err == nil {
		t.Error("CopyFrom across particle counts accepted")
	}
}

// Reseed: copies of one filter reseeded differently draw different noise
// (their particles part after one step); reseeding with the same seeds
// repeats a run bit for bit, and equals seeding the same values at New.
// A PCG's output is a function of its seed alone (O'Neill 2014, PCG
// report; math/rand/v2: "Seed resets the PCG to behave the same way as
// NewPCG(seed1, seed2)").
func TestReseed(t *testing.T) {
	run := func(p *Filter, rb *models.RangeBearing) []float64 {
		Rs := []float64{0.5, 0, 0, 0.02}
		var out []float64
		for k := 0; k < 8; k++ {
			if err := p.Predict(0.1); err != nil {
				t.Fatal(err)
			}
			if err := p.Prepare(rb, Rs); err != nil {
				t.Fatal(err)
			}
			nis, err := p.Update([]float64{27 + 0.3*float64(k), 0.18})
			if err != nil {
				t.Fatal(err)
			}
			x, w := p.Particles()
			out = append(out, nis)
			out = append(out, x...)
			out = append(out, w...)
		}
		return out
	}
	tmpl, rb := newCTRVFilter(t, 300, 11)
	copyOf := func(s1, s2 uint64) *Filter {
		p, _ := newCTRVFilter(t, 300, 99)
		if err := p.CopyFrom(tmpl); err != nil {
			t.Fatal(err)
		}
		p.Reseed(s1, s2)
		return p
	}
	a, b, a2 := copyOf(7, 1), copyOf(7, 2), copyOf(7, 1)
	ra, rb2, ra2 := run(a, rb), run(b, rb), run(a2, rb)
	if !slices.Equal(ra, ra2) {
		t.Fatal("the same seeds gave different runs")
	}
	// After the first predict every particle has had its own noise draw.
	xa, xb := ra[1:1+300*5], rb2[1:1+300*5]
	same := 0
	for i := range xa {
		if xa[i] == xb[i] {
			same++
		}
	}
	if same > 0 {
		t.Fatalf("%d of %d particle components equal after one step under different seeds", same, len(xa))
	}
	// Reseed then Init draws as New with those seeds then Init does.
	ctrv, err := models.NewCTRV(1.5, 0.6)
	if err != nil {
		t.Fatal(err)
	}
	fresh, err1 := New(ctrv, Config{Particles: 300, Seed1: 42, Seed2: 5})
	re, err2 := New(ctrv, Config{Particles: 300, Seed1: 1, Seed2: 1})
	if err1 != nil || err2 != nil {
		t.Fatal(err1, err2)
	}
	re.Reseed(42, 5)
	S0 := make([]float64, 25)
	for i, sd := range []float64{1, 1, 1, 0.3, 0.1} {
		S0[i*5+i] = sd
	}
	for _, p := range []*Filter{fresh, re} {
		if err := p.Init([]float64{30, 5, 4, 0.2, 0.05}, S0); err != nil {
			t.Fatal(err)
		}
	}
	if !slices.Equal(run(fresh, rb), run(re, rb)) {
		t.Fatal("Reseed(42, 5) then Init differs from New with Seed1 42, Seed2 5")
	}
	if n := testing.AllocsPerRun(100, func() { a.Reseed(3, 4) }); n != 0 {
		t.Errorf("Reseed: %v allocs", n)
	}
}

// Bad input returns an error and leaves every bit of the state unchanged.
func TestBadInputLeavesStateUntouched(t *testing.T) {
	p, rb := newCTRVFilter(t, 200, 3)
	if err := p.Predict(0.1); err != nil {
		t.Fatal(err)
	}
	good := []float64{0.5, 0, 0, 0.02}
	if err := p.Prepare(rb, good); err != nil {
		t.Fatal(err)
	}
	snapshot := func() []float64 {
		st := p.State()
		x, w := p.Particles()
		s := slices.Concat(x, w, st.X, st.S)
		b, _ := p.pcg.MarshalBinary()
		for _, c := range b {
			s = append(s, float64(c))
		}
		return s
	}
	before := snapshot()
	nan, inf := math.NaN(), math.Inf(1)
	checks := []struct {
		name string
		err  error
	}{
		{"Predict(NaN)", p.Predict(nan)},
		{"Predict(−1)", p.Predict(-1)},
		{"Predict(+Inf)", p.Predict(inf)},
		{"Init short", p.Init([]float64{1}, []float64{1})},
		{"Init NaN", p.Init([]float64{nan, 0, 0, 0, 0}, make([]float64, 25))},
		{"Init upper", p.Init(make([]float64, 5), append([]float64{1, 1}, make([]float64, 23)...))},
		{"Update NaN", second(p.Update([]float64{nan, 0}))},
		{"Update short", second(p.Update([]float64{1}))},
		{"Prepare NaN R", p.Prepare(rb, []float64{nan, 0, 0, 1})},
		{"Prepare non-PD R", p.Prepare(rb, []float64{1, 0, 0, 0})},
		{"Prepare upper R", p.Prepare(rb, []float64{1, 0.5, 0, 1})},
		{"Prepare wrong size", p.Prepare(rb, []float64{1})},
		{"Prepare nil", p.Prepare(nil, good)},
		{"Update unprepared", second(p.Update([]float64{30, 0.1}))},
		{"CopyFrom nil", p.CopyFrom(nil)},
	}
	for _, c := range checks {
		if c.err == nil {
			t.Errorf("%s: no error", c.name)
		}
	}
	if !slices.Equal(before, snapshot()) {
		t.Error("bad input changed the state")
	}
	if !math.IsInf(p.NIS([]float64{30, 0.1}), 1) {
		t.Error("NIS without a prepared prediction is not +Inf")
	}
	for _, c := range []Config{{Particles: 1}, {Particles: 10, ResampleBelow: 1.5}, {Particles: 10, ResampleBelow: -0.1}} {
		if _, err := New(models.Motion(nil), c); err == nil {
			t.Errorf("New(nil, %+v) accepted", c)
		}
		cv, _ := models.NewCV(1)
		if _, err := New(cv, c); err == nil {
			t.Errorf("New(cv, %+v) accepted", c)
		}
	}
}

func second(_ float64, err error) error { return err }

// NIS from the prepared Gaussian approximation: for a linear model with a
// large particle cloud it is the Kalman innovation's, νᵀ·(H·P·Hᵀ + R)⁻¹·ν.
func TestNISMatchesGaussianInnovation(t *testing.T) {
	cv, _ := models.NewCV(0.5)
	pos, _ := models.NewPositionXY(cv, models.Mount{})
	p, _ := New(cv, Config{Particles: 40000, Seed1: 4})
	S0 := []float64{1, 0, 0, 0, 0.5, 2, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1}
	_ = p.Init([]float64{3, 4, 0, 0}, S0)
	_ = p.Prepare(pos, []float64{1, 0, 0, 1})
	// H·P·Hᵀ + R for S0 above: P_pos = [[1, 0.5], [0.5, 4.25]], plus I.
	z := []float64{5, 1}
	nu := []float64{2, -3}
	want, _ := filters.NormalisedSquare(nu, []float64{math.Sqrt(2), 0, 0.5 / math.Sqrt(2), math.Sqrt(5.25 - 0.125)})
	got := p.NIS(z)
	// The cloud's covariance has relative MC error ≈ √(2/N) ≈ 0.7%; the NIS
	// inherits about that. 5% is generous.
	if math.Abs(got-want) > 0.05*want {
		t.Errorf("NIS %v, Gaussian %v", got, want)
	}
	if n2, _ := p.Update(z); n2 != got {
		t.Errorf("Update returned NIS %v, NIS() said %v", n2, got)
	}
}

func TestResampleThreshold(t *testing.T) {
	for _, c := range []struct {
		below float64
		want  func(int) bool
	}{
		{1, func(n int) bool { return n == 10 }},   // every update
		{1e-9, func(n int) bool { return n == 0 }}, // never (ESS ≥ 1 > 1e-9·N)
	} {
		cv, _ := models.NewCV(1)
		pos, _ := models.NewPositionXY(cv, models.Mount{})
		p, _ := New(cv, Config{Particles: 100, ResampleBelow: c.below})
		_ = p.Init([]float64{0, 0, 0, 0}, []float64{1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 1})
		for k := 0; k < 10; k++ {
			_ = p.Predict(0.1)
			_ = p.Prepare(pos, []float64{0.3, 0, 0, 0.3})
			if _, err := p.Update([]float64{0.1, -0.1}); err != nil {
				t.Fatal(err)
			}
		}
		if !c.want(p.Resamples()) {
			t.Errorf("below=%v: %d resamples", c.below, p.Resamples())
		}
	}
}

func TestZeroAllocsSteadyState(t *testing.T) {
	p, rb := newCTRVFilter(t, 1000, 1)
	Rs := []float64{0.5, 0, 0, 0.02}
	z := []float64{28, 0.19}
	if a := testing.AllocsPerRun(20, func() {
		_ = p.Predict(0.05)
		_ = p.Prepare(rb, Rs)
		_ = p.NIS(z)
		_, _ = p.Update(z)
		_ = p.State()
	}); a != 0 {
		t.Errorf("%v allocs per step", a)
	}
}

// One step of the budget: 1000 particles, CTRV + range_bearing:
// predict, prepare, update (resampling when ESS/N < 0.5) and the summary.
// The measurements follow an invented yard tractor on a gentle curve
// (4 m/s, 0.1 rad/s, 20 Hz) so the cloud stays where a tracker keeps it;
// every 400 steps the scene restarts (outside the timer).
func benchStep(b *testing.B, summary bool) {
	p, rb := newCTRVFilter(b, 1000, 1)
	ctrv, _ := models.NewCTRV(0, 0)
	Rs := []float64{0.5, 0, 0, 0.02}
	noise := rand.New(rand.NewPCG(8, 8))
	start := []float64{30, 5, 4, 0.2, 0.1}
	truth, next := slices.Clone(start), make([]float64, 5)
	z := make([]float64, 2)
	S0 := make([]float64, 25)
	for i, sd := range []float64{1, 1, 1, 0.3, 0.1} {
		S0[i*5+i] = sd
	}
	const dt = 0.05
	k := 0
	b.ReportAllocs()
	for b.Loop() {
		if k++; k%400 == 0 {
			b.StopTimer()
			copy(truth, start)
			_ = p.Init(start, S0)
			b.StartTimer()
		}
		ctrv.Propagate(next, truth, dt)
		truth, next = next, truth
		rb.Predict(z, truth)
		z[0] += 0.5 * noise.NormFloat64()
		z[1] += 0.02 * noise.NormFloat64()
		_ = p.Predict(dt)
		_ = p.Prepare(rb, Rs)
		_, _ = p.Update(z)
		if summary {
			_ = p.State()
		}
	}
}

func BenchmarkStepCTRVRangeBearing1000(b *testing.B) { benchStep(b, true) }

// The same step without forming the Gaussian summary (an engine that reads
// State only when it publishes pays this between outputs).
func BenchmarkStepCTRVRangeBearing1000NoSummary(b *testing.B) { benchStep(b, false) }
