package demo

import (
	"errors"
	"fmt"
	"io"
	"math"
	"sort"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/runtime/daemon"
	"github.com/godwit-fusion/godwit/runtime/engine"
	"github.com/godwit-fusion/godwit/runtime/eval"
	"github.com/godwit-fusion/godwit/transport"
)

// Record is one received message with its arrival time (receiver clock).
type Record struct {
	Topic   string
	Payload []byte
	RxNs    int64
}

// ReadRecords reads a whole recording into memory (payloads copied), in
// file order. Malformed lines are skipped and counted, as replay does.
func ReadRecords(r io.Reader) (recs []Record, malformed int, err error) {
	rr := transport.NewRecordReader(r, 0)
	var rec transport.Record
	for {
		err := rr.Next(&rec)
		if err == io.EOF {
			break
		}
		var le *transport.LineError
		if errors.As(err, &le) {
			continue
		}
		if err != nil {
			return nil, 0, fmt.Errorf("reading the recording: %w", err)
		}
		recs = append(recs, Record{Topic: rec.Topic, Payload: append([]byte(nil), rec.Payload...), RxNs: rec.RxNs})
	}
	return recs, rr.Malformed(), nil
}

// Extras is what scoring needs beyond the tracks messages: the raw
// detections (baseline), NIS per sensor and latency samples.
type Extras struct {
	BaselineScans   int // raw-detection scans scored
	BaselineSkipped int // measurement messages the decoder refused or that had no ego pose
	NISSamples      int
	LatencySamples  int
}

// AddBaseline scores every valid scan of the tracking sensors as if its
// detections were the tracks: each detection is placed in the site frame
// with the sensor mount and the true platform pose at the scan's t_ns
// (interpolated between truth lines; the configured pose for a fixed
// platform). This is the baseline a tracker has to beat. Messages the
// decoder refuses are skipped and counted, as the engine would refuse them.
func AddBaseline(ev *eval.Evaluator, cfg *configs.Config, truth []eval.TruthLine, recs []Record, x *Extras) error {
	specs := make([]transport.SensorSpec, len(cfg.Sensors))
	for i, s := range cfg.Sensors {
		specs[i] = transport.SensorSpec{Name: s.Name, Dim: configs.MeasDim(s.Kind)}
	}
	// The arrival window is the live daemon's business; a recording's scans
	// are placed whatever their arrival.
	dec, err := transport.NewDecoder(specs, transport.Limits{
		MaxPayloadBytes: cfg.Limits.MaxPayloadBytes, PastWindow: -1, FutureWindow: -1})
	if err != nil {
		return err
	}
	var m transport.Measurement
	var pos [][2]float64
	for _, r := range recs {
		if err := dec.Decode(r.Payload, r.RxNs, &m); err != nil {
			x.BaselineSkipped++
			continue
		}
		cs := &cfg.Sensors[m.SensorIdx]
		if configs.IsEgoKind(cs.Kind) || !daemon.TopicMatches(cs.Topic, r.Topic) {
			continue
		}
		px, py, yaw, ok := platformAt(cfg, truth, m.TNs)
		if !ok {
			x.BaselineSkipped++
			continue
		}
		// Sensor pose in the site frame: platform pose ∘ mount.
		c, s := math.Cos(yaw), math.Sin(yaw)
		sx := px + c*cs.Mount.X - s*cs.Mount.Y
		sy := py + s*cs.Mount.X + c*cs.Mount.Y
		syaw := yaw + cs.Mount.YawDeg*math.Pi/180
		sc, ss := math.Cos(syaw), math.Sin(syaw)
		pos = pos[:0]
		for i := range m.Dets {
			lx, ly := sensorPoint(cs, m.Dets[i].Z[0], m.Dets[i].Z[1])
			pos = append(pos, [2]float64{sx + sc*lx - ss*ly, sy + ss*lx + sc*ly})
		}
		if ev.AddDetections(cs.Name, m.TNs, pos) != nil {
			x.BaselineSkipped++ // a non-finite placement; the evaluator counts it too
			continue
		}
		x.BaselineScans++
	}
	return nil
}

// sensorPoint inverts a measurement model to the sensor-frame point
// (DESIGN.md measurement models): position_xy is the point;
// range_bearing(_rate) is r·(cos b, sin b); pinhole u = cx − fx·y/x with the
// detector's range r gives y/x = (cx − u)/fx and x = r/√(1 + (y/x)²).
func sensorPoint(cs *configs.Sensor, z0, z1 float64) (x, y float64) {
	switch cs.Kind {
	case configs.KindPositionXY:
		return z0, z1
	case configs.KindPinhole:
		q := (cs.CX - z0) / cs.FX
		x = z1 / math.Sqrt(1+q*q)
		return x, q * x
	default:
		return z0 * math.Cos(z1), z0 * math.Sin(z1)
	}
}

// platformAt is the true platform pose at tNs: the configured pose for a
// fixed platform, else the truth's ego linearly interpolated between the
// two lines around tNs (yaw along the shorter arc). Outside the truth, or
// without ego in it, there is no pose.
func platformAt(cfg *configs.Config, truth []eval.TruthLine, tNs int64) (x, y, yaw float64, ok bool) {
	if cfg.Platform.Motion != configs.MotionMoving {
		p := cfg.Platform.Pose
		return p.X, p.Y, p.YawDeg * math.Pi / 180, true
	}
	i := sort.Search(len(truth), func(i int) bool { return truth[i].TNs >= tNs })
	switch {
	case i == len(truth) || i == 0 && truth[0].TNs != tNs:
		return 0, 0, 0, false
	case truth[i].TNs == tNs:
		if e := truth[i].Ego; e != nil {
			return e.Pos[0], e.Pos[1], e.Yaw, true
		}
		return 0, 0, 0, false
	}
	a, b := truth[i-1], truth[i]
	if a.Ego == nil || b.Ego == nil {
		return 0, 0, 0, false
	}
	f := float64(tNs-a.TNs) / float64(b.TNs-a.TNs)
	dyaw := math.Remainder(b.Ego.Yaw-a.Ego.Yaw, 2*math.Pi)
	return a.Ego.Pos[0] + f*(b.Ego.Pos[0]-a.Ego.Pos[0]), a.Ego.Pos[1] + f*(b.Ego.Pos[1]-a.Ego.Pos[1]),
		a.Ego.Yaw + f*dyaw, true
}

// NISEveryNs is how often the per-sensor NIS is sampled, in arrival time.
const NISEveryNs = int64(500e6)

// AddNISAndLatency runs the records through a fresh pipeline of cfg in
// arrival order, the way replay does (periodic output at the multiples of
// the output period in arrival time), and feeds ev:
//
//   - every NISEveryNs of arrival time, each sensor's mean NIS over its
//     recent updates (engine.SensorStats), dimension from the kind;
//   - when latency is true, one sample per accepted message: the arrival
//     time of the first tracks message that includes it minus its own
//     arrival, both in the records' clock. This is the wait for the output
//     period, not processing time (which a recording cannot show).
//
// The engine is deterministic, so the NIS is the one the same messages
// gave in the run being scored.
func AddNISAndLatency(ev *eval.Evaluator, cfg *configs.Config, recs []Record, latency bool, x *Extras) error {
	p, err := daemon.NewPipeline(cfg, engine.Options{}, nil)
	if err != nil {
		return err
	}
	period := p.RatePeriodNs()
	var (
		started         bool
		clock, nextTick int64
		nextNIS         int64
		pending         []int64
		stats           []engine.SensorStats
		dims            = make([]int, len(cfg.Sensors))
	)
	for i, s := range cfg.Sensors {
		dims[i] = configs.MeasDim(s.Kind)
	}
	published := func(at int64) {
		if latency {
			for _, a := range pending {
				// A refused sample is counted by the evaluator (BadSamples).
				if ev.AddLatency(float64(at-a)/1e6) == nil {
					x.LatencySamples++
				}
			}
		}
		pending = pending[:0]
	}
	for _, r := range recs {
		if r.RxNs <= 0 {
			continue
		}
		if !started {
			started = true
			clock = r.RxNs
			nextTick = ceilMultiple(r.RxNs, max(period, 1))
			nextNIS = r.RxNs
		}
		clock = max(clock, r.RxNs)
		if period > 0 {
			for ; nextTick <= clock; nextTick += period {
				if _, ok := p.Advance(nextTick); ok {
					published(nextTick)
				}
			}
		}
		if err := p.Handle(r.Topic, r.Payload, r.RxNs); err == nil {
			pending = append(pending, r.RxNs)
			if period == 0 {
				if _, ok := p.Advance(clock); ok {
					published(clock)
				}
			}
		}
		if clock >= nextNIS {
			nextNIS = clock + NISEveryNs
			stats = p.Engine().Sensors(stats)
			for i, st := range stats {
				if st.NISCount == 0 || math.IsNaN(st.MeanNIS) {
					continue
				}
				if ev.AddNIS(st.Name, dims[i], eval.NISPoint{TNs: clock, Mean: st.MeanNIS, N: st.NISCount}) == nil {
					x.NISSamples++
				}
			}
		}
	}
	return nil
}

// ceilMultiple is the smallest multiple of p at or after t (p > 0, t > 0).
func ceilMultiple(t, p int64) int64 {
	q := t / p
	if t%p != 0 {
		q++
	}
	return q * p
}
