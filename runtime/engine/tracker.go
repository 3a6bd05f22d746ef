package engine

import (
	"errors"
	"math"
	"math/bits"
	"slices"

	"github.com/godwit-fusion/godwit/filters"
)

// workspace holds the per-scan scratch of the tracker. Slices only grow,
// so a warmed-up engine processes scans without allocating.
type workspace struct {
	detPos   [][2]float64
	detCov   [][4]float64
	detOK    []bool
	detGated []bool // inside some track's birth gate
	order    []int  // usable detections sorted by site x

	vis      []bool
	hit      []bool
	bad      []bool // the filter's update failed on a non-finite value: reset the track
	lastPrep []int  // −1: prepared with the track's own R; j: with detection j's R
	trackRs  [][9]float64
	trackDet []int
	posVar   []float64 // trace of the predicted position covariance
	pv       [4]float64
	jpv      []float64
	js       []float64 // 2×n: position rows of J·S

	pairs  []pair
	parent []int

	// per-cluster assignment
	ctracks, cdets []int
	local          []int // track or detection → local index in its cluster
	cost           []float64
	rowCol         []int
	trackCego      [][9]float64 // ego pose uncertainty in measurement space, per track
	rsTmp          [9]float64
	egoP3          [9]float64 // covariance of the ego [px, py, yaw]
	zk, dz         [3]float64
	rsDet          [9]float64
	pk             [2]float64
	ck             [4]float64
	x0             [6]float64
	S0             [36]float64
	z              [3]float64
}

type pair struct {
	t, d int
	nis  float64
	root int
}

func growBool(s []bool, n int) []bool {
	s = grow(s, n)
	clear(s)
	return s
}

func growInt(s []int, n int) []int { return grow(s, n) }

// grow returns s with length n. A workspace that must grow takes a quarter
// more than asked, so that a scene creeping to new highs (larger clusters,
// more tracks) regrows it seldom rather than at every new maximum.
func grow[T any](s []T, n int) []T {
	if cap(s) < n {
		s = make([]T, n, n+n/4)
	}
	return s[:n]
}

func (e *Engine) process(sc *scan) {
	e.predictTo(sc.tNs)
	s := e.sensors[sc.sensor]
	switch s.kind {
	case kindOdometry, kindGNSS:
		e.egoUpdate(sc, s)
	default:
		if e.platformMoving && !e.egoReady() {
			// Detections cannot be placed in the site frame yet: a track
			// started on a wrong heading would be dragged away as the ego
			// estimate settles, and the ego error is not white.
			e.counters.EgoNotReady++
			return
		}
		e.trackScan(sc, s)
	}
}

// egoReady reports whether the ego estimate is good enough to place
// detections: heading s.d. under egoReadyYawSD and position s.d. under
// egoReadyPosSD.
func (e *Engine) egoReady() bool {
	if !e.st.egoInit {
		return false
	}
	var P [25]float64
	e.st.ego.State().Covariance(P[:])
	return P[3*5+3] <= egoReadyYawSD*egoReadyYawSD && P[0]+P[6] <= egoReadyPosSD*egoReadyPosSD
}

// Readiness of the ego estimate for tracking: 3° of heading is 3 m of
// lateral error at 60 m, which the ego-aware measurement noise absorbs
// (common practice: trackers wait for localisation to converge).
const (
	egoReadyYawSD = 0.05 // rad
	egoReadyPosSD = 3.0  // m
)

// predictTo advances the state clock and the ego estimate to tNs.
func (e *Engine) predictTo(tNs int64) {
	st := &e.st
	if !st.hasTime || tNs > st.timeNs {
		st.timeNs, st.hasTime = tNs, true
	}
	if st.ego != nil && st.egoInit && tNs > st.egoNs {
		if err := st.ego.Predict(float64(tNs-st.egoNs) * 1e-9); err != nil {
			e.counters.FilterErrors++
		}
		st.egoNs = tNs
	}
}

// predictTracksTo moves every track to tNs. A track whose prediction fails
// is removed: its state can no longer be trusted.
func (e *Engine) predictTracksTo(tNs int64) {
	st := &e.st
	if len(st.recs) == 0 {
		st.trackNs = tNs // nothing to move; births start here
		return
	}
	if tNs <= st.trackNs {
		return
	}
	dt := float64(tNs-st.trackNs) * 1e-9
	for i := 0; i < len(st.recs); {
		if err := st.flt[i].Predict(dt); err != nil {
			e.counters.FilterErrors++
			e.counters.Deletions++
			e.noteReset(st.recs[i].id)
			st.removeTrack(i)
			continue
		}
		i++
	}
	st.trackNs = tNs
}

// platformPose is the platform in the site frame at the current state time.
func (e *Engine) platformPose() Pose {
	if !e.platformMoving || !e.st.egoInit {
		return e.fixedPose
	}
	x := e.st.ego.State().X // [px, py, v, yaw, yawrate]
	return Pose{X: x[0], Y: x[1], Yaw: x[3], VX: x[2] * math.Cos(x[3]), VY: x[2] * math.Sin(x[3]), YawRate: x[4]}
}

// trackScan is one scan of a tracking sensor: gate, assign by global
// nearest neighbour, update, count misses where the sensor could see,
// give birth to tracks from detections outside every gate, and retire.
func (e *Engine) trackScan(sc *scan, s *sensorRT) {
	st := &e.st
	ws := &e.ws
	e.predictTracksTo(sc.tNs)
	g := s.tm
	if err := g.SetPlatform(e.platformPose().platform()); err != nil {
		e.counters.FilterErrors++ // a non-finite ego estimate: nothing can be placed
		return
	}
	egoUnc := e.egoUncertainty(s)
	n := e.motion.Dim()
	D := len(sc.dets)
	T := len(st.recs)
	m := s.dim

	// Detections in the site frame, for the coarse gate and for birth.
	ws.detPos = grow(ws.detPos, D)
	ws.detCov = grow(ws.detCov, D)
	ws.detOK = growBool(ws.detOK, D)
	ws.detGated = growBool(ws.detGated, D)
	ws.order = ws.order[:0]
	var detEig float64
	rs := &ws.rsDet // a local array would escape through the interface call
	for j := range sc.dets {
		d := &sc.dets[j]
		if !e.detNoiseSqrt(s, d, rs) {
			continue
		}
		if g.Birth(ws.detPos[j][:], ws.detCov[j][:], d.z[:m], rs[:m*m]) == nil {
			ws.detOK[j] = true
			c := &ws.detCov[j]
			if egoUnc {
				e.addEgoToSite(s, d.z[:m], rs[:m*m], ws.detPos[j], c)
			}
			detEig = math.Max(detEig, maxEig2(c[0], c[1], c[3]))
			ws.order = append(ws.order, j)
		}
	}
	slices.SortFunc(ws.order, func(a, b int) int {
		if ws.detPos[a][0] < ws.detPos[b][0] {
			return -1
		}
		if ws.detPos[a][0] > ws.detPos[b][0] {
			return 1
		}
		return a - b
	})

	ws.vis = growBool(ws.vis, T)
	ws.hit = growBool(ws.hit, T)
	ws.bad = growBool(ws.bad, T)
	ws.lastPrep = growInt(ws.lastPrep, T)
	ws.trackDet = growInt(ws.trackDet, T)
	ws.trackRs = grow(ws.trackRs, T)
	ws.trackCego = grow(ws.trackCego, T)
	ws.posVar = grow(ws.posVar, T)
	ws.jpv = grow(ws.jpv, 4*n)
	ws.js = grow(ws.js, 2*n)
	ws.pairs = ws.pairs[:0]
	for i := 0; i < T; i++ {
		ws.trackDet[i] = -1
		ws.lastPrep[i] = -1
		f := st.flt[i]
		gs := f.State()
		pxx, pxy, pyy := e.posCov(gs, ws)
		ws.posVar[i] = pxx + pyy
		px, py := ws.pv[0], ws.pv[1]
		if !g.Visible(px, py) {
			continue
		}
		// Coarse gate in the site frame: a detection inside the NIS gate lies
		// within √(gate·λmax(P_pos + C_det)) of the prediction to first
		// order; the factor 2 in the radius covers linearisation error.
		r := 2 * math.Sqrt(s.gate*(maxEig2(pxx, pxy, pyy)+detEig))
		lo, hi := 0, len(ws.order)
		for lo < hi {
			mid := (lo + hi) / 2
			if ws.detPos[ws.order[mid]][0] < px-r {
				lo = mid + 1
			} else {
				hi = mid
			}
		}
		if lo == len(ws.order) || ws.detPos[ws.order[lo]][0] > px+r {
			ws.vis[i] = true // seen, and nothing near: a miss, no prediction of z needed
			continue
		}
		if g.NoiseSqrt(ws.trackRs[i][:m*m], gs.X) != nil {
			e.counters.FilterErrors++
			continue
		}
		if egoUnc && !e.addEgoToMeas(s, i, m, gs.X) {
			continue
		}
		if f.Prepare(g, ws.trackRs[i][:m*m]) != nil {
			e.counters.FilterErrors++
			continue
		}
		ws.vis[i] = true
		for k := lo; k < len(ws.order); k++ {
			j := ws.order[k]
			dp := ws.detPos[j]
			if dp[0] > px+r {
				break
			}
			if math.Abs(dp[1]-py) > r {
				continue
			}
			d := &sc.dets[j]
			if !e.prepareFor(f, g, s, i, j, d) {
				continue
			}
			nis := f.NIS(d.z[:m])
			if nis <= s.gate {
				ws.pairs = append(ws.pairs, pair{t: i, d: j, nis: nis})
			}
			if nis <= s.gate || (nis <= birthGateFactor*s.gate && st.recs[i].status != statusTentative) {
				ws.detGated[j] = true
			}
		}
	}

	e.assignPairs(T, D, s.gate)

	// Updates and misses.
	for i := 0; i < T; i++ {
		if !ws.vis[i] {
			continue
		}
		f := st.flt[i]
		j := ws.trackDet[i]
		hit := false
		if j >= 0 {
			d := &sc.dets[j]
			if e.prepareFor(f, g, s, i, j, d) {
				nis, err := f.Update(d.z[:m])
				if err != nil {
					e.counters.FilterErrors++
					ws.bad[i] = errors.Is(err, filters.ErrNonFinite)
				} else {
					hit = true
					if sc.fresh {
						s.addNIS(nis)
					}
					if d.class != "" {
						st.recs[i].class = d.class
					}
				}
			}
		}
		ws.hit[i] = hit
		e.recordOpportunity(&st.recs[i], hit, sc.tNs)
		if hit {
			// Positions are the first two states in every layout.
			S := f.State().S
			st.recs[i].posVar = S[0]*S[0] + S[n]*S[n] + S[n+1]*S[n+1]
		} else {
			st.recs[i].posVar = ws.posVar[i]
		}
	}

	// Retire: failed confirmation, too many misses, or lost in covariance.
	// Survivors are compacted in one pass (keeping their order): deleting
	// one by one would shift the table once per deletion, quadratic in a
	// cluttered scene.
	keep := 0
	e.blowVar, e.blowTrack = 0, 0
	for i := 0; i < T; i++ {
		rec := &st.recs[i]
		drop := false
		switch rec.status {
		case statusTentative:
			// Cannot reach M hits within the N-window any more.
			drop = ws.vis[i] && bits.OnesCount64(rec.hist)+(e.confirmN-rec.nOpp) < e.confirmM
		default:
			drop = rec.misses >= e.deleteMisses
		}
		if !ws.hit[i] && ws.posVar[i] > e.maxPosVar {
			drop = true
		}
		if ws.bad[i] {
			drop = true
			e.noteReset(rec.id)
		}
		if drop {
			e.counters.Deletions++
			continue
		}
		if rec.status != statusTentative && rec.posVar > e.blowVar {
			e.blowVar, e.blowTrack = rec.posVar, rec.id
		}
		if keep != i {
			st.recs[keep] = st.recs[i]
			st.flt[keep], st.flt[i] = st.flt[i], st.flt[keep] // the dropped filter becomes a spare
		}
		keep++
	}
	st.recs = st.recs[:keep]

	// Birth from detections outside every birth gate.
	for j := 0; j < D; j++ {
		if !ws.detOK[j] || ws.detGated[j] || len(st.recs) >= e.maxTracks {
			continue
		}
		e.birth(&sc.dets[j], ws.detPos[j], ws.detCov[j], sc.tNs)
	}
}

// detNoiseSqrt writes the noise square root of one detection: its own R
// when it carries one, else the configured noise (a pinhole detector's at
// the measured range).
func (e *Engine) detNoiseSqrt(s *sensorRT, d *storedDet, rs *[9]float64) bool {
	m := s.dim
	switch {
	case d.hasR:
		copy(rs[:], d.rs[:m*m])
	case s.pinhole != nil:
		if s.pinhole.NoiseSqrtAtRange(rs[:4], d.z[1]) != nil {
			return false
		}
	default:
		copy(rs[:], s.rsDefault[:m*m])
	}
	return true
}

// prepareFor makes sure track i's filter is prepared with the noise that
// goes with detection j (its own R when it carries one).
func (e *Engine) prepareFor(f filters.Filter, g filters.MeasurementModel, s *sensorRT, i, j int, d *storedDet) bool {
	ws := &e.ws
	m := s.dim
	want := -1
	if d.hasR {
		want = j
	}
	if ws.lastPrep[i] == want {
		return true
	}
	var err error
	if want < 0 {
		err = f.Prepare(g, ws.trackRs[i][:m*m])
	} else {
		rs := d.rs[:m*m]
		if e.egoActive {
			// The detection's own R plus the ego pose uncertainty.
			var Rsum [9]float64
			for k := 0; k < m*m; k++ {
				Rsum[k] = d.r[k] + ws.trackCego[i][k]
			}
			if !chol(ws.rsTmp[:m*m], Rsum[:m*m], m) {
				ws.lastPrep[i] = -2
				return false
			}
			rs = ws.rsTmp[:m*m]
		}
		err = f.Prepare(g, rs)
	}
	if err != nil {
		e.counters.FilterErrors++
		ws.lastPrep[i] = -2
		return false
	}
	ws.lastPrep[i] = want
	return true
}

// posCov writes the predicted [px,py,vx,vy] into ws.pv and returns the
// position covariance J_p·S·Sᵀ·J_pᵀ.
func (e *Engine) posCov(gs filters.Gaussian, ws *workspace) (pxx, pxy, pyy float64) {
	n := len(gs.X)
	e.motion.PosVel(ws.pv[:], gs.X, ws.jpv)
	for r := 0; r < 2; r++ {
		for c := 0; c < n; c++ {
			var v float64
			for k := c; k < n; k++ { // S is lower triangular
				v += ws.jpv[r*n+k] * gs.S[k*n+c]
			}
			ws.js[r*n+c] = v
		}
	}
	for c := 0; c < n; c++ {
		a, b := ws.js[c], ws.js[n+c]
		pxx += a * a
		pxy += a * b
		pyy += b * b
	}
	return
}

func (s *sensorRT) addNIS(v float64) {
	s.nis[s.nisPos] = v
	s.nisVer++
	s.nisPos = (s.nisPos + 1) % nisWindow
	if s.nisN < nisWindow {
		s.nisN++
	}
}

// recordOpportunity applies the track-life rules to one scan in which a
// sensor could see the track: M-of-N confirmation, coasting on a miss.
func (e *Engine) recordOpportunity(rec *trackRec, hit bool, tNs int64) {
	mask := uint64(1)<<uint(e.confirmN) - 1
	rec.hist <<= 1
	if hit {
		rec.hist |= 1
		rec.hits++
		rec.misses = 0
		rec.updatedNs = tNs
	} else {
		rec.misses++
	}
	rec.hist &= mask
	if rec.nOpp < e.confirmN {
		rec.nOpp++
	}
	switch rec.status {
	case statusTentative:
		if bits.OnesCount64(rec.hist) >= e.confirmM {
			rec.status = statusConfirmed
		}
	default:
		if rec.misses > 0 {
			rec.status = statusCoasting
		} else {
			rec.status = statusConfirmed
		}
	}
}

// birth starts a tentative track at a detection's site position with a
// wide velocity prior.
func (e *Engine) birth(d *storedDet, pos [2]float64, c [4]float64, tNs int64) {
	st := &e.st
	if len(st.flt) <= len(st.recs) {
		f, err := e.mkFilter()
		if err != nil {
			e.counters.FilterErrors++
			return
		}
		st.flt = append(st.flt, f)
	}
	n := e.motion.Dim()
	// Workspace arrays: a local one would escape through the interface call.
	x0, S0 := e.ws.x0[:], e.ws.S0[:]
	clear(x0)
	clear(S0)
	x0[0], x0[1] = pos[0], pos[1]
	// Position block: Cholesky of the 2×2 detection covariance.
	l00 := math.Sqrt(c[0])
	l10 := c[2] / l00
	l11 := math.Sqrt(math.Max(c[3]-l10*l10, 1e-12))
	S0[0], S0[n], S0[n+1] = l00, l10, l11
	vs := e.birthSpeedSD
	switch e.layout {
	case layoutCV:
		S0[2*n+2], S0[3*n+3] = vs, vs
	case layoutCA:
		S0[2*n+2], S0[3*n+3] = vs, vs
		S0[4*n+4], S0[5*n+5] = birthAccelSD, birthAccelSD
	case layoutCTRV:
		S0[2*n+2] = vs
		S0[3*n+3] = math.Pi / math.Sqrt(3) // heading unknown: s.d. of a uniform angle
		S0[4*n+4] = birthYawRateSD
	}
	f := st.flt[len(st.recs)]
	if e.birthTemplate != nil {
		if err := f.CopyFrom(e.birthTemplate); err != nil {
			e.counters.FilterErrors++
			return
		}
	}
	if r, ok := f.(reseeder); ok {
		// Each copy of the template would draw the template's noise: give
		// the track its own sequence, keyed by its id, which an in-order
		// run and a rewind assign alike.
		r.Reseed(pfSeed1, trackSeed(st.nextID+1))
	}
	if err := f.Init(x0[:n], S0[:n*n]); err != nil {
		e.counters.FilterErrors++
		return
	}
	st.nextID++
	st.recs = append(st.recs, trackRec{id: st.nextID, status: statusTentative, hist: 1, nOpp: 1, hits: 1,
		updatedNs: tNs, class: d.class, posVar: c[0] + c[3]})
	e.counters.Births++
	if e.confirmM <= 1 {
		st.recs[len(st.recs)-1].status = statusConfirmed
	}
}

// birthGateFactor: a detection with NIS under this many gates of some
// confirmed track is taken for a stray return of that track (a 1-in-1000
// outlier at gate_prob 0.999), not for a new object, and starts no track;
// without it every outlier would seed a duplicate (common practice). The
// factor 4 doubles the gate radius, which the coarse pre-gate radius still
// covers. Tentative tracks, with their wide velocity prior, would block
// births over metres of a crowded scene, so against them only the gate
// itself counts.
const birthGateFactor = 4

// Birth priors for the higher derivatives (common practice for yard and
// campus vehicles: accelerations within ±2 m/s², turn rates within ±0.5 rad/s).
const (
	birthAccelSD   = 2.0
	birthYawRateSD = 0.5
)

// assignPairs splits the gated pairs into clusters (connected components
// of the track–detection gate graph) and solves global nearest neighbour
// optimally in each, so that the cost grows with the cluster sizes, not
// with the scene (Jonker & Volgenant 1987 per cluster). A track left
// without a detection pays the gate as its miss cost.
func (e *Engine) assignPairs(T, D int, missCost float64) {
	ws := &e.ws
	if len(ws.pairs) == 0 {
		return
	}
	ws.parent = growInt(ws.parent, T+D)
	for i := range ws.parent {
		ws.parent[i] = i
	}
	find := func(a int) int {
		for ws.parent[a] != a {
			ws.parent[a] = ws.parent[ws.parent[a]]
			a = ws.parent[a]
		}
		return a
	}
	for _, p := range ws.pairs {
		a, b := find(p.t), find(T+p.d)
		if a != b {
			if a < b {
				ws.parent[b] = a
			} else {
				ws.parent[a] = b
			}
		}
	}
	for k := range ws.pairs {
		ws.pairs[k].root = find(ws.pairs[k].t)
	}
	slices.SortFunc(ws.pairs, func(a, b pair) int {
		if a.root != b.root {
			return a.root - b.root
		}
		if a.t != b.t {
			return a.t - b.t
		}
		return a.d - b.d
	})
	ws.local = growInt(ws.local, T+D)
	for a := 0; a < len(ws.pairs); {
		b := a + 1
		for b < len(ws.pairs) && ws.pairs[b].root == ws.pairs[a].root {
			b++
		}
		if b == a+1 {
			p := ws.pairs[a]
			ws.trackDet[p.t] = p.d
		} else {
			e.solveCluster(ws.pairs[a:b], T, missCost)
		}
		a = b
	}
}

func (e *Engine) solveCluster(ps []pair, T int, missCost float64) {
	ws := &e.ws
	ws.ctracks, ws.cdets = ws.ctracks[:0], ws.cdets[:0]
	for _, p := range ps {
		if len(ws.ctracks) == 0 || ws.ctracks[len(ws.ctracks)-1] != p.t {
			ws.ctracks = append(ws.ctracks, p.t)
		}
		ws.cdets = append(ws.cdets, p.d)
	}
	slices.Sort(ws.cdets)
	ws.cdets = slices.Compact(ws.cdets)
	nt, nd := len(ws.ctracks), len(ws.cdets)
	for k, t := range ws.ctracks {
		ws.local[t] = k
	}
	for k, d := range ws.cdets {
		ws.local[T+d] = k
	}
	cols := nd + nt
	ws.cost = grow(ws.cost, nt*cols)
	inf := math.Inf(1)
	for k := range ws.cost {
		ws.cost[k] = inf
	}
	for k := 0; k < nt; k++ {
		ws.cost[k*cols+nd+k] = missCost
	}
	for _, p := range ps {
		ws.cost[ws.local[p.t]*cols+ws.local[T+p.d]] = p.nis
	}
	ws.rowCol = growInt(ws.rowCol, nt)
	if _, err := e.solver.Solve(ws.cost, nt, cols, ws.rowCol); err != nil {
		return // cannot happen: every row has its finite miss column
	}
	for k, c := range ws.rowCol {
		if c < nd {
			ws.trackDet[ws.ctracks[k]] = ws.cdets[c]
		}
	}
}

// egoUncertainty prepares, on a moving platform, the ego pose covariance
// and places the three copies of the sensor model with the platform pose
// nudged in x, y and yaw, for first-order propagation of the ego
// uncertainty into each measurement's noise (the usual remedy when the
// sensor pose itself is estimated: R + G·P_ego·Gᵀ, G = ∂h/∂(ego pose)).
func (e *Engine) egoUncertainty(s *sensorRT) bool {
	e.egoActive = e.platformMoving && e.st.egoInit
	if !e.egoActive {
		return false
	}
	ws := &e.ws
	gs := e.st.ego.State()
	var P [25]float64
	gs.Covariance(P[:])
	idx := [3]int{0, 1, 3}
	for a := 0; a < 3; a++ {
		for b := 0; b < 3; b++ {
			ws.egoP3[a*3+b] = P[idx[a]*5+idx[b]]
		}
	}
	base := e.platformPose()
	for k := 0; k < 3; k++ {
		p := base
		switch k {
		case 0:
			p.X += egoStep
		case 1:
			p.Y += egoStep
		case 2:
			p.Yaw += egoStep
		}
		if s.pert[k].SetPlatform(p.platform()) != nil {
			e.egoActive = false
			return false
		}
	}
	return true
}

// egoStep is the finite-difference step for the ego pose Jacobians (m and
// rad); the functions are smooth on this scale.
const egoStep = 1e-6

// addEgoToMeas adds G·P_ego·Gᵀ to track i's measurement noise and
// refactors it. G is by forward differences of h at the predicted state x.
func (e *Engine) addEgoToMeas(s *sensorRT, i, m int, x []float64) bool {
	ws := &e.ws
	zk, dz := ws.zk[:m], ws.dz[:m]
	z0 := ws.z[:m]
	var G [9]float64 // m×3
	s.tm.Predict(z0, x)
	for k := 0; k < 3; k++ {
		s.pert[k].Predict(zk, x)
		s.tm.Residual(dz, zk, z0)
		for r := 0; r < m; r++ {
			G[r*3+k] = dz[r] / egoStep
		}
	}
	var R [9]float64
	rs := &ws.trackRs[i]
	for a := 0; a < m; a++ {
		for b := 0; b < m; b++ {
			var v, c float64
			for k := 0; k < m; k++ {
				v += rs[a*m+k] * rs[b*m+k]
			}
			for k := 0; k < 3; k++ {
				for l := 0; l < 3; l++ {
					c += G[a*3+k] * ws.egoP3[k*3+l] * G[b*3+l]
				}
			}
			ws.trackCego[i][a*m+b] = c
			R[a*m+b] = v + c
		}
	}
	if !chol(rs[:m*m], R[:m*m], m) {
		e.counters.FilterErrors++
		return false
	}
	return true
}

// addEgoToSite adds the ego pose uncertainty to a detection's site
// position covariance c.
func (e *Engine) addEgoToSite(s *sensorRT, z, rs []float64, pos [2]float64, c *[4]float64) {
	ws := &e.ws
	var G [6]float64 // 2×3
	pk, ck := ws.pk[:], ws.ck[:]
	for k := 0; k < 3; k++ {
		if s.pert[k].Birth(pk, ck, z, rs) != nil {
			return
		}
		G[k] = (pk[0] - pos[0]) / egoStep
		G[3+k] = (pk[1] - pos[1]) / egoStep
	}
	for a := 0; a < 2; a++ {
		for b := 0; b < 2; b++ {
			var v float64
			for k := 0; k < 3; k++ {
				for l := 0; l < 3; l++ {
					v += G[a*3+k] * ws.egoP3[k*3+l] * G[b*3+l]
				}
			}
			c[a*2+b] += v
		}
	}
}
