// Package eval scores godwit's tracks against ground truth: GOSPA with its
// localisation / missed / false decomposition (Rahmathullah,
// García-Fernández & Svensson 2017), OSPA (Schuhmacher, Vo & Vo 2008),
// position RMSE and NEES of matched tracks (Bar-Shalom, Li & Kirubarajan
// 2001), id switches, fragmentations, time to confirm, the ego pose error,
// raw-detection GOSPA as a baseline, NIS per sensor and latency.
//
// The caller feeds an Evaluator in time order (tracks messages, and
// optionally raw detections, NIS samples and latency samples) and asks for
// a Summary, which marshals into summary.json, and the per-epoch series the
// report plots. An epoch is one tracks message with the truth aligned to its
// t_ns (see truthAt for the rule).
//
// Which tracks count: by default "confirmed" and "coasting". The engine
// turns a confirmed track to coasting after a single missed scan, so
// scoring only "confirmed" would make every established track flicker out
// at each missed detection and charge the tracker with false fragmentations;
// "tentative" tracks are the tracker's own unconfirmed hypotheses and are
// not output a consumer should act on. Options.Statuses changes the set.
package eval

import (
	"errors"
	"fmt"
	"math"
	"sort"

	"github.com/godwit-fusion/godwit/runtime/assign"
	"github.com/godwit-fusion/godwit/runtime/gospa"
	"github.com/godwit-fusion/godwit/transport"
)

// Options set the metric parameters. The zero value is the default.
type Options struct {
	// C is the GOSPA cut-off in metres; 0 means 5 m, between a pedestrian's
	// size and the spacing of objects at a crossing (common practice: c
	// above the expected localisation error, below object separation).
	C float64
	// P is the order of GOSPA and OSPA; 0 means 2.
	P float64
	// Alpha is GOSPA's α; 0 means 2, the only value accepted: only α = 2
	// splits the metric into localisation, missed and false parts
	// (Rahmathullah et al. 2017, Proposition 1), which runtime/gospa computes.
	Alpha float64
	// OSPAC is the OSPA cut-off in metres; 0 means C.
	OSPAC float64
	// MatchDist is the largest distance at which a track is matched to a
	// true object for RMSE, NEES, id switches, fragmentation and time to
	// confirm; 0 means C.
	MatchDist float64
	// Statuses are the track statuses that count; nil means confirmed and
	// coasting (see the package comment).
	Statuses []string
	// TruthTolNs is the alignment tolerance (see truthAt); 0 means 250 ms.
	TruthTolNs int64
	// MaxRange, when > 0, scores only true objects and tracks within this
	// many metres of the true ego position (of the truth line's ego; with no
	// ego in the truth it has no effect).
	MaxRange float64
}

// ErrOptions reports an invalid option.
var ErrOptions = errors.New("eval: invalid options")

func (o Options) withDefaults() (Options, error) {
	if o.C == 0 {
		o.C = 5
	}
	if o.P == 0 {
		o.P = 2
	}
	if o.Alpha == 0 {
		o.Alpha = 2
	}
	if o.OSPAC == 0 {
		o.OSPAC = o.C
	}
	if o.MatchDist == 0 {
		o.MatchDist = o.C
	}
	if o.Statuses == nil {
		o.Statuses = []string{"confirmed", "coasting"}
	}
	if o.TruthTolNs == 0 {
		o.TruthTolNs = 250e6
	}
	switch {
	case !(o.C > 0) || math.IsInf(o.C, 0):
		return o, fmt.Errorf("%w: c = %g, want a finite value > 0", ErrOptions, o.C)
	case !(o.P >= 1) || math.IsInf(o.P, 0):
		return o, fmt.Errorf("%w: p = %g, want a finite value ≥ 1", ErrOptions, o.P)
	case o.Alpha != 2:
		return o, fmt.Errorf("%w: α = %g, only α = 2 is supported (it gives the localisation/missed/false split)", ErrOptions, o.Alpha)
	case !(o.OSPAC > 0) || math.IsInf(o.OSPAC, 0):
		return o, fmt.Errorf("%w: OSPA c = %g, want a finite value > 0", ErrOptions, o.OSPAC)
	case !(o.MatchDist > 0) || math.IsInf(o.MatchDist, 0):
		return o, fmt.Errorf("%w: match distance = %g, want a finite value > 0", ErrOptions, o.MatchDist)
	case o.TruthTolNs < 0:
		return o, fmt.Errorf("%w: truth tolerance %d ns is negative", ErrOptions, o.TruthTolNs)
	case !(o.MaxRange >= 0):
		return o, fmt.Errorf("%w: max range %g, want ≥ 0", ErrOptions, o.MaxRange)
	}
	return o, nil
}

// Epoch is the score of one tracks message.
type Epoch struct {
	TNs    int64
	Truth  int // true objects scored
	Tracks int // tracks that count
	// GOSPA is the distance; Loc, MissTerm and FalseTerm are its p-th power
	// parts, GOSPA^p = Loc + MissTerm + FalseTerm, with MissTerm =
	// (c^p/2)·Missed and FalseTerm = (c^p/2)·False (α = 2).
	GOSPA, Loc, MissTerm, FalseTerm float64
	Missed, False                   int
	OSPA                            float64
	Matched                         int     // track–truth pairs within MatchDist
	NEES                            float64 // average over the matched pairs; NaN without any
	NEESPairs                       int     // pairs in that average (a pair with a non-positive-definite pos_cov is left out)
	EgoErr                          float64 // ego position error (m); NaN without ego estimate or truth
}

// objState follows one true object through the epochs.
type objState struct {
	id          string
	firstNs     int64 // first epoch at which it was scored
	confirmNs   int64 // first epoch matched to a non-tentative track; −1 before
	lastTrack   uint64
	hasLast     bool
	prevMatched bool // matched at the last epoch it was present
	everMatched bool
}

// Evaluator accumulates scores. Feed it in time order; not safe for
// concurrent use.
type Evaluator struct {
	opt   Options
	truth []TruthLine
	g, o  gospa.Metric
	count map[string]bool

	epochs        []Epoch
	skipped       int
	ignored       int // counted tracks left out for a non-finite position
	outOfOrder    int
	lastNs        int64
	objs          map[string]*objState
	objOrder      []*objState
	trackIDs      map[uint64]bool
	idSwitches    int
	fragments     int
	sqErr         float64
	pairs         int
	neesSum       float64
	neesN         int
	neesEpochs    int
	neesInside    int
	egoSq, egoMax float64
	egoYawSq      float64
	egoN          int

	base      map[string]*baseline
	baseOrder []string
	latency   []float64
	badSample int
	nis       map[string]*NISSeries
	nisOrder  []string

	// workspace, reused per epoch
	objsNow []TruthObject
	tpos    [][2]float64
	tobj    []*objState
	epos    [][2]float64
	etrk    []*transport.Track
	tMatch  []int // truth index → est index or −1
	eTaken  []bool
	solver  assign.Solver
	cost    []float64
	rowCol  []int
	rows    []int
	cols    []int
	byID    map[uint64]int
}

// New makes an Evaluator for a truth (in increasing t_ns, as ReadTruth
// returns it).
func New(truth []TruthLine, opt Options) (*Evaluator, error) {
	opt, err := opt.withDefaults()
	if err != nil {
		return nil, err
	}
	for i := 1; i < len(truth); i++ {
		if truth[i].TNs <= truth[i-1].TNs {
			return nil, fmt.Errorf("eval: truth line %d: t_ns %d is not after %d", i+1, truth[i].TNs, truth[i-1].TNs)
		}
	}
	e := &Evaluator{
		opt: opt, truth: truth,
		g:        gospa.Metric{C: opt.C, P: opt.P},
		o:        gospa.Metric{C: opt.OSPAC, P: opt.P},
		count:    make(map[string]bool, len(opt.Statuses)),
		objs:     map[string]*objState{},
		trackIDs: map[uint64]bool{},
		base:     map[string]*baseline{},
		nis:      map[string]*NISSeries{},
		byID:     map[uint64]int{},
		lastNs:   math.MinInt64,
	}
	for _, s := range opt.Statuses {
		e.count[s] = true
	}
	return e, nil
}

// Options returns the options in force (defaults filled in).
func (e *Evaluator) Options() Options { return e.opt }

// AddTracks scores one tracks message. Messages are expected in
// non-decreasing t_ns; an older one is skipped and counted (OutOfOrder in
// the Summary): the replay's final message is stamped at the latest
// measurement time, which may lie before the last periodic message. A
// message with no truth within the tolerance is skipped and counted too.
// The error is for failures of the metric itself.
func (e *Evaluator) AddTracks(m *transport.TracksMsg) error {
	if m.TNs < e.lastNs {
		e.outOfOrder++
		return nil
	}
	e.lastNs = m.TNs
	objs, ego, hasEgo, ok := truthAt(e.truth, m.TNs, e.opt.TruthTolNs, e.objsNow)
	e.objsNow = objs
	if !ok {
		e.skipped++
		return nil
	}
	ep := Epoch{TNs: m.TNs, NEES: math.NaN(), EgoErr: math.NaN()}

	// The scored sets.
	e.tpos, e.tobj = e.tpos[:0], e.tobj[:0]
	for i := range objs {
		if !e.inRange(objs[i].Pos, ego, hasEgo) {
			continue
		}
		st := e.objs[objs[i].ID]
		if st == nil {
			st = &objState{id: objs[i].ID, firstNs: m.TNs, confirmNs: -1}
			e.objs[st.id] = st
			e.objOrder = append(e.objOrder, st)
		}
		e.tpos = append(e.tpos, objs[i].Pos)
		e.tobj = append(e.tobj, st)
	}
	e.epos, e.etrk = e.epos[:0], e.etrk[:0]
	for i := range m.Tracks {
		t := &m.Tracks[i]
		if !e.count[t.Status] {
			continue
		}
		if !finite(t.Pos[0]) || !finite(t.Pos[1]) {
			e.ignored++
			continue
		}
		if !e.inRange(t.Pos, ego, hasEgo) {
			continue
		}
		e.epos = append(e.epos, t.Pos)
		e.etrk = append(e.etrk, t)
		e.trackIDs[t.ID] = true
	}
	ep.Truth, ep.Tracks = len(e.tpos), len(e.epos)

	if err := e.setMetrics(&ep, e.tpos, e.epos); err != nil {
		return err
	}
	if err := e.match(); err != nil {
		return err
	}
	e.score(&ep)

	if m.Ego != nil && hasEgo && finite(m.Ego.Pos[0]) && finite(m.Ego.Pos[1]) {
		d := math.Hypot(m.Ego.Pos[0]-ego.Pos[0], m.Ego.Pos[1]-ego.Pos[1])
		ep.EgoErr = d
		e.egoSq += d * d
		e.egoMax = math.Max(e.egoMax, d)
		if finite(m.Ego.Yaw) {
			dy := math.Remainder(m.Ego.Yaw-ego.Yaw, 2*math.Pi)
			e.egoYawSq += dy * dy
		}
		e.egoN++
	}
	e.epochs = append(e.epochs, ep)
	return nil
}

func (e *Evaluator) inRange(p [2]float64, ego TruthEgo, hasEgo bool) bool {
	return e.opt.MaxRange <= 0 || !hasEgo || math.Hypot(p[0]-ego.Pos[0], p[1]-ego.Pos[1]) <= e.opt.MaxRange
}

// setMetrics fills the GOSPA and OSPA values of one epoch.
func (e *Evaluator) setMetrics(ep *Epoch, truth, est [][2]float64) error {
	r, err := e.g.Eval(truth, est)
	if err != nil {
		return err
	}
	half := math.Pow(e.opt.C, e.opt.P) / 2
	ep.GOSPA, ep.Loc = r.Distance, r.Localisation
	ep.Missed, ep.False = r.Missed, r.False
	ep.MissTerm, ep.FalseTerm = half*float64(r.Missed), half*float64(r.False)
	if e.opt.OSPAC == e.opt.C {
		ep.OSPA = ospaFrom(r, len(truth), len(est), e.opt.C, e.opt.P) // same assignment problem
		return nil
	}
	ep.OSPA, err = e.ospa(truth, est)
	return err
}

// ospa is OSPA (Schuhmacher, Vo & Vo 2008, eq. 3) with cut-off OSPAC:
// for |X| = m ≤ n = |Y|,
//
//	d = ( (1/n)·( min_π Σ_{i≤m} min(d(x_i, y_π(i)), c)^p + c^p·(n − m) ) )^(1/p),
//
// 0 when both sets are empty. The optimal π is the same assignment problem
// GOSPA (α = 2) solves with cost min(d, c)^p, so it is read off gospa's
// result: pairs at the cut-off are reported there as one missed plus one
// false each, so Missed + False = 2k + (n − m) with k such pairs, and the
// bracket is Localisation + c^p·(k + n − m)
// = Localisation + c^p·(Missed + False + n − m)/2.
func (e *Evaluator) ospa(truth, est [][2]float64) (float64, error) {
	if len(truth) == 0 && len(est) == 0 {
		return 0, nil
	}
	r, err := e.o.Eval(truth, est)
	if err != nil {
		return 0, err
	}
	return ospaFrom(r, len(truth), len(est), e.opt.OSPAC, e.opt.P), nil
}

// ospaFrom turns a GOSPA (α = 2) result with cut-off c into OSPA (see ospa).
func ospaFrom(r gospa.Result, nx, ny int, c, p float64) float64 {
	m, n := min(nx, ny), max(nx, ny)
	if n == 0 {
		return 0
	}
	cp := math.Pow(c, p)
	sum := r.Localisation + cp*float64(r.Missed+r.False+n-m)/2
	return math.Pow(sum/float64(n), 1/p)
}

// match pairs true objects with tracks for RMSE, NEES, id switches,
// fragmentation and time to confirm, in the manner of the CLEAR MOT
// metrics (Bernardin & Stiefelhagen 2008): an object keeps the track it was
// matched to at its previous epoch while that track still counts and lies
// within MatchDist; the others are matched by an optimal assignment
// minimising the summed squared distance, where leaving an object
// unmatched costs MatchDist² and pairs at MatchDist or farther are not
// allowed. Result in e.tMatch.
func (e *Evaluator) match() error {
	nt, ne := len(e.tpos), len(e.epos)
	e.tMatch = resizeInt(e.tMatch, nt)
	e.eTaken = resizeBool(e.eTaken, ne)
	for i := range e.tMatch {
		e.tMatch[i] = -1
	}
	clear(e.eTaken)
	clear(e.byID)
	for j, t := range e.etrk {
		e.byID[t.ID] = j
	}
	D := e.opt.MatchDist
	for i, st := range e.tobj {
		if !st.prevMatched {
			continue
		}
		j, ok := e.byID[st.lastTrack]
		if !ok || e.eTaken[j] || dist(e.tpos[i], e.epos[j]) >= D {
			continue
		}
		e.tMatch[i], e.eTaken[j] = j, true
	}
	e.rows, e.cols = e.rows[:0], e.cols[:0]
	for i := range e.tMatch {
		if e.tMatch[i] < 0 {
			e.rows = append(e.rows, i)
		}
	}
	for j := range e.eTaken {
		if !e.eTaken[j] {
			e.cols = append(e.cols, j)
		}
	}
	r, c := len(e.rows), len(e.cols)
	if r == 0 || c == 0 {
		return nil
	}
	// Columns: the free tracks, then one "unmatched" column per object.
	w := c + r
	if cap(e.cost) < r*w {
		e.cost = make([]float64, r*w)
	}
	e.cost = e.cost[:r*w]
	e.rowCol = resizeInt(e.rowCol, r)
	inf := math.Inf(1)
	for a, i := range e.rows {
		row := e.cost[a*w : (a+1)*w]
		for b, j := range e.cols {
			if d := dist(e.tpos[i], e.epos[j]); d < D {
				row[b] = d * d
			} else {
				row[b] = inf
			}
		}
		for b := c; b < w; b++ {
			row[b] = inf
		}
		row[c+a] = D * D
	}
	if _, err := e.solver.Solve(e.cost, r, w, e.rowCol); err != nil {
		return fmt.Errorf("eval: matching: %w", err)
	}
	for a, i := range e.rows {
		if b := e.rowCol[a]; b < c {
			e.tMatch[i] = e.cols[b]
			e.eTaken[e.cols[b]] = true
		}
	}
	return nil
}

// score applies the matches of one epoch to the running totals.
//
// Definitions (common practice, in the spirit of CLEAR MOT, Bernardin &
// Stiefelhagen 2008):
//   - id switch: an object matched at this epoch to a track id different
//     from the id it was last matched to (at any earlier epoch);
//   - fragmentation: an object matched at this epoch that was unmatched at
//     the previous epoch it was present at and has been matched before, i.e.
//     its coverage resumes after a gap, whatever the id;
//   - time to confirm: from the first epoch an object is scored at to the
//     first epoch it is matched to a track that is not tentative (so it
//     includes any time the object spends outside every sensor's view).
func (e *Evaluator) score(ep *Epoch) {
	var nees float64
	for i, st := range e.tobj {
		j := e.tMatch[i]
		if j < 0 {
			st.prevMatched = false
			continue
		}
		t := e.etrk[j]
		ep.Matched++
		dx, dy := t.Pos[0]-e.tpos[i][0], t.Pos[1]-e.tpos[i][1]
		e.sqErr += dx*dx + dy*dy
		e.pairs++
		if v, ok := posNEES(dx, dy, t.PosCov); ok {
			nees += v
			ep.NEESPairs++
		}
		if st.hasLast && st.lastTrack != t.ID {
			e.idSwitches++
		}
		if st.everMatched && !st.prevMatched {
			e.fragments++
		}
		if st.confirmNs < 0 && t.Status != "tentative" {
			st.confirmNs = ep.TNs
		}
		st.lastTrack, st.hasLast = t.ID, true
		st.prevMatched, st.everMatched = true, true
	}
	if ep.NEESPairs > 0 {
		ep.NEES = nees / float64(ep.NEESPairs)
		e.neesSum += nees
		e.neesN += ep.NEESPairs
		e.neesEpochs++
		lo, hi := ChiSquareBounds(2, ep.NEESPairs)
		if ep.NEES >= lo && ep.NEES <= hi {
			e.neesInside++
		}
	}
}

// posNEES is the position NEES eᵀP⁻¹e of a 2-vector error with covariance
// P (row-major 2×2, symmetrised), false when P is not positive definite.
func posNEES(dx, dy float64, P [4]float64) (float64, bool) {
	a, b, d := P[0], (P[1]+P[2])/2, P[3]
	det := a*d - b*b
	if !(a > 0) || !(det > 0) || !finite(det) {
		return 0, false
	}
	v := (d*dx*dx - 2*b*dx*dy + a*dy*dy) / det
	return v, finite(v)
}

// AddDetections scores one scan of raw detections, already placed in the
// site frame, against the truth at tNs: the GOSPA a tracker would score if
// it simply passed the detections on (the baseline the tracks should beat).
// Scans of a sensor may come in any order.
func (e *Evaluator) AddDetections(sensor string, tNs int64, pos [][2]float64) error {
	objs, ego, hasEgo, ok := truthAt(e.truth, tNs, e.opt.TruthTolNs, e.objsNow)
	e.objsNow = objs
	b := e.base[sensor]
	if b == nil {
		b = &baseline{}
		e.base[sensor] = b
		e.baseOrder = append(e.baseOrder, sensor)
	}
	if !ok {
		b.skipped++
		return nil
	}
	for _, p := range pos {
		if !finite(p[0]) || !finite(p[1]) {
			b.bad++
			return fmt.Errorf("eval: %s detections at t_ns %d: non-finite position", sensor, tNs)
		}
	}
	truth := e.tpos[:0]
	for i := range objs {
		if e.inRange(objs[i].Pos, ego, hasEgo) {
			truth = append(truth, objs[i].Pos)
		}
	}
	e.tpos = truth
	est := e.epos[:0]
	for _, p := range pos {
		if e.inRange(p, ego, hasEgo) {
			est = append(est, p)
		}
	}
	e.epos = est
	var ep Epoch
	if err := e.setMetrics(&ep, truth, est); err != nil {
		return err
	}
	b.scans++
	b.gospa += ep.GOSPA
	b.loc += ep.Loc
	b.miss += ep.MissTerm
	b.fls += ep.FalseTerm
	b.ospa += ep.OSPA
	return nil
}

type baseline struct {
	scans, skipped, bad         int
	gospa, loc, miss, fls, ospa float64
}

// AddLatency records one latency sample in milliseconds (ingest to
// publish, or whatever the caller measures); a negative or non-finite one
// is refused and counted.
func (e *Evaluator) AddLatency(ms float64) error {
	if !(ms >= 0) || math.IsInf(ms, 0) {
		e.badSample++
		return fmt.Errorf("eval: latency sample %g ms is not a finite value ≥ 0", ms)
	}
	e.latency = append(e.latency, ms)
	return nil
}

// NISSeries is one sensor's NIS over time.
type NISSeries struct {
	Sensor string
	Dim    int // measurement dimension m
	Points []NISPoint
}

// NISPoint is an average NIS over N updates of one sensor, taken at TNs
// (N = 1 for a single update; the engine's SensorStats give the mean over
// its last updates). Its 95% interval is ChiSquareBounds(Dim, N).
type NISPoint struct {
	TNs  int64
	Mean float64
	N    int
}

// AddNIS records one NIS sample of a sensor with measurement dimension dim.
// A sample with N < 1, a non-finite or negative mean, or a dimension that
// differs from the sensor's earlier samples is refused and counted.
func (e *Evaluator) AddNIS(sensor string, dim int, p NISPoint) error {
	if dim < 1 || p.N < 1 || !(p.Mean >= 0) || math.IsInf(p.Mean, 0) {
		e.badSample++
		return fmt.Errorf("eval: NIS sample of %s (dim %d, mean %g over %d) is invalid", sensor, dim, p.Mean, p.N)
	}
	s := e.nis[sensor]
	if s == nil {
		s = &NISSeries{Sensor: sensor, Dim: dim}
		e.nis[sensor] = s
		e.nisOrder = append(e.nisOrder, sensor)
	}
	if s.Dim != dim {
		e.badSample++
		return fmt.Errorf("eval: NIS sample of %s has dim %d, earlier ones %d", sensor, dim, s.Dim)
	}
	s.Points = append(s.Points, p)
	return nil
}

// Epochs returns the per-epoch scores (shared; do not modify).
func (e *Evaluator) Epochs() []Epoch { return e.epochs }

// NIS returns the NIS series in the order sensors first appeared (shared).
func (e *Evaluator) NIS() []NISSeries {
	out := make([]NISSeries, len(e.nisOrder))
	for i, s := range e.nisOrder {
		out[i] = *e.nis[s]
	}
	return out
}

// Latencies returns the latency samples in arrival order (shared).
func (e *Evaluator) Latencies() []float64 { return e.latency }

func dist(a, b [2]float64) float64 { return math.Hypot(a[0]-b[0], a[1]-b[1]) }

func finite(v float64) bool { return !math.IsNaN(v) && !math.IsInf(v, 0) }

func resizeInt(s []int, n int) []int {
	if cap(s) < n {
		return make([]int, n)
	}
	return s[:n]
}

func resizeBool(s []bool, n int) []bool {
	if cap(s) < n {
		return make([]bool, n)
	}
	return s[:n]
}

// sortedCopy returns v sorted ascending, leaving v alone.
func sortedCopy(v []float64) []float64 {
	s := append([]float64(nil), v...)
	sort.Float64s(s)
	return s
}

// Score is the common case: an Evaluator fed every tracks message of a
// replay in file order. Add detections, NIS and latency samples to it
// before asking for the Summary.
func Score(truth []TruthLine, tracks []transport.TracksMsg, opt Options) (*Evaluator, error) {
	e, err := New(truth, opt)
	if err != nil {
		return nil, err
	}
	for i := range tracks {
		if err := e.AddTracks(&tracks[i]); err != nil {
			return nil, err
		}
	}
	return e, nil
}
