package bench

import (
	"math"
	"math/rand/v2"

	"github.com/godwit-fusion/godwit/transport"
)

// Live makes sensor messages for the bench post on demand, stamped with the
// time the caller gives (usually the wall clock when publishing), for the
// live tests and the soak: targets circle slowly about fixed centres 12 m
// apart, so the scene runs for ever within a bounded area and a tracker
// keeps the same tracks.
type Live struct {
	Targets int
	Clutter float64 // mean false detections per scan (Poisson)
	rng     *rand.Rand
	seq     [2]uint64
	m       transport.Measurement
	buf     []byte
}

// NewLive returns a live scene with n targets.
func NewLive(n int, clutter float64, seed uint64) *Live {
	return &Live{Targets: n, Clutter: clutter, rng: rand.New(rand.NewPCG(seed, 0x5bd1e995))}
}

// Truth is target i's position and velocity at tNs.
func (l *Live) Truth(i int, tNs int64) (x, y, vx, vy float64) {
	side := int(math.Ceil(math.Sqrt(float64(l.Targets))))
	cx := -float64(side)*6 + 12*float64(i%side) + 6
	cy := 30 + 12*float64(i/side)
	const r, w = 3.0, 0.3 // m, rad/s: 0.9 m/s
	a := w*float64(tNs%(1<<40))*1e-9 + float64(i)
	return cx + r*math.Cos(a), cy + r*math.Sin(a), -r * w * math.Sin(a), r * w * math.Cos(a)
}

// Next encodes the next message of the lidar (radar false) or the radar
// (true) measured at tNs. The bytes are valid until the next call.
func (l *Live) Next(radar bool, tNs int64) ([]byte, error) {
	k := 0
	l.m = transport.Measurement{V: transport.Version, Sensor: LidarName, TNs: tNs, Dets: l.m.Dets[:0]}
	if radar {
		k = 1
		l.m.Sensor, l.m.SensorIdx = RadarName, 1
	}
	l.seq[k]++
	l.m.Seq = l.seq[k]
	add := func(x, y, vx, vy float64) {
		var d transport.Detection
		if radar {
			r := math.Hypot(x, y)
			d.Dim = 3
			d.Z[0] = r + 0.3*l.rng.NormFloat64()
			d.Z[1] = math.Atan2(y, x) + 0.005*l.rng.NormFloat64()
			d.Z[2] = (x*vx+y*vy)/r + 0.15*l.rng.NormFloat64()
		} else {
			d.Dim = 2
			d.Z[0] = x + 0.2*l.rng.NormFloat64()
			d.Z[1] = y + 0.2*l.rng.NormFloat64()
		}
		l.m.Dets = append(l.m.Dets, d)
	}
	for i := 0; i < l.Targets; i++ {
		add(l.Truth(i, tNs))
	}
	side := math.Ceil(math.Sqrt(float64(l.Targets))) * 12
	for c := poisson(l.rng, l.Clutter); c > 0; c-- {
		add(-side/2+side*l.rng.Float64(), 25+side*l.rng.Float64(), 0, 0)
	}
	var err error
	l.buf, err = transport.AppendMeasurement(l.buf[:0], &l.m)
	return l.buf, err
}
