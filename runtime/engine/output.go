package engine

import (
	"math"

	"github.com/godwit-fusion/godwit/transport"
)

// Advance tells the engine that the caller's clock reads tNs and writes a
// tracks message into out when one is due; it reports whether it did.
//
// With output.rate_hz > 0 a message is due at every multiple of the period
// (the first one at or after the first call); it is stamped tNs (or the
// newest processed measurement time, when that is later) and every track is
// predicted to the stamp. With rate_hz 0 a message is due whenever a scan
// was processed since the last one, stamped at the newest measurement time;
// call Advance after each Ingest to get one message per scan.
//
// out is the caller's and is reused: its slices keep their capacity, so a
// warmed-up engine fills it without allocating.
func (e *Engine) Advance(tNs int64, out *transport.TracksMsg) bool {
	e.evaluate(tNs)
	if !e.st.hasTime {
		return false
	}
	if e.periodNs == 0 {
		if e.sinceEmit == 0 {
			return false
		}
		e.emit(e.st.timeNs, out)
		return true
	}
	if !e.dueSet {
		e.nextDueNs = ceilDiv(tNs, e.periodNs) * e.periodNs
		e.dueSet = true
	}
	if tNs < e.nextDueNs {
		return false
	}
	stamp := tNs
	if e.st.timeNs > stamp {
		stamp = e.st.timeNs
	}
	e.emit(stamp, out)
	e.nextDueNs = (floorDiv(tNs, e.periodNs) + 1) * e.periodNs
	return true
}

// Flush is the end of input: every buffered measurement is already
// processed (late ones rewind at once), so it writes one final tracks
// message stamped at the latest measurement time seen. Sequence numbers
// still missing will not come now: they count as lost. It reports false
// when nothing was ever processed.
func (e *Engine) Flush(out *transport.TracksMsg) bool {
	e.endOfInput()
	if !e.st.hasTime {
		return false
	}
	e.emit(e.st.timeNs, out)
	return true
}

// FlushAt is Flush with the stamp chosen by the caller: the end of a
// recording may be later than the newest measurement the engine processed
// (a refused message, a sensor clock offset), and the final message must
// be stamped there. Every track and the ego are predicted to tNs; a tNs
// before the newest processed time is taken as that time, since tracks are
// never predicted backwards. It reports false when nothing was ever
// processed.
func (e *Engine) FlushAt(tNs int64, out *transport.TracksMsg) bool {
	e.endOfInput()
	if !e.st.hasTime {
		return false
	}
	e.emit(max(tNs, e.st.timeNs), out)
	return true
}

// endOfInput judges lost every sequence number still missing.
func (e *Engine) endOfInput() {
	for _, s := range e.sensors {
		e.settleSeqs(s, e.hNow, true)
	}
}

func floorDiv(a, b int64) int64 {
	q := a / b
	if (a%b != 0) && (a < 0) {
		q--
	}
	return q
}

func ceilDiv(a, b int64) int64 { return -floorDiv(-a, b) }

func (e *Engine) emit(stamp int64, out *transport.TracksMsg) {
	st := &e.st
	e.sinceEmit = 0
	e.outSeq++
	e.counters.Emitted++
	out.V = 1
	out.Vehicle = e.vehicle
	out.Seq = e.outSeq
	out.TNs = stamp
	out.Frame = "site"
	out.Tracks = out.Tracks[:0]
	dt := 0.0
	if stamp > st.trackNs {
		dt = float64(stamp-st.trackNs) * 1e-9
	}
	n := e.motion.Dim()
	for i := range st.recs {
		f := st.flt[i]
		if dt > 0 {
			if err := e.scratch.CopyFrom(f); err != nil || e.scratch.Predict(dt) != nil {
				e.counters.FilterErrors++
				continue
			}
			f = e.scratch
		}
		gs := f.State()
		if len(out.Tracks) < cap(out.Tracks) {
			out.Tracks = out.Tracks[:len(out.Tracks)+1]
		} else {
			out.Tracks = append(out.Tracks, transport.Track{})
		}
		tr := &out.Tracks[len(out.Tracks)-1]
		rec := &st.recs[i]
		tr.ID = rec.id
		tr.Status = statusNames[rec.status]
		pxx, pxy, pyy := e.posCov(gs, &e.ws)
		tr.Pos = [2]float64{e.ws.pv[0], e.ws.pv[1]}
		tr.Vel = [2]float64{e.ws.pv[2], e.ws.pv[3]}
		tr.PosCov = [4]float64{pxx, pxy, pxy, pyy}
		tr.Model = e.modelName
		tr.State = append(tr.State[:0], gs.X...)
		tr.StateCov = grow(tr.StateCov, n*n)
		gs.Covariance(tr.StateCov)
		tr.UpdatedNs = rec.updatedNs
		tr.Hits = rec.hits
		tr.Misses = rec.misses
		tr.Class = rec.class
	}
	if out.Ego == nil {
		out.Ego = new(transport.Ego)
	}
	egoDt := 0.0
	if stamp > st.egoNs {
		egoDt = float64(stamp-st.egoNs) * 1e-9
	}
	e.egoOut(egoDt, out.Ego)
}

// egoOut writes the platform estimate dt seconds after the state time.
func (e *Engine) egoOut(dt float64, eg *transport.Ego) {
	p := e.fixedPose
	*eg = transport.Ego{Pos: [2]float64{p.X, p.Y}, Yaw: p.Yaw}
	if !e.platformMoving || !e.st.egoInit {
		return
	}
	f := e.st.ego
	if dt > 0 {
		if e.egoScratch == nil {
			e.egoScratch, _ = e.mkEgo()
		}
		if e.egoScratch.CopyFrom(f) == nil && e.egoScratch.Predict(dt) == nil {
			f = e.egoScratch
		}
	}
	gs := f.State()
	x := gs.X
	var P [25]float64
	gs.Covariance(P[:])
	eg.Pos = [2]float64{x[0], x[1]}
	eg.Yaw = wrapAngle(x[3])
	eg.Vel = [2]float64{x[2] * math.Cos(x[3]), x[2] * math.Sin(x[3])}
	eg.PosCov = [4]float64{P[0], P[1], P[5], P[6]}
}

// Counters copies the engine-wide counters.
func (e *Engine) Counters() Counters { return e.counters }

// SensorStats is the per-sensor view for the caller.
type SensorStats struct {
	Name          string
	Messages      uint64
	Detections    uint64
	Rejected      uint64
	LateDropped   uint64
	Lost          uint64  // sequence-number gaps
	ClockOffsetNs float64 // estimated arrival − t_ns lower envelope (timing.clock estimate)
	MeanNIS       float64 // over the last updates (NaN before any)
	NISCount      int
}

// Sensors writes one SensorStats per configured sensor into dst (reused).
func (e *Engine) Sensors(dst []SensorStats) []SensorStats {
	dst = dst[:0]
	for _, s := range e.sensors {
		dst = append(dst, SensorStats{Name: s.name, Messages: s.messages, Detections: s.detections,
			Rejected: s.rejected, LateDropped: s.lateDropped, Lost: s.lost, ClockOffsetNs: s.offsetNs,
			MeanNIS: s.meanNIS(), NISCount: s.nisN})
	}
	return dst
}

func (s *sensorRT) meanNIS() float64 {
	if s.nisN == 0 {
		return math.NaN()
	}
	var sum float64
	for i := 0; i < s.nisN; i++ {
		sum += s.nis[i]
	}
	return sum / float64(s.nisN)
}
