package engine

import (
	"math"
	"math/rand/v2"
	"sort"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/transport"
)

// The scenario simulator of the tests: an invented yard with a fixed mast
// carrying the sensors, targets moving by the continuous white-noise
// acceleration model, detections with the configured noise, misses and
// uniform clutter. The forward models here are written out again from
// DESIGN.md, independently of the engine's.

const t0 = int64(1_764_626_400_000_000_000) // an arbitrary epoch in ns

type simTarget struct {
	id   int
	x    [4]float64 // px, py, vx, vy
	born int64
	dies int64 // 0: never
}

type simSensor struct {
	cfg     configs.Sensor
	phaseNs int64
}

type truthAt struct {
	tNs int64
	pos [][2]float64
	ids []int
	vel [][2]float64
}

type simMsg struct {
	m     transport.Measurement
	truth truthAt // truth at the measurement time
}

type sim struct {
	r       *rand.Rand
	accelSD float64 // truth process noise, √q̃ (0: straight lines)
	sensors []simSensor
	targets []simTarget
}

func baseConfig(sensors ...configs.Sensor) *configs.Config {
	return &configs.Config{
		Vehicle:  "yard-mast-1",
		Platform: configs.Platform{Motion: "fixed"},
		Sensors:  sensors,
		Tracker: configs.Tracker{Motion: "cv", Filter: "srkf", AccelSD: 0.5, YawAccelSD: 0.3,
			GateProb: 0.999, Confirm: configs.Confirm{Hits: 3, Of: 5}, DeleteMisses: 6, MaxTracks: 512},
		Timing: configs.Timing{LagMS: 300, Clock: "synced"},
		Output: configs.Output{RateHz: 0},
	}
}

func xySensor(name string, mx, my, yawDeg, sd float64) configs.Sensor {
	return configs.Sensor{Name: name, Kind: "position_xy", Mount: configs.Pose{X: mx, Y: my, YawDeg: yawDeg},
		NoiseSD: []float64{sd, sd}, PeriodMS: 100, MaxRange: 200, FOVDeg: 360, PDetect: 1}
}

func rbSensor(name string, mx, my, yawDeg float64) configs.Sensor {
	return configs.Sensor{Name: name, Kind: "range_bearing", Mount: configs.Pose{X: mx, Y: my, YawDeg: yawDeg},
		NoiseSD: []float64{0.3, 0.01}, PeriodMS: 50, MaxRange: 150, FOVDeg: 360, PDetect: 1}
}

func rbrSensor(name string, mx, my, yawDeg float64) configs.Sensor {
	return configs.Sensor{Name: name, Kind: "range_bearing_rate", Mount: configs.Pose{X: mx, Y: my, YawDeg: yawDeg},
		NoiseSD: []float64{0.3, 0.01, 0.15}, PeriodMS: 50, MaxRange: 150, FOVDeg: 360, PDetect: 1}
}

// step moves a target by dt under the CV model with white-noise
// acceleration: per axis Q = q̃·[dt³/3 dt²/2; dt²/2 dt] (Bar-Shalom, Li &
// Kirubarajan 2001, §6.2.2), sampled through its Cholesky factor
// √q̃·[√(dt³/3) 0; (dt²/2)/√(dt³/3) √(dt/4)].
func (s *sim) step(t *simTarget, dt float64) {
	var w [4]float64
	if s.accelSD > 0 && dt > 0 {
		a := math.Sqrt(dt * dt * dt / 3)
		b := dt * dt / 2 / a
		c := math.Sqrt(dt / 4)
		for ax := 0; ax < 2; ax++ {
			n1, n2 := s.r.NormFloat64(), s.r.NormFloat64()
			w[ax] = s.accelSD * a * n1
			w[2+ax] = s.accelSD * (b*n1 + c*n2)
		}
	}
	t.x[0] += t.x[2]*dt + w[0]
	t.x[1] += t.x[3]*dt + w[1]
	t.x[2] += w[2]
	t.x[3] += w[3]
}

// measureFrom writes z of a site point seen by sensor sc (fixed platform at
// the origin, heading east), or reports false when it cannot see it.
func measureFrom(sc configs.Sensor, x [4]float64, z []float64) bool {
	yaw := sc.Mount.YawDeg * math.Pi / 180
	dx, dy := x[0]-sc.Mount.X, x[1]-sc.Mount.Y
	xs := math.Cos(yaw)*dx + math.Sin(yaw)*dy
	ys := -math.Sin(yaw)*dx + math.Cos(yaw)*dy
	r := math.Hypot(xs, ys)
	b := math.Atan2(ys, xs)
	if sc.MaxRange > 0 && r > sc.MaxRange {
		return false
	}
	if sc.FOVDeg > 0 && sc.FOVDeg < 360 && math.Abs(b) > sc.FOVDeg*math.Pi/360 {
		return false
	}
	switch sc.Kind {
	case "position_xy":
		z[0], z[1] = xs, ys
	case "range_bearing":
		z[0], z[1] = r, b
	case "range_bearing_rate":
		z[0], z[1], z[2] = r, b, (dx*x[2]+dy*x[3])/r
	case "pinhole":
		// DESIGN.md: image column from fx and cx (u = cx − fx·y/x, columns
		// growing to the right), plus the detector's range estimate.
		if xs <= 0 {
			return false
		}
		z[0], z[1] = sc.CX-sc.FX*ys/xs, r
	}
	return true
}

// run simulates until endNs and returns the messages in measurement-time order.
func (s *sim) run(endNs int64) []simMsg {
	type ev struct {
		t int64
		k int
	}
	var evs []ev
	for k, ss := range s.sensors {
		p := int64(ss.cfg.PeriodMS * 1e6)
		for t := t0 + ss.phaseNs; t <= endNs; t += p {
			evs = append(evs, ev{t, k})
		}
	}
	sort.Slice(evs, func(a, b int) bool {
		if evs[a].t != evs[b].t {
			return evs[a].t < evs[b].t
		}
		return evs[a].k < evs[b].k
	})
	var out []simMsg
	seq := make([]uint64, len(s.sensors))
	tPrev := t0
	for _, e := range evs {
		dt := float64(e.t-tPrev) * 1e-9
		tPrev = e.t
		for i := range s.targets {
			s.step(&s.targets[i], dt)
		}
		sc := s.sensors[e.k].cfg
		seq[e.k]++
		msg := simMsg{m: transport.Measurement{V: 1, Sensor: sc.Name, SensorIdx: e.k, Seq: seq[e.k], TNs: e.t}}
		msg.truth.tNs = e.t
		var z [3]float64
		m := kindDims[mustKind(sc.Kind)]
		for _, tg := range s.targets {
			if e.t < tg.born || (tg.dies != 0 && e.t >= tg.dies) {
				continue
			}
			msg.truth.pos = append(msg.truth.pos, [2]float64{tg.x[0], tg.x[1]})
			msg.truth.vel = append(msg.truth.vel, [2]float64{tg.x[2], tg.x[3]})
			msg.truth.ids = append(msg.truth.ids, tg.id)
			if !measureFrom(sc, tg.x, z[:]) || s.r.Float64() >= sc.PDetect {
				continue
			}
			d := transport.Detection{Dim: m}
			for j := 0; j < m; j++ {
				sd := sc.NoiseSD[j]
				if sc.Kind == "pinhole" && j == 1 {
					sd = math.Hypot(sd, sc.RangeSDFrac*z[1]) // s.d. grows with range
				}
				d.Z[j] = z[j] + sd*s.r.NormFloat64()
			}
			msg.m.Dets = append(msg.m.Dets, d)
		}
		// Clutter: Poisson count, uniform over the covered disc sector.
		nc := poisson(s.r, sc.ClutterPerScan)
		for c := 0; c < nc; c++ {
			rr := sc.MaxRange * math.Sqrt(s.r.Float64())
			half := math.Pi
			if sc.FOVDeg > 0 && sc.FOVDeg < 360 {
				half = sc.FOVDeg * math.Pi / 360
			}
			bb := (2*s.r.Float64() - 1) * half
			d := transport.Detection{Dim: m}
			switch sc.Kind {
			case "position_xy":
				d.Z[0], d.Z[1] = rr*math.Cos(bb), rr*math.Sin(bb)
			default:
				d.Z[0], d.Z[1] = rr, bb
				if m == 3 {
					d.Z[2] = 3 * s.r.NormFloat64()
				}
			}
			msg.m.Dets = append(msg.m.Dets, d)
		}
		// Shuffle detection order: a sensor lists its detections in no
		// particular order.
		s.r.Shuffle(len(msg.m.Dets), func(a, b int) { msg.m.Dets[a], msg.m.Dets[b] = msg.m.Dets[b], msg.m.Dets[a] })
		out = append(out, msg)
	}
	return out
}

func mustKind(s string) int {
	k, ok := kindByName(s)
	if !ok {
		panic("unknown kind " + s)
	}
	return k
}

// poisson draws a Poisson count by Knuth's multiplication method (from memory).
func poisson(r *rand.Rand, lambda float64) int {
	if lambda <= 0 {
		return 0
	}
	l, k, p := math.Exp(-lambda), 0, 1.0
	for {
		p *= r.Float64()
		if p <= l {
			return k
		}
		k++
	}
}
