package engine

import (
	"fmt"
	"math"
	"math/rand/v2"
	"testing"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/transport"
)

// benchLap builds one lap of a periodic scene: targets on circles whose
// periods divide lapNs, so the lap can be replayed end to end with its
// times shifted and the scene continues smoothly.
func benchLap(sensors []configs.Sensor, nTargets int, clutter float64, lapNs int64, area float64) []transport.Measurement {
	r := rand.New(rand.NewPCG(77, 77))
	type circ struct{ cx, cy, rad, ph float64 }
	cs := make([]circ, nTargets)
	for i := range cs {
		cs[i] = circ{(r.Float64()*2 - 1) * area, (r.Float64()*2 - 1) * area, 5 + 10*r.Float64(), 2 * math.Pi * r.Float64()}
	}
	w := 2 * math.Pi / (float64(lapNs) * 1e-9)
	var out []transport.Measurement
	seq := make([]uint64, len(sensors))
	period := int64(sensors[0].PeriodMS * 1e6)
	for t := int64(0); t < lapNs; t += period / int64(len(sensors)) {
		k := int((t / (period / int64(len(sensors)))) % int64(len(sensors)))
		sc := sensors[k]
		seq[k]++
		m := transport.Measurement{V: 1, Sensor: sc.Name, SensorIdx: k, Seq: seq[k], TNs: t0 + t}
		dim := kindDims[mustKind(sc.Kind)]
		var z [3]float64
		for _, c := range cs {
			a := c.ph + w*float64(t)*1e-9
			x := [4]float64{c.cx + c.rad*math.Cos(a), c.cy + c.rad*math.Sin(a), -c.rad * w * math.Sin(a), c.rad * w * math.Cos(a)}
			if !measureFrom(sc, x, z[:]) {
				continue
			}
			d := transport.Detection{Dim: dim}
			for j := 0; j < dim; j++ {
				d.Z[j] = z[j] + sc.NoiseSD[j]*r.NormFloat64()
			}
			m.Dets = append(m.Dets, d)
		}
		for c := 0; c < int(clutter); c++ {
			x := [4]float64{(r.Float64()*2 - 1) * area, (r.Float64()*2 - 1) * area, 0, 0}
			if measureFrom(sc, x, z[:]) {
				d := transport.Detection{Dim: dim}
				copy(d.Z[:], z[:dim])
				m.Dets = append(m.Dets, d)
			}
		}
		out = append(out, m)
	}
	return out
}

type lapPlayer struct {
	lap   []transport.Measurement
	lapNs int64
	i     int
	shift int64
	buf   transport.Measurement
	seqs  []uint64
}

// next returns the next message, times and sequence numbers continued
// across laps, in a reused buffer (as the decoder hands them over).
func (p *lapPlayer) next() *transport.Measurement {
	src := &p.lap[p.i]
	p.buf.V, p.buf.Sensor, p.buf.SensorIdx = src.V, src.Sensor, src.SensorIdx
	p.buf.TNs = src.TNs + p.shift
	p.seqs[src.SensorIdx]++
	p.buf.Seq = p.seqs[src.SensorIdx]
	p.buf.Dets = append(p.buf.Dets[:0], src.Dets...)
	p.i++
	if p.i == len(p.lap) {
		p.i = 0
		p.shift += p.lapNs
	}
	return &p.buf
}

func benchSensors() []configs.Sensor {
	a := xySensor("mast_lidar", 0, 0, 0, 0.2)
	b := rbSensor("mast_radar", 3, 0, 0)
	c := rbrSensor("mast_radar_2", -3, 0, 180)
	for _, s := range []*configs.Sensor{&a, &b, &c} {
		s.PeriodMS, s.MaxRange = 50, 500
	}
	return []configs.Sensor{a, b, c}
}

// BenchmarkIngest: 50 targets, 3 sensors at 20 Hz each, engine alone (no
// decoding). One op is one scan of about 50 detections; dets/s is the
// throughput on one core.
func BenchmarkIngest(b *testing.B) {
	for _, combo := range []struct{ motion, filter string }{{"cv", "srkf"}, {"ctrv", "srukf"}, {"ctrv", "srekf"}} {
		b.Run(combo.motion+"_"+combo.filter, func(b *testing.B) {
			sensors := benchSensors()
			const lapNs = 20e9
			p := &lapPlayer{lap: benchLap(sensors, 50, 0, lapNs, 60), lapNs: lapNs, seqs: make([]uint64, 3)}
			cfg := baseConfig(sensors...)
			cfg.Tracker.Motion, cfg.Tracker.Filter = combo.motion, combo.filter
			cfg.Tracker.AccelSD = 1
			e, err := New(cfg, Options{})
			if err != nil {
				b.Fatal(err)
			}
			var out transport.TracksMsg
			for i := 0; i < 2*len(p.lap); i++ { // warm-up: two laps
				m := p.next()
				if err := e.Ingest(m, m.TNs); err != nil {
					b.Fatal(err)
				}
				e.Advance(m.TNs, &out)
			}
			dets := 0
			b.ReportAllocs()
			b.ResetTimer()
			for b.Loop() {
				m := p.next()
				dets += len(m.Dets)
				if err := e.Ingest(m, m.TNs); err != nil {
					b.Fatal(err)
				}
			}
			b.ReportMetric(float64(dets)/b.Elapsed().Seconds(), "dets/s")
			b.ReportMetric(float64(len(e.st.recs)), "tracks")
		})
	}
}

// BenchmarkBigScene: 1000 targets plus 1000 clutter detections a scan, one
// sensor, cv/srkf. One op is one scan.
func BenchmarkBigScene(b *testing.B) {
	sc := xySensor("mast_lidar", 0, 0, 0, 0.2)
	sc.PeriodMS, sc.MaxRange = 100, 5000
	const lapNs = 20e9
	p := &lapPlayer{lap: benchLap([]configs.Sensor{sc}, 1000, 1000, lapNs, 1000), lapNs: lapNs, seqs: make([]uint64, 1)}
	cfg := baseConfig(sc)
	cfg.Tracker.MaxTracks = 8192
	cfg.Tracker.AccelSD = 1
	e, err := New(cfg, Options{})
	if err != nil {
		b.Fatal(err)
	}
	for i := 0; i < 300; i++ { // warm-up: pools reach the clutter-born track count
		m := p.next()
		if err := e.Ingest(m, m.TNs); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		m := p.next()
		if err := e.Ingest(m, m.TNs); err != nil {
			b.Fatal(err)
		}
	}
	b.ReportMetric(float64(len(e.st.recs)), "tracks")
}

// BenchmarkRewind: one late message displaced behind k newer ones in the
// 50-target, 3-sensor scene. Only the late Ingest is timed; it restores a
// snapshot and processes k+1 scans, so the time should grow linearly in k.
func BenchmarkRewind(b *testing.B) {
	for _, k := range []int{1, 4, 16, 64} {
		b.Run(fmt.Sprintf("k=%d", k), func(b *testing.B) {
			sensors := benchSensors()
			const lapNs = 20e9
			p := &lapPlayer{lap: benchLap(sensors, 50, 0, lapNs, 60), lapNs: lapNs, seqs: make([]uint64, 3)}
			cfg := baseConfig(sensors...)
			cfg.Tracker.AccelSD = 1
			cfg.Timing.LagMS = 3000
			e, err := New(cfg, Options{})
			if err != nil {
				b.Fatal(err)
			}
			for i := 0; i < 2*len(p.lap); i++ {
				m := p.next()
				if err := e.Ingest(m, m.TNs); err != nil {
					b.Fatal(err)
				}
			}
			var held transport.Measurement
			b.ReportAllocs()
			b.ResetTimer()
			for i := 0; i < b.N; i++ {
				b.StopTimer()
				m := p.next()
				held.V, held.Sensor, held.SensorIdx, held.Seq, held.TNs = m.V, m.Sensor, m.SensorIdx, m.Seq, m.TNs
				held.Dets = append(held.Dets[:0], m.Dets...)
				for j := 0; j < k; j++ {
					m := p.next()
					if err := e.Ingest(m, m.TNs); err != nil {
						b.Fatal(err)
					}
				}
				b.StartTimer()
				if err := e.Ingest(&held, held.TNs); err != nil {
					b.Fatal(err)
				}
			}
		})
	}
}

// BenchmarkOutput: one tracks message (50 tracks, each predicted to the
// stamp) and one health message, into reused buffers.
func BenchmarkOutput(b *testing.B) {
	sensors := benchSensors()
	const lapNs = 20e9
	p := &lapPlayer{lap: benchLap(sensors, 50, 0, lapNs, 60), lapNs: lapNs, seqs: make([]uint64, 3)}
	cfg := baseConfig(sensors...)
	cfg.Tracker.Motion, cfg.Tracker.Filter = "ctrv", "srukf"
	cfg.Output.RateHz = 1e9 // due at every call
	e, err := New(cfg, Options{})
	if err != nil {
		b.Fatal(err)
	}
	var tn int64
	for i := 0; i < len(p.lap); i++ {
		m := p.next()
		if err := e.Ingest(m, m.TNs); err != nil {
			b.Fatal(err)
		}
		tn = m.TNs
	}
	var out transport.TracksMsg
	var h transport.HealthMsg
	e.Advance(tn, &out)
	e.Health(tn, &h)
	b.ReportAllocs()
	b.ResetTimer()
	for b.Loop() {
		tn += 7e6
		if !e.Advance(tn, &out) || len(out.Tracks) != 50 {
			b.Fatal("no message")
		}
		e.Health(tn, &h)
	}
}
