package engine

import (
	"fmt"
	"math"
	"slices"
	"strings"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/filters"
	"github.com/godwit-fusion/godwit/transport"
)

// Health watchdogs. Every condition is judged on the caller's clock as the
// engine sees it (arrival times given to Ingest, the times given to Advance
// and Health), never on a wall clock, so a replay raises and clears the
// same alerts at the same times. A condition is either continuous (it holds
// over an interval whose ends are known exactly, e.g. a sensor silent from
// its last message plus k periods until its next message) or an event (a
// sequence gap, a late drop): an event makes its condition hold for
// health.event_hold_ms after it. Each condition passes through the same
// hysteresis: it must hold health.raise_ms without a break before its
// alert is raised, and be absent health.clear_ms without a break before the
// alert clears. Transitions are recorded at their own times and judged
// retroactively, so the outcome does not depend on how often the caller
// asks.

// Per-sensor alert codes, in the order of sensorRT.watch.
const (
	wSilent = iota
	wLate
	wLost
	wLateDropped
	wNIS
	wClockJump
	nSensorWatches
)

// Vehicle-wide alert codes, in the order of Engine.hw.
const (
	wBlowup = iota
	wNumeric
	wOverrun
	wBroker
	nVehicleWatches
)

var sensorWatchCodes = [nSensorWatches]string{"sensor_silent", "sensor_late", "messages_lost", "late_dropped",
	"nis_inconsistent", "clock_offset_jump"}
var vehicleWatchCodes = [nVehicleWatches]string{"covariance_blowup", "numeric_reset", "overrun", "broker_disconnected"}

// Health state names (DESIGN.md health message).
const (
	stateOK = iota
	stateDegraded
	stateFailed
)

var stateNames = [...]string{"ok", "degraded", "failed"}

// Defaults of the health keys that a configuration built in code may leave
// at zero (configs.Load fills the same values, see configs/REFERENCE.md).
const (
	defSilentPeriods = 3
	defEventHoldMS   = 1000
	defMaxPosSDM     = 10
	defStepBudgetMS  = 25
	defClockJumpMS   = 50
	// queueHigh: a queue at least half full is falling behind (common
	// practice for back-pressure alarms); full means messages are dropped.
	queueHigh = 0.5
	// nisProb is the two-sided probability of the NIS interval (Bar-Shalom,
	// Li & Kirubarajan 2001, §5.4.2 use 95%); nisMinSamples is how many
	// updates the windowed mean needs before it is judged.
	nisProb       = 0.95
	nisMinSamples = 10
	// jumpMinMessages: the clock offset estimate starts from whatever
	// latency the first messages had (a backlog after subscribing), so it
	// is not judged before this many accepted messages.
	jumpMinMessages = 20
)

// healthParams are the thresholds, in ns where they are times.
type healthParams struct {
	raiseNs, clearNs, holdNs int64
	silentPeriods            float64
	maxPosVar                float64 // covariance_blowup bound, m², on the position variance trace
	maxPosSD                 float64
	stepBudgetNs             int64
	clockJumpNs              float64
}

func newHealthParams(h configs.Health) healthParams {
	or := func(v, d float64) float64 {
		if v > 0 && !math.IsInf(v, 0) {
			return v
		}
		return d
	}
	nonNeg := func(v float64) int64 {
		if v > 0 && !math.IsInf(v, 0) {
			return int64(v * 1e6)
		}
		return 0
	}
	p := healthParams{raiseNs: nonNeg(h.RaiseMS), clearNs: nonNeg(h.ClearMS),
		holdNs:        int64(or(h.EventHoldMS, defEventHoldMS) * 1e6),
		silentPeriods: or(h.SilentPeriods, defSilentPeriods),
		maxPosSD:      or(h.MaxPosSDM, defMaxPosSDM),
		stepBudgetNs:  int64(or(h.StepBudgetMS, defStepBudgetMS) * 1e6),
		clockJumpNs:   or(h.ClockJumpMS, defClockJumpMS) * 1e6}
	p.maxPosVar = p.maxPosSD * p.maxPosSD
	return p
}

// watch is one condition under hysteresis, with the numbers its alert's
// detail is made of.
type watch struct {
	on, raised        bool
	onSince, offSince int64
	since             int64 // start of the raised episode: the alert's since_ns
	last              int64 // event conditions: time of the latest event
	dirty             bool  // the detail must be formatted again
	err               bool  // severity error instead of warning
	detail            string

	n      uint64  // a count in this episode
	v1, v2 float64 // a peak or the values at onset, per code
	track  uint64
	drops  uint64 // overrun: input messages the caller dropped in this episode
}

// judge applies the hysteresis at time now and reports whether the alert
// was raised or cleared.
func (w *watch) judge(now int64, p *healthParams) bool {
	if !w.raised && w.on && now-w.onSince >= p.raiseNs {
		w.raised, w.since, w.dirty = true, w.onSince, true
		return true
	}
	if w.raised && !w.on && now-w.offSince >= p.clearNs {
		w.raised = false
		return true
	}
	return false
}

// set records that the condition holds (or not) from time at. A time
// before the previous transition (a caller's clock stepping back) is taken
// as that transition's time, so episodes never run backwards.
func (w *watch) set(on bool, at int64, p *healthParams) bool {
	if on == w.on {
		return false
	}
	if w.on {
		at = max(at, w.onSince)
	} else {
		at = max(at, w.offSince)
	}
	changed := w.judge(at, p)
	w.on = on
	if on {
		w.onSince = at
		if !w.raised { // a new episode: its numbers start again
			w.n, w.v1, w.v2, w.track, w.drops = 0, 0, 0, 0, 0
		}
	} else {
		w.offSince = at
	}
	return changed
}

// event makes an event condition hold from at for the hold time.
func (w *watch) event(at int64, p *healthParams) bool {
	c := w.expire(at, p)
	if !w.on {
		c = w.set(true, at, p) || c
	}
	w.last = max(w.last, at)
	return c
}

// expire ends an event condition whose hold time has passed by now
// (continuous conditions have no events: last stays 0, caller times are
// positive).
func (w *watch) expire(now int64, p *healthParams) bool {
	if w.on && w.last > 0 && now >= w.last+p.holdNs {
		return w.set(false, w.last+p.holdNs, p)
	}
	return false
}

// healthTick takes one reading of the caller's clock. Times ≤ 0 are not a
// clock reading (a caller asking for counters with t = 0) and are ignored.
func (e *Engine) healthTick(t int64) {
	if t <= 0 {
		return
	}
	if !e.hStarted {
		e.hStart, e.hStarted = t, true
		// A report that came before any clock reading (broker down at
		// start) holds from the first reading.
		for k := range e.hw {
			if w := &e.hw[k]; w.on {
				w.onSince = t
			}
		}
		if e.dropEarly {
			e.hw[wOverrun].last = t
		}
	}
	e.hNow = max(e.hNow, t)
}

func (e *Engine) mark(changed bool) {
	if changed {
		e.hChanged = true
	}
}

// silentNs is how long a sensor may be quiet before sensor_silent holds; 0
// when it has no configured period.
func (e *Engine) silentNs(s *sensorRT) int64 {
	if !(s.periodNs > 0) {
		return 0
	}
	return int64(e.hp.silentPeriods * s.periodNs)
}

// heardFrom records, before a sensor's arrival statistics move on, that it
// spoke at arrivalNs: the silence before it (if any) is an interval with
// known ends.
func (e *Engine) heardFrom(s *sensorRT, arrivalNs int64) {
	thr := e.silentNs(s)
	if thr <= 0 || !e.hStarted {
		return
	}
	ref := e.hStart
	if s.haveArrival {
		ref = s.lastArrival
	}
	w := &s.watch[wSilent]
	if arrivalNs-ref > thr {
		e.mark(w.set(true, ref+thr, &e.hp))
	}
	e.mark(w.set(false, max(arrivalNs, ref), &e.hp))
}

// noteLate records a message that arrived ageNs after it was measured
// (excess over the least latency with timing.clock estimate).
func (e *Engine) noteLate(s *sensorRT, ageNs, arrivalNs int64) {
	if !(s.maxAgeNs > 0) || float64(ageNs) <= s.maxAgeNs {
		return
	}
	w := &s.watch[wLate]
	e.mark(w.event(arrivalNs, &e.hp))
	w.n++
	if a := float64(ageNs) * 1e-6; a > w.v1 {
		w.v1, w.dirty = a, true
	}
}

func (e *Engine) noteCount(w *watch, k uint64, at int64) {
	e.mark(w.event(at, &e.hp))
	w.n += k
	w.dirty = true
}

// noteReset records a track dropped because its filter failed (a
// non-finite value or a lost positive definiteness caught by the filter).
func (e *Engine) noteReset(id uint64) {
	w := &e.hw[wNumeric]
	e.mark(w.event(e.hNow, &e.hp))
	w.n++
	w.track = id
	w.dirty = true
}

// afterScan judges what a processed message changed: the sensor's NIS
// window and the tracks' uncertainty.
func (e *Engine) afterScan(s *sensorRT) {
	now := e.hNow
	if s.nisVer != s.nisSeen {
		s.nisSeen = s.nisVer
		ok, mean := s.nisOK()
		w := &s.watch[wNIS]
		e.mark(w.set(!ok, now, &e.hp))
		if !ok {
			// Keep the mean furthest from its expectation m in this episode.
			if d := math.Abs(mean - float64(s.dim)); w.v2 == 0 || d > math.Abs(w.v1-float64(s.dim)) {
				w.v1, w.v2, w.n, w.dirty = mean, 1, uint64(s.nisN), true
			}
		}
	}
	w := &e.hw[wBlowup]
	blown := e.blowVar > e.hp.maxPosVar
	e.mark(w.set(blown, now, &e.hp))
	if blown {
		if sd := math.Sqrt(e.blowVar); w.track != e.blowTrack || sd > w.v1 {
			w.track, w.v1, w.dirty = e.blowTrack, sd, true
		}
	}
}

// ReportLoad tells the engine how the caller keeps up: the depth and
// capacity of its input queue and the time its last step took (one Ingest
// with its outputs), ns of its own clock. A queue at least half full or a
// step over health.step_budget_ms is an overrun; a full queue (the caller
// drops input) makes it an error. It is judged at the newest time the
// engine has seen.
func (e *Engine) ReportLoad(depth, capacity int, stepNs int64) {
	over := (capacity > 0 && float64(depth) >= queueHigh*float64(capacity)) || stepNs > e.hp.stepBudgetNs
	w := &e.hw[wOverrun]
	wasOver := e.loadOver
	e.loadOver = over
	switch {
	case over:
		e.mark(w.set(true, e.hNow, &e.hp))
	case wasOver && !e.dropHeld(e.hNow):
		e.mark(w.set(false, e.hNow, &e.hp))
	case !wasOver:
		e.mark(w.expire(e.hNow, &e.hp)) // only a drop held it
	}
	if !over {
		e.settle()
		return
	}
	if uint64(depth) > w.n || uint64(capacity) != uint64(w.v2) {
		w.n, w.v2, w.dirty = uint64(max(depth, 0)), float64(capacity), true
	}
	if s := float64(stepNs) * 1e-6; s > w.v1 {
		w.v1, w.dirty = s, true
	}
	if full := capacity > 0 && depth >= capacity; full && !w.err {
		w.err, w.dirty = true, true
	}
	e.settle()
}

// ReportDropped tells the engine that the caller dropped n input messages
// since its last report (a full queue): an overrun event at the newest time
// the engine has seen, of severity error, which holds the overrun condition
// for health.event_hold_ms. A drop is over in an instant, far shorter than
// health.raise_ms, so without the hold a burst that overflowed the queue
// between two reports would never be seen. Before any clock reading it
// holds from the first one.
func (e *Engine) ReportDropped(n uint64) {
	if n == 0 {
		return
	}
	w := &e.hw[wOverrun]
	if e.loadOver {
		w.last = max(w.last, e.hNow) // on already; the load report ends it
	} else {
		e.mark(w.event(e.hNow, &e.hp))
	}
	if !e.hStarted {
		e.dropEarly = true
	}
	w.drops += n
	if !w.err {
		e.hChanged = true
	}
	w.err, w.dirty = true, true
	e.settle()
}

// dropHeld reports whether a drop still holds the overrun condition at now.
func (e *Engine) dropHeld(now int64) bool {
	w := &e.hw[wOverrun]
	return w.drops > 0 && w.last > 0 && now < w.last+e.hp.holdNs
}

// ReportBroker tells the engine whether the caller is connected to its
// MQTT broker; a disconnection is judged from the newest time the engine
// has seen. An engine never told (replay) counts as connected.
func (e *Engine) ReportBroker(connected bool) {
	e.mark(e.hw[wBroker].set(!connected, e.hNow, &e.hp))
	e.settle()
}

// ReportBrokerAt is ReportBroker with a reading of the caller's clock at
// the change, so that an outage is judged from when it began and ended,
// not from the newest time the engine had seen before.
func (e *Engine) ReportBrokerAt(connected bool, tNs int64) {
	e.healthTick(tNs)
	e.ReportBroker(connected)
}

// evaluate brings every watchdog to time now.
func (e *Engine) evaluate(now int64) {
	e.healthTick(now)
	now = e.hNow
	if !e.hStarted {
		return
	}
	p := &e.hp
	for _, s := range e.sensors {
		e.settleSeqs(s, now, false)
		if thr := e.silentNs(s); thr > 0 {
			ref := e.hStart
			if s.haveArrival {
				ref = s.lastArrival
			}
			if now-ref > thr {
				e.mark(s.watch[wSilent].set(true, ref+thr, p))
			}
		}
		for k := range s.watch {
			w := &s.watch[k]
			e.mark(w.expire(now, p))
			e.mark(w.judge(now, p))
		}
	}
	for k := range e.hw {
		w := &e.hw[k]
		if k != wOverrun || !e.loadOver { // a drop's hold does not end an overrun still reported
			e.mark(w.expire(now, p))
		}
		e.mark(w.judge(now, p))
	}
	e.settle()
}

// settle derives the severities that depend on several alerts and the
// vehicle state: failed when an error alert is raised, degraded when any
// alert is, ok otherwise. Errors: every tracking sensor silent (no track
// can be updated), every ego sensor silent on a moving platform (no
// detection can be placed), broker disconnected, an overrun that filled
// the caller's queue.
func (e *Engine) settle() {
	var track, trackSilent, ego, egoSilent int
	for _, s := range e.sensors {
		if !(s.periodNs > 0) {
			continue
		}
		silent := s.watch[wSilent].raised
		if s.kind == kindGNSS || s.kind == kindOdometry {
			ego++
			if silent {
				egoSilent++
			}
		} else {
			track++
			if silent {
				trackSilent++
			}
		}
	}
	allTrack := track > 0 && trackSilent == track
	allEgo := e.platformMoving && ego > 0 && egoSilent == ego
	st := stateOK
	for _, s := range e.sensors {
		w := &s.watch[wSilent]
		isEgo := s.kind == kindGNSS || s.kind == kindOdometry
		if err := (allTrack && !isEgo) || (allEgo && isEgo); w.err != err {
			w.err = err
			e.hChanged = true
		}
		for k := range s.watch {
			st = max(st, severityState(&s.watch[k]))
		}
	}
	e.hw[wBroker].err = true
	for k := range e.hw {
		w := &e.hw[k]
		if k == wOverrun && !w.raised && !w.on {
			w.err = false
		}
		st = max(st, severityState(w))
	}
	if st != e.hState {
		e.hState = st
		e.hChanged = true
	}
	if e.hChanged {
		e.hVersion++
		e.hChanged = false
	}
}

func severityState(w *watch) int {
	switch {
	case !w.raised:
		return stateOK
	case w.err:
		return stateFailed
	}
	return stateDegraded
}

// HealthState is the vehicle's health state (ok, degraded or failed) as of
// the newest time the engine has seen, and a number that grows whenever an
// alert is raised, cleared or changes severity, or the state changes: the
// caller publishes a health message at once when it moves.
func (e *Engine) HealthState() (state string, version uint64) {
	return stateNames[e.hState], e.hVersion
}

// Health writes the health message for the caller's time tNs into out
// (reused) after bringing every watchdog to tNs. Alerts are sorted by code,
// then sensor, then track. Details are formatted only when their numbers
// changed, so a steady report allocates nothing.
func (e *Engine) Health(tNs int64, out *transport.HealthMsg) {
	e.evaluate(tNs)
	out.V = 1
	out.Vehicle = e.vehicle
	out.TNs = tNs
	out.State = stateNames[e.hState]
	out.Alerts = out.Alerts[:0]
	out.Sensors = out.Sensors[:0]
	for _, s := range e.sensors {
		ok, _ := s.nisOK()
		h := transport.SensorHealth{Name: s.name, Lost: s.lost, Rejected: s.rejected, LateDropped: s.lateDropped,
			NISOK: ok, AgeMS: -1}
		if s.meanGapNs > 0 {
			h.RateHz = 1e9 / s.meanGapNs
		}
		if s.haveArrival {
			h.AgeMS = float64(tNs-s.lastArrival) * 1e-6
		}
		out.Sensors = append(out.Sensors, h)
		for k := range s.watch {
			if w := &s.watch[k]; w.raised {
				if w.dirty {
					w.detail, w.dirty = e.sensorDetail(s, k, w), false
				}
				out.Alerts = append(out.Alerts, alertOf(sensorWatchCodes[k], s.name, w))
			}
		}
	}
	for k := range e.hw {
		if w := &e.hw[k]; w.raised {
			if w.dirty {
				w.detail, w.dirty = e.vehicleDetail(k, w), false
			}
			out.Alerts = append(out.Alerts, alertOf(vehicleWatchCodes[k], "", w))
		}
	}
	slices.SortFunc(out.Alerts, func(a, b transport.Alert) int {
		if c := strings.Compare(a.Code, b.Code); c != 0 {
			return c
		}
		if c := strings.Compare(a.Sensor, b.Sensor); c != 0 {
			return c
		}
		switch {
		case a.Track < b.Track:
			return -1
		case a.Track > b.Track:
			return 1
		}
		return 0
	})
	out.Counters.Rejected = append(out.Counters.Rejected[:0], e.rejectReason...)
	out.Counters.LateDropped = e.counters.LateDropped
}

func alertOf(code, sensor string, w *watch) transport.Alert {
	sev := "warning"
	if w.err {
		sev = "error"
	}
	return transport.Alert{Code: code, Severity: sev, Sensor: sensor, Track: w.track, SinceNs: w.since, Detail: w.detail}
}

func (e *Engine) sensorDetail(s *sensorRT, k int, w *watch) string {
	switch k {
	case wSilent:
		per := s.periodNs * 1e-6
		return fmt.Sprintf("no message for more than %.0f ms (%g × period %.0f ms)", e.hp.silentPeriods*per, e.hp.silentPeriods, per)
	case wLate:
		return fmt.Sprintf("%d message(s) older than max_age_ms %.0f on arrival, up to %.0f ms", w.n, s.maxAgeNs*1e-6, w.v1)
	case wLost:
		return fmt.Sprintf("%d sequence number(s) missing since this alert began", w.n)
	case wLateDropped:
		return fmt.Sprintf("%d measurement(s) older than the %.0f ms lag window dropped", w.n, float64(e.lagNs)*1e-6)
	case wNIS:
		lo, hi := s.nisInterval(int(w.n))
		return fmt.Sprintf("mean NIS %.2f over %d updates, outside the %.0f%% interval [%.2f, %.2f] for %d dof",
			w.v1, w.n, nisProb*100, lo, hi, s.dim)
	case wClockJump:
		return fmt.Sprintf("clock offset stepped by %+.1f ms (threshold %.0f ms)", w.v1, e.hp.clockJumpNs*1e-6)
	}
	return ""
}

func (e *Engine) vehicleDetail(k int, w *watch) string {
	switch k {
	case wBlowup:
		return fmt.Sprintf("track %d: position s.d. %.1f m, bound %.1f m", w.track, w.v1, e.hp.maxPosSD)
	case wNumeric:
		return fmt.Sprintf("%d track(s) dropped after a filter failure (non-finite value), the last track %d", w.n, w.track)
	case wOverrun:
		d := fmt.Sprintf("input queue up to %d of %.0f, step up to %.1f ms (budget %.1f ms)", w.n, w.v2, w.v1,
			float64(e.hp.stepBudgetNs)*1e-6)
		switch {
		case w.drops > 0 && w.v2 == 0 && w.v1 == 0:
			d = fmt.Sprintf("%d input message(s) dropped, the queue was full", w.drops)
		case w.drops > 0:
			d += fmt.Sprintf("; %d input message(s) dropped, the queue was full", w.drops)
		}
		return d
	case wBroker:
		return "not connected to the MQTT broker"
	}
	return ""
}

// nisInterval is the two-sided nisProb interval for the mean of n NIS
// values of dimension m: n·mean ~ χ²(n·m) (Bar-Shalom, Li & Kirubarajan
// 2001, §5.4.2), from filters.ConsistencyInterval. The quantile inversion
// is costly and allocates, so it runs once per window size.
func (s *sensorRT) nisInterval(n int) (lo, hi float64) {
	if n < 1 || n > nisWindow {
		return math.NaN(), math.NaN()
	}
	q := &s.nisBounds[n]
	if !(q[1] > 0) {
		q[0], q[1], _ = filters.ConsistencyInterval(nisProb, s.dim, n)
	}
	return q[0], q[1]
}

// nisOK tests the windowed average NIS against nisInterval; too few
// samples pass. It returns the mean too (NaN before any).
func (s *sensorRT) nisOK() (bool, float64) {
	mean := s.meanNIS()
	if s.nisN < nisMinSamples {
		return true, mean
	}
	lo, hi := s.nisInterval(s.nisN)
	return mean >= lo && mean <= hi, mean
}
