// Package engine is godwit's deterministic fusion core: a pure state
// machine in the manner of etcd's raft package. Measurements go in with
// their arrival time (Ingest), time goes in (Advance, Flush); tracks, ego
// and health messages come out into buffers the caller owns. The engine
// reads no clock, starts no goroutine, does no I/O and logs nothing, so the
// daemon, the replay command and the tests all drive the very same code and
// a replay repeats a run bit for bit.
//
// Out-of-sequence measurements (Bar-Shalom 2002 poses the problem; this is
// the exact "reprocessing" solution): every processed scan keeps a snapshot
// of the state taken just before it. A measurement older than the newest
// processed one but inside timing.lag_ms is inserted in time order, the
// state is restored from the snapshot of the scan it displaces, and every
// later scan is processed again, so the result equals in-order processing
// exactly. Older measurements are dropped and counted per sensor.
package engine

import (
	"errors"
	"fmt"
	"math"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/filters"
	"github.com/godwit-fusion/godwit/filters/geo"
	"github.com/godwit-fusion/godwit/filters/models"
	"github.com/godwit-fusion/godwit/filters/particle"
	"github.com/godwit-fusion/godwit/runtime/assign"
	"github.com/godwit-fusion/godwit/transport"
	"gonum.org/v1/gonum/stat/distuv"
)

// Motion-model layouts (DESIGN.md): the engine needs them to form a birth
// state and to read speed and heading for output.
const (
	layoutCV   = iota // [px, py, vx, vy]
	layoutCA          // [px, py, vx, vy, ax, ay]
	layoutCTRV        // [px, py, v, yaw, yawrate]
)

// Errors returned by Ingest. ErrLate (older than the lag window) and
// ErrDuplicate (a repeated message) are normal events on a real network,
// counted and ignored; the others mean malformed input.
var (
	ErrLate        = errors.New("engine: measurement older than the lag window, dropped")
	ErrBadSensor   = errors.New("engine: sensor index out of range")
	ErrBadDims     = errors.New("engine: detection dimension does not match the sensor kind")
	ErrNonFinite   = errors.New("engine: non-finite value in measurement")
	ErrBadCov      = errors.New("engine: detection covariance is not positive definite")
	ErrDuplicate   = errors.New("engine: repeated message (same sensor, time and seq), ignored")
	ErrEgoSingle   = errors.New("engine: an ego sensor message must carry exactly one detection")
	errUnknownKind = errors.New("engine: unknown sensor kind")
)

// Options override choices the configuration makes; the zero value takes
// everything from the configuration.
type Options struct {
	// NewTrackFilter builds one (uninitialised) track filter for the motion
	// model; nil picks tracker.filter.
	NewTrackFilter func(m filters.MotionModel) (filters.Filter, error)
	// MaxPosSD deletes a track whose position s.d. (√trace of the 2×2
	// position covariance) grows past it; 0 means 25 m.
	MaxPosSD float64
	// BirthSpeedSD is the s.d. of each velocity component (CTRV: of the
	// speed) of a new track, m/s; 0 means 5 m/s.
	BirthSpeedSD float64
	// MaxScans bounds the lag-window log (memory): past it the oldest scans
	// leave the window early. 0 means twice what the sensor periods put in
	// timing.lag_ms, plus 16, at most 4096.
	MaxScans int
	// Particles per track for tracker.filter pf; 0 means 500.
	Particles int
}

// sensorRT is a configured sensor at run time: its geometry and noise, and
// the counters the health report needs.
type sensorRT struct {
	name        string
	kind        int
	dim         int
	tm          models.TargetSensor    // tracking sensors: the measurement model with its geometry
	pert        [3]models.TargetSensor // moving platform: copies placed with the ego pose nudged in x, y, yaw
	pinhole     *models.Pinhole        // tm, when the kind is pinhole (range-dependent noise)
	gnss        *models.GNSS           // ego sensors
	noiseSD     []float64
	rsDefault   [9]float64
	rangeSDFrac float64
	gate        float64 // chi-square quantile of tracker.gate_prob, dim dof
	mount       Pose
	periodNs    float64 // configured, for the health report's expectations

	messages, detections, rejected, lateDropped, lost uint64
	lastSeq                                           uint64
	haveSeq                                           bool
	// Sequence numbers skipped by a newer message, oldest first. They are
	// lost only if still missing lag_ms later: a message overtaken on the
	// way is not lost.
	pending     [maxPendingSeqs]pendingSeq
	nPending    int
	lastArrival int64
	haveArrival bool
	meanGapNs   float64

	maxAgeNs float64 // sensor_late above this age at arrival; 0: not judged
	watch    [nSensorWatches]watch

	offsetNs        float64 // estimated clock offset (arrival − t_ns lower envelope)
	haveOffset      bool
	offsetArrivalNs int64

	nis       [nisWindow]float64
	nisN      int
	nisPos    int
	nisBounds [nisWindow + 1][2]float64 // nisProb bounds of the mean NIS by sample count, filled on first use
	nisVer    uint64                    // grows with every NIS sample
	nisSeen   uint64                    // nisVer when the NIS watchdog last looked
}

const nisWindow = 64

// maxPendingSeqs bounds the skipped sequence numbers a sensor holds open at
// once; beyond it the oldest are judged lost at once.
const maxPendingSeqs = 32

// pendingSeq is a sequence number not yet seen although a newer one was,
// and the arrival-clock time from which it counts as lost.
type pendingSeq struct {
	seq   uint64
	dueNs int64
}

// Engine is the fusion core. Create it with New; it is not safe for
// concurrent use (the daemon drives it from one goroutine).
type Engine struct {
	vehicle      string
	layout       int
	modelName    string
	motion       filters.MotionModel
	mkFilter     func() (filters.Filter, error)
	sensors      []*sensorRT
	confirmM     int
	confirmN     int
	deleteMisses int
	maxTracks    int
	lagNs        int64
	periodNs     int64
	estimate     bool
	maxPosVar    float64
	birthSpeedSD float64
	maxScans     int
	marks        poolMarks // high-water marks of the pooled scans and snapshots

	platformMoving bool
	fixedPose      Pose
	egoModel       filters.MotionModel
	mkEgo          func() (filters.Filter, error)
	egoPrior       [5]float64 // s.d. of the ego prior, state order
	egoActive      bool       // this scan's noise carries the ego pose uncertainty
	odo            *models.Odometry

	st   state
	log  []*scan // processed scans in the lag window, in processing order
	free []*scan

	newestNs      int64
	haveNewest    bool
	horizon       *scan // newest scan pruned from the log; nothing at or before it is accepted
	horizonCopy   scan
	haveHorizon   bool
	scratch       filters.Filter
	birthTemplate filters.Filter // pf only: the state every birth starts from
	leanSnap      bool           // track filters are fully described by (x, S) between scans
	egoScratch    filters.Filter
	ws            workspace
	solver        assign.Solver
	outSeq        uint64
	nextDueNs     int64
	dueSet        bool
	sinceEmit     int
	rejectReason  []transport.ReasonCount

	counters Counters

	// Health watchdogs (health.go), on the caller's clock.
	hp        healthParams
	hw        [nVehicleWatches]watch
	hNow      int64 // newest caller time seen
	hStart    int64 // first caller time seen: a sensor never heard is silent from here
	hStarted  bool
	hChanged  bool
	hState    int
	hVersion  uint64
	loadOver  bool    // the latest ReportLoad found an overrun
	dropEarly bool    // ReportDropped came before any clock reading
	blowVar   float64 // largest position variance of a confirmed or coasting track after the last tracking scan
	blowTrack uint64
}

// Counters are engine-wide totals for the caller (daemon metrics, replay summary).
type Counters struct {
	Messages     uint64 // accepted by Ingest (including late-dropped ones)
	Detections   uint64
	Rejected     uint64 // reported by the caller or refused by Ingest
	LateDropped  uint64
	Rewinds      uint64 // late measurements inside the lag window
	Reprocessed  uint64 // scans processed again because of rewinds
	Births       uint64
	Deletions    uint64
	FilterErrors uint64 // predict/update failures (the track is dropped or the update skipped)
	EgoNotReady  uint64 // tracking scans skipped while the ego estimate was still settling
	Emitted      uint64 // tracks messages written
}

// New builds an engine from a validated configuration.
func New(cfg *configs.Config, opt Options) (*Engine, error) {
	if cfg == nil {
		return nil, errors.New("engine: nil configuration")
	}
	tr := cfg.Tracker
	e := &Engine{
		vehicle:      cfg.Vehicle,
		modelName:    tr.Motion,
		confirmM:     tr.Confirm.Hits,
		confirmN:     tr.Confirm.Of,
		deleteMisses: tr.DeleteMisses,
		maxTracks:    tr.MaxTracks,
		lagNs:        int64(cfg.Timing.LagMS * 1e6),
		estimate:     cfg.Timing.Clock == "estimate",
		hp:           newHealthParams(cfg.Health),
		maxScans:     opt.MaxScans,
		birthSpeedSD: opt.BirthSpeedSD,
	}
	if e.confirmN < 1 || e.confirmN > 63 || e.confirmM < 1 || e.confirmM > e.confirmN {
		return nil, fmt.Errorf("engine: tracker.confirm %d of %d: need 1 ≤ hits ≤ of ≤ 63", e.confirmM, e.confirmN)
	}
	if e.deleteMisses < 1 {
		return nil, fmt.Errorf("engine: tracker.delete_misses %d: need ≥ 1", e.deleteMisses)
	}
	if e.maxTracks < 1 {
		return nil, fmt.Errorf("engine: tracker.max_tracks %d: need ≥ 1", e.maxTracks)
	}
	if !(tr.GateProb > 0 && tr.GateProb < 1) {
		return nil, fmt.Errorf("engine: tracker.gate_prob %v: need 0 < p < 1", tr.GateProb)
	}
	if !(cfg.Timing.LagMS >= 0) {
		return nil, fmt.Errorf("engine: timing.lag_ms %v: need ≥ 0", cfg.Timing.LagMS)
	}
	if c := cfg.Timing.Clock; c != "synced" && c != "estimate" && c != "" {
		return nil, fmt.Errorf("engine: timing.clock %q: need synced or estimate", c)
	}
	if r := cfg.Output.RateHz; r > 0 {
		e.periodNs = int64(1e9/r + 0.5)
	} else if r < 0 || math.IsNaN(r) {
		return nil, fmt.Errorf("engine: output.rate_hz %v: need ≥ 0", r)
	}
	if e.maxScans <= 0 {
		// Twice the scans the configured periods put in the lag window, so
		// memory stays bounded when a sensor floods; a sensor without a
		// period counts as 50 Hz.
		var perWindow float64
		for _, sc := range cfg.Sensors {
			p := sc.PeriodMS
			if !(p > 0) {
				p = 20
			}
			perWindow += cfg.Timing.LagMS / p
		}
		e.maxScans = int(math.Min(2*perWindow+16, 4096))
	}
	if e.birthSpeedSD <= 0 {
		e.birthSpeedSD = 5
	}
	maxPosSD := opt.MaxPosSD
	if maxPosSD <= 0 {
		maxPosSD = 25
	}
	e.maxPosVar = maxPosSD * maxPosSD

	var err error
	switch tr.Motion {
	case "cv":
		e.layout = layoutCV
		e.motion, err = models.NewCV(tr.AccelSD)
	case "ca":
		e.layout = layoutCA
		e.motion, err = models.NewCA(tr.AccelSD) // accel_sd read as the jerk density, see models.NewCA
	case "ctrv":
		e.layout = layoutCTRV
		e.motion, err = models.NewCTRV(tr.AccelSD, tr.YawAccelSD)
	default:
		return nil, fmt.Errorf("engine: tracker.motion %q: need cv, ca or ctrv", tr.Motion)
	}
	if err != nil {
		return nil, fmt.Errorf("engine: tracker: %w", err)
	}
	newF := opt.NewTrackFilter
	if newF == nil {
		newF, err = filterByName(tr.Filter, opt.Particles)
		if err != nil {
			return nil, err
		}
	}
	e.mkFilter = func() (filters.Filter, error) { return newF(e.motion) }
	if e.scratch, err = e.mkFilter(); err != nil {
		return nil, fmt.Errorf("engine: track filter: %w", err)
	}
	switch e.scratch.(type) {
	case *filters.SREKF, *filters.SRUKF:
		e.leanSnap = true
	}
	if _, ok := e.scratch.(*particle.Filter); ok {
		// A particle filter's random source is part of its state, and a
		// spare filter's leftovers differ between an in-order run and a
		// rewind: every birth starts from this pristine copy instead.
		if e.birthTemplate, err = e.mkFilter(); err != nil {
			return nil, err
		}
	}

	switch cfg.Platform.Motion {
	case "", "fixed":
		p := cfg.Platform.Pose
		e.fixedPose = Pose{X: p.X, Y: p.Y, Yaw: p.YawDeg * math.Pi / 180}
	case "moving":
		e.platformMoving = true
		p := cfg.Platform.Pose
		e.fixedPose = Pose{X: p.X, Y: p.Y, Yaw: p.YawDeg * math.Pi / 180} // the ego prior
		if e.egoModel, err = models.NewEgo(egoAccelSD, egoYawAccelSD); err != nil {
			return nil, err
		}
		e.mkEgo = func() (filters.Filter, error) { return filters.NewSRUKF(e.egoModel, filters.DefaultUTParams()) }
		if e.st.ego, err = e.mkEgo(); err != nil {
			return nil, err
		}
	default:
		return nil, fmt.Errorf("engine: platform.motion %q: need fixed or moving", cfg.Platform.Motion)
	}

	if len(cfg.Sensors) == 0 {
		return nil, errors.New("engine: no sensors configured")
	}
	for i, sc := range cfg.Sensors {
		k, ok := kindByName(sc.Kind)
		if !ok {
			return nil, fmt.Errorf("%w: sensors[%d].kind %q", errUnknownKind, i, sc.Kind)
		}
		s := &sensorRT{name: sc.Name, kind: k, dim: kindDims[k], rangeSDFrac: sc.RangeSDFrac,
			mount:    Pose{X: sc.Mount.X, Y: sc.Mount.Y, Yaw: sc.Mount.YawDeg * math.Pi / 180},
			periodNs: sc.PeriodMS * 1e6, maxAgeNs: sc.MaxAgeMS * 1e6}
		if len(sc.NoiseSD) != s.dim {
			return nil, fmt.Errorf("engine: sensors[%d] (%s): noise_sd has %d values, kind %s needs %d", i, sc.Name, len(sc.NoiseSD), sc.Kind, s.dim)
		}
		for j, sd := range sc.NoiseSD {
			if !(sd > 0) || math.IsInf(sd, 0) {
				return nil, fmt.Errorf("engine: sensors[%d] (%s): noise_sd[%d] = %v, need > 0", i, sc.Name, j, sd)
			}
			s.rsDefault[j*s.dim+j] = sd
		}
		s.noiseSD = append([]float64(nil), sc.NoiseSD...)
		s.gate = distuv.ChiSquared{K: float64(s.dim)}.Quantile(tr.GateProb)
		switch k {
		case kindGNSS, kindOdometry:
			if !e.platformMoving {
				return nil, fmt.Errorf("engine: sensors[%d] (%s): kind %s needs platform.motion moving", i, sc.Name, sc.Kind)
			}
			if k == kindGNSS {
				mount := models.Mount{X: s.mount.X, Y: s.mount.Y, Yaw: s.mount.Yaw}
				if s.gnss, err = models.NewGNSS(e.egoModel, cfg.Site.Lat, cfg.Site.Lon, cfg.Site.Alt, mount); err == nil {
					err = s.gnss.SetNoise(sc.NoiseSD)
				}
				if err != nil {
					return nil, fmt.Errorf("engine: sensors[%d] (%s): %w", i, sc.Name, err)
				}
			}
		default:
			spec := models.Spec{Kind: sc.Kind, Mount: models.Mount{X: s.mount.X, Y: s.mount.Y, Yaw: s.mount.Yaw},
				Coverage: models.Coverage{MaxRange: sc.MaxRange, FOV: sc.FOVDeg * math.Pi / 180},
				NoiseSD:  sc.NoiseSD, FX: sc.FX, CX: sc.CX, RangeSDFrac: sc.RangeSDFrac}
			if spec.Coverage.FOV >= 2*math.Pi {
				spec.Coverage.FOV = 0 // all round
			}
			for c := -1; c < 3; c++ {
				if c >= 0 && !e.platformMoving {
					break
				}
				tm, err := models.NewTargetSensor(e.motion, spec)
				if err != nil {
					return nil, fmt.Errorf("engine: sensors[%d] (%s): %w", i, sc.Name, err)
				}
				if c < 0 {
					s.tm = tm
				} else {
					s.pert[c] = tm
				}
			}
			s.pinhole, _ = s.tm.(*models.Pinhole)
		}
		e.sensors = append(e.sensors, s)
	}
	if e.platformMoving {
		// Without GNSS the configured start pose is the only absolute
		// information: trust it. With GNSS, start loose and let it settle.
		e.egoPrior = [5]float64{egoInitPosSD, egoInitPosSD, egoInitSpeedSD, egoInitYawSD, egoInitYawRateSD}
		hasGNSS := false
		for _, s := range e.sensors {
			hasGNSS = hasGNSS || s.kind == kindGNSS
		}
		if !hasGNSS {
			e.egoPrior[0], e.egoPrior[1], e.egoPrior[3] = egoKnownPosSD, egoKnownPosSD, egoKnownYawSD
		}
		if e.odo, err = models.NewOdometry(e.egoModel); err != nil {
			return nil, err
		}
	}
	for _, r := range rejectReasons {
		e.rejectReason = append(e.rejectReason, transport.ReasonCount{Reason: r})
	}
	return e, nil
}

// Fixed seeds of the particle filters' random source: runs repeat.
const (
	pfSeed1 = 0x676f64776974 // arbitrary
	pfSeed2 = 1
)

// reseeder is a track filter with a random source of its own (the particle
// filter), reseeded at every birth.
type reseeder interface {
	Reseed(seed1, seed2 uint64)
}

// trackSeed spreads a track id over 64 bits with the SplitMix64 finaliser
// (Steele, Lea & Flood 2014, "Fast splittable pseudorandom number
// generators", OOPSLA), so that consecutive ids seed unrelated streams.
func trackSeed(id uint64) uint64 {
	z := id + 0x9e3779b97f4a7c15
	z = (z ^ (z >> 30)) * 0xbf58476d1ce4e5b9
	z = (z ^ (z >> 27)) * 0x94d049bb133111eb
	return z ^ (z >> 31)
}

// rejectReasons is the fixed order of the health message's counters.rejected
// (the decoder's reason codes first, then the engine's own).
var rejectReasons = []string{"bad_json", "unknown_sensor", "bad_dims", "non_finite", "bad_cov",
	"time_implausible", "too_large", "bad_version", "duplicate", "out_of_range", "other"}

func filterByName(name string, particles int) (func(filters.MotionModel) (filters.Filter, error), error) {
	switch name {
	case "srkf", "srekf", "":
		return func(m filters.MotionModel) (filters.Filter, error) { return filters.NewSREKF(m) }, nil
	case "srukf":
		return func(m filters.MotionModel) (filters.Filter, error) {
			return filters.NewSRUKF(m, filters.DefaultUTParams())
		}, nil
	case "pf":
		if particles <= 0 {
			particles = 500
		}
		return func(m filters.MotionModel) (filters.Filter, error) {
			return particle.New(m, particle.Config{Particles: particles, Seed1: pfSeed1, Seed2: pfSeed2})
		}, nil
	}
	return nil, fmt.Errorf("engine: tracker.filter %q: need srkf, srekf, srukf or pf", name)
}

// Reject records a message the caller refused before Ingest (a decoder
// error), by reason code; sensor is its index, or −1 when unknown.
func (e *Engine) Reject(sensor int, reason string) {
	e.counters.Rejected++
	if sensor >= 0 && sensor < len(e.sensors) {
		e.sensors[sensor].rejected++
	}
	for i := range e.rejectReason {
		if e.rejectReason[i].Reason == reason {
			e.rejectReason[i].Count++
			return
		}
	}
	e.rejectReason[len(e.rejectReason)-1].Count++ // "other"
}

// Ingest takes one measurement message that arrived at arrivalNs (the
// caller's clock). It copies what it keeps: m may be reused at once. A
// message with any invalid part changes no track and returns an error; a
// message older than the lag window returns ErrLate and is counted.
func (e *Engine) Ingest(m *transport.Measurement, arrivalNs int64) error {
	e.healthTick(arrivalNs)
	err := e.ingest(m, arrivalNs)
	e.settle()
	return err
}

func (e *Engine) ingest(m *transport.Measurement, arrivalNs int64) error {
	if m.SensorIdx < 0 || m.SensorIdx >= len(e.sensors) {
		e.Reject(-1, "unknown_sensor")
		return ErrBadSensor
	}
	s := e.sensors[m.SensorIdx]
	// The sensor spoke even when its message is refused: its sequence
	// number and arrival still count for gaps, rate, age and silence.
	e.heardFrom(s, arrivalNs)
	e.noteArrival(s, m, arrivalNs)
	if reason, err := e.validate(s, m); err != nil {
		e.Reject(m.SensorIdx, reason)
		return err
	}
	e.noteOffset(s, m, arrivalNs)
	age := arrivalNs - m.TNs
	if e.estimate {
		age -= int64(math.Round(s.offsetNs)) // the excess over the least latency
	}
	e.noteLate(s, age, arrivalNs)
	e.counters.Messages++
	e.counters.Detections += uint64(len(m.Dets))
	s.messages++
	s.detections += uint64(len(m.Dets))

	t := m.TNs
	if e.estimate {
		t += int64(math.Round(s.offsetNs))
	}
	sc := e.takeScan()
	sc.tNs, sc.sensor, sc.seq, sc.fresh = t, m.SensorIdx, m.Seq, true
	sc.dets = reserve(sc.dets, len(m.Dets), &e.marks.dets)
	for i := range m.Dets {
		d := &m.Dets[i]
		var sd storedDet
		copy(sd.z[:], d.Z[:d.Dim])
		sd.class = d.Class
		if d.HasR {
			sd.hasR = true
			sd.r = d.R
			chol(sd.rs[:], sd.r[:], d.Dim) // validated above
		}
		sc.dets = append(sc.dets, sd)
	}

	if (e.haveNewest && t < e.newestNs-e.lagNs) || (e.haveHorizon && !e.horizon.before(sc)) {
		e.free = append(e.free, sc)
		e.noteCount(&s.watch[wLateDropped], 1, arrivalNs)
		s.lateDropped++
		e.counters.LateDropped++
		return ErrLate
	}
	// Insert in processing order; p is where it lands.
	p := len(e.log)
	for p > 0 && sc.before(e.log[p-1]) {
		p--
	}
	if p > 0 && !e.log[p-1].before(sc) {
		// Same time, sensor and sequence number: a repeated message.
		e.free = append(e.free, sc)
		e.Reject(sc.sensor, "duplicate")
		return ErrDuplicate
	}
	e.log = append(e.log, nil)
	copy(e.log[p+1:], e.log[p:])
	e.log[p] = sc
	if p < len(e.log)-1 {
		// Rewind: back to the state just before the displaced scan.
		e.counters.Rewinds++
		if err := restoreLean(&e.st, &e.log[p+1].snap, e.leanSnap, e.motion.Dim(), e.mkFilter); err != nil {
			// Nothing was restored: take the message out again and go on
			// from the state as it was.
			copy(e.log[p:], e.log[p+1:])
			e.log = e.log[:len(e.log)-1]
			e.free = append(e.free, sc)
			return e.fail(err)
		}
		e.counters.Reprocessed += uint64(len(e.log) - 1 - p)
	}
	for i := p; i < len(e.log); i++ {
		x := e.log[i]
		if err := saveLean(&x.snap, &e.st, e.leanSnap, e.mkFilter, &e.marks); err != nil {
			return e.fail(err)
		}
		e.process(x)
		x.fresh = false
	}
	e.sinceEmit++
	if !e.haveNewest || t > e.newestNs {
		e.newestNs, e.haveNewest = t, true
	}
	e.prune()
	e.afterScan(s)
	return nil
}

func (e *Engine) fail(err error) error {
	e.counters.FilterErrors++
	return fmt.Errorf("engine: snapshot: %w", err)
}

func (e *Engine) takeScan() *scan {
	if n := len(e.free); n > 0 {
		sc := e.free[n-1]
		e.free = e.free[:n-1]
		return sc
	}
	return &scan{}
}

// prune drops scans that fell out of the lag window (or past MaxScans);
// their snapshots are no longer needed, since nothing may be inserted
// before them any more.
func (e *Engine) prune() {
	k := 0
	for k < len(e.log)-1 && (e.log[k].tNs < e.newestNs-e.lagNs || len(e.log)-k > e.maxScans) {
		k++
	}
	if k == 0 {
		return
	}
	last := e.log[k-1]
	e.horizonCopy.tNs, e.horizonCopy.sensor, e.horizonCopy.seq = last.tNs, last.sensor, last.seq
	e.horizon, e.haveHorizon = &e.horizonCopy, true
	e.free = append(e.free, e.log[:k]...)
	n := copy(e.log, e.log[k:])
	for i := n; i < len(e.log); i++ {
		e.log[i] = nil
	}
	e.log = e.log[:n]
}

func (e *Engine) validate(s *sensorRT, m *transport.Measurement) (string, error) {
	if (s.kind == kindGNSS || s.kind == kindOdometry) && len(m.Dets) != 1 {
		return "bad_dims", ErrEgoSingle
	}
	for i := range m.Dets {
		d := &m.Dets[i]
		if d.Dim != s.dim {
			return "bad_dims", fmt.Errorf("%w: %s dets[%d] has %d values, kind %s needs %d", ErrBadDims, s.name, i, d.Dim, kindNames[s.kind], s.dim)
		}
		for j := 0; j < d.Dim; j++ {
			if math.IsNaN(d.Z[j]) || math.IsInf(d.Z[j], 0) {
				return "non_finite", fmt.Errorf("%w: %s dets[%d].z[%d]", ErrNonFinite, s.name, i, j)
			}
		}
		if s.kind == kindGNSS {
			if err := geo.CheckGeodetic(d.Z[0], d.Z[1], 0); err != nil {
				return "out_of_range", fmt.Errorf("engine: %s dets[%d]: %w", s.name, i, err)
			}
		}
		if d.HasR {
			var L [9]float64
			for j := 0; j < d.Dim*d.Dim; j++ {
				if math.IsNaN(d.R[j]) || math.IsInf(d.R[j], 0) {
					return "non_finite", fmt.Errorf("%w: %s dets[%d].r[%d]", ErrNonFinite, s.name, i, j)
				}
			}
			for a := 0; a < d.Dim; a++ {
				for b := 0; b < a; b++ {
					if d.R[a*d.Dim+b] != d.R[b*d.Dim+a] {
						return "bad_cov", fmt.Errorf("%w: %s dets[%d].r is not symmetric", ErrBadCov, s.name, i)
					}
				}
			}
			if !chol(L[:], d.R[:], d.Dim) {
				return "bad_cov", fmt.Errorf("%w: %s dets[%d].r", ErrBadCov, s.name, i)
			}
		}
	}
	return "", nil
}

// noteArrival keeps the rate, age and sequence-gap statistics.
func (e *Engine) noteArrival(s *sensorRT, m *transport.Measurement, arrivalNs int64) {
	if s.haveSeq {
		switch {
		case m.Seq > s.lastSeq+1:
			e.skipSeqs(s, s.lastSeq+1, m.Seq-1, arrivalNs)
		case m.Seq < s.lastSeq:
			s.arrivedLate(m.Seq)
		}
	}
	if !s.haveSeq || m.Seq > s.lastSeq {
		s.lastSeq, s.haveSeq = m.Seq, true
	}
	if s.haveArrival && arrivalNs > s.lastArrival {
		gap := float64(arrivalNs - s.lastArrival)
		if s.meanGapNs == 0 {
			s.meanGapNs = gap
		} else {
			s.meanGapNs += (gap - s.meanGapNs) / 16 // EWMA over ~16 messages
		}
	}
	if !s.haveArrival || arrivalNs > s.lastArrival {
		s.lastArrival, s.haveArrival = arrivalNs, true
	}
}

// skipSeqs holds the sequence numbers lo..hi open: a newer message came
// first. Each is lost if it has not arrived lag_ms after arrivalNs. Only
// the newest maxPendingSeqs are held; older ones are lost at once (a gap
// that wide is loss, not reordering).
func (e *Engine) skipSeqs(s *sensorRT, lo, hi uint64, arrivalNs int64) {
	if n := hi - lo + 1; n > maxPendingSeqs {
		e.loseSeqs(s, n-maxPendingSeqs, arrivalNs)
		lo = hi - maxPendingSeqs + 1
	}
	due := arrivalNs + e.lagNs
	if s.nPending > 0 {
		due = max(due, s.pending[s.nPending-1].dueNs) // keep the queue in due order
	}
	for q := lo; ; q++ {
		if s.nPending == maxPendingSeqs {
			e.loseSeqs(s, 1, arrivalNs)
			copy(s.pending[:], s.pending[1:])
			s.nPending--
		}
		s.pending[s.nPending] = pendingSeq{seq: q, dueNs: due}
		s.nPending++
		if q == hi {
			break
		}
	}
}

// arrivedLate takes a sequence number older than the newest seen off the
// open list: it was overtaken, not lost. One judged lost already stays
// counted (it came later than lag_ms), as does a repeat.
func (s *sensorRT) arrivedLate(seq uint64) {
	for i := 0; i < s.nPending; i++ {
		if s.pending[i].seq == seq {
			copy(s.pending[i:], s.pending[i+1:s.nPending])
			s.nPending--
			return
		}
	}
}

// settleSeqs judges lost the open sequence numbers due by now, or all of
// them when all is set (the input has ended).
func (e *Engine) settleSeqs(s *sensorRT, now int64, all bool) {
	k := 0
	for ; k < s.nPending && (all || s.pending[k].dueNs <= now); k++ {
		e.loseSeqs(s, 1, min(s.pending[k].dueNs, now))
	}
	if k == 0 {
		return
	}
	copy(s.pending[:], s.pending[k:s.nPending])
	s.nPending -= k
}

// loseSeqs counts n sequence numbers lost at time at.
func (e *Engine) loseSeqs(s *sensorRT, n uint64, at int64) {
	e.noteCount(&s.watch[wLost], n, at)
	s.lost += n
}

// noteOffset updates the clock offset estimate with an accepted message.
func (e *Engine) noteOffset(s *sensorRT, m *transport.Measurement, arrivalNs int64) {
	// Clock offset: the lower envelope of d = arrival − t_ns. Latency only
	// adds to d, so its minimum is the offset plus the least latency; the
	// envelope may rise by at most maxDrift per second of arrival time so
	// that a drifting clock is followed and a late burst is not.
	d := float64(arrivalNs - m.TNs)
	if !s.haveOffset {
		s.offsetNs, s.haveOffset, s.offsetArrivalNs = d, true, arrivalNs
		return
	}
	if dt := arrivalNs - s.offsetArrivalNs; dt > 0 {
		s.offsetNs += maxDrift * float64(dt)
		s.offsetArrivalNs = arrivalNs
	}
	if d < s.offsetNs-e.hp.clockJumpNs && s.messages >= jumpMinMessages {
		// The envelope drops at once: the sensor's clock stepped forward
		// against arrival time (or its least latency fell by this much).
		w := &s.watch[wClockJump]
		e.mark(w.event(arrivalNs, &e.hp))
		w.n++
		if j := (d - s.offsetNs) * 1e-6; math.Abs(j) > math.Abs(w.v1) {
			w.v1, w.dirty = j, true
		}
	}
	if d < s.offsetNs {
		s.offsetNs = d
	}
}

// maxDrift is the fastest the clock offset estimate may grow, s/s: 200 ppm,
// twice the tolerance of a plain crystal oscillator (common practice).
const maxDrift = 200e-6

// Parameters of the ego motion model: a road or yard vehicle changes speed
// by about 1 m/s and heading rate by about 0.3 rad/s within a second
// (common practice for a planar platform model).
const (
	egoAccelSD    = 1.0
	egoYawAccelSD = 0.3
)
