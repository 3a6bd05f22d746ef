// Package gatesim invents sensor traffic for the daemon's tests: yard
// tractors driving through the gate of the dock-post example configuration
// (configs/dock-post.yaml), seen by its range_bearing_rate radar and its
// position_xy lidar. It is a fixture for the tests of the daemon and the
// godwit command (in the manner of net/http/httptest), not a simulator for
// users: see godwit simulate.
package gatesim

import (
	"bytes"
	"math"
	"math/rand/v2"
	"sort"
	"strconv"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/transport"
)

// T0 is the first measurement time of every scenario (an invented date).
const T0 = int64(1_900_000_000_000_000_000)

// Msg is one message as it arrives at the daemon.
type Msg struct {
	RxNs    int64
	Topic   string
	Payload []byte
	TNs     int64
	Sensor  string
}

// Tractor is one invented target: it starts at (X0, Y0) in the site frame
// at the scene's T0 and drives at constant velocity (VX, VY), m and m/s.
type Tractor struct{ X0, Y0, VX, VY float64 }

// At is the tractor's position s seconds after T0.
func (g Tractor) At(s float64) [2]float64 { return [2]float64{g.X0 + g.VX*s, g.Y0 + g.VY*s} }

// Tractors are the two tractors of every scene: one entering the yard and
// one leaving it (the post sits at the site origin facing north).
var Tractors = []Tractor{{X0: -3, Y0: 8, VX: 0.2, VY: 4}, {X0: 4, Y0: 60, VX: -0.1, VY: -3.5}}

// Scene measures the tractors with the sensors of a configuration.
type Scene struct {
	cfg *configs.Config
	T0  int64
	rng *rand.Rand
}

// NewScene starts a scene at t0 (ns since the Unix epoch) with a seeded
// noise source.
func NewScene(cfg *configs.Config, t0 int64, seed uint64) *Scene {
	return &Scene{cfg: cfg, T0: t0, rng: rand.New(rand.NewPCG(seed, 0x6a7e))}
}

// Payload is the measurement message sensor i sends for its scan seq at
// time t: every tractor inside its range and field of view, with Gaussian
// noise of the configured s.d.
func (sc *Scene) Payload(i int, seq uint64, t int64) []byte {
	s := sc.cfg.Sensors[i]
	// The platform pose and the mount together place the sensor.
	py := sc.cfg.Platform.Pose.YawDeg * math.Pi / 180
	sx := sc.cfg.Platform.Pose.X + math.Cos(py)*s.Mount.X - math.Sin(py)*s.Mount.Y
	sy := sc.cfg.Platform.Pose.Y + math.Sin(py)*s.Mount.X + math.Cos(py)*s.Mount.Y
	syaw := py + s.Mount.YawDeg*math.Pi/180
	c, sn := math.Cos(syaw), math.Sin(syaw)
	m := transport.Measurement{V: 1, Sensor: s.Name, Seq: seq, TNs: t}
	ts := float64(t-sc.T0) * 1e-9
	for _, g := range Tractors {
		p := g.At(ts)
		ex, ny := p[0]-sx, p[1]-sy
		// Into the sensor frame: rotate by −yaw.
		x, y := c*ex+sn*ny, -sn*ex+c*ny
		vx, vy := c*g.VX+sn*g.VY, -sn*g.VX+c*g.VY
		r, b := math.Hypot(x, y), math.Atan2(y, x)
		if r > s.MaxRange || math.Abs(b) > s.FOVDeg*math.Pi/360 {
			continue
		}
		var d transport.Detection
		switch s.Kind {
		case configs.KindPositionXY:
			d.Dim, d.Z = 2, [3]float64{x, y}
		case configs.KindRangeBearing:
			d.Dim, d.Z = 2, [3]float64{r, b}
		case configs.KindRangeBearingRate:
			// ṙ: the target's velocity along the line of sight.
			d.Dim, d.Z = 3, [3]float64{r, b, (x*vx + y*vy) / r}
		default:
			continue
		}
		for k := 0; k < d.Dim; k++ {
			d.Z[k] += s.NoiseSD[k] * sc.rng.NormFloat64()
		}
		m.Dets = append(m.Dets, d)
	}
	payload, err := transport.AppendMeasurement(nil, &m)
	if err != nil {
		panic(err) // finite by construction
	}
	return payload
}

// Gate returns the clean traffic of a gate pass lasting dur from T0,
// measured by every sensor of cfg at its period, with arrival latencies of
// 2–12 ms and, every 25th radar scan, one delivered 120 ms late (inside the
// dock post's 200 ms lag window, so the engine rewinds). Sorted by arrival.
func Gate(cfg *configs.Config, dur time.Duration, seed uint64) []Msg {
	sc := NewScene(cfg, T0, seed)
	var out []Msg
	for i, s := range cfg.Sensors {
		period := int64(s.PeriodMS * 1e6)
		var seq uint64
		for t := T0 + int64(sc.rng.IntN(int(period))); t < T0+dur.Nanoseconds(); t += period {
			seq++
			payload := sc.Payload(i, seq, t)
			rx := t + 2_000_000 + int64(sc.rng.IntN(10_000_000))
			if s.Kind == configs.KindRangeBearingRate && seq%25 == 0 {
				rx += 120_000_000
			}
			out = append(out, Msg{RxNs: rx, Topic: s.Topic, Payload: payload, TNs: t, Sensor: s.Name})
		}
	}
	sort.SliceStable(out, func(i, j int) bool { return out[i].RxNs < out[j].RxNs })
	return out
}

// Created is the header time of the fixture recordings, fixed so that the
// files are byte-identical run to run.
var Created = time.Date(2030, 3, 17, 9, 0, 0, 0, time.UTC)

// Recording writes msgs as a recording.
func Recording(msgs []Msg) []byte {
	var buf bytes.Buffer
	rw, err := transport.NewRecordWriter(&buf, transport.RecordOptions{Note: "gatesim", Created: Created, FlushEvery: -1})
	if err != nil {
		panic(err)
	}
	for _, m := range msgs {
		if err := rw.Write(m.RxNs, m.Topic, 1, false, m.Payload); err != nil {
			panic(err)
		}
	}
	if err := rw.Close(); err != nil {
		panic(err)
	}
	return buf.Bytes()
}

// Dirty is one kind of bad input mixed into a clean recording.
type Dirty struct {
	Reason string // the reason code the decoder must give; "" for a malformed line
	Line   string // a raw recording line (malformed), or
	Body   string // a payload, with %T replaced by a plausible t_ns
}

// DirtyKinds covers every decoder reason code (transport.Reason) and two
// kinds of broken recording line.
var DirtyKinds = []Dirty{
	{Line: `{"rx_ns":12,"topic":`},
	{Line: `this is not JSON at all`},
	{Reason: "bad_json", Body: `{"v":1,"sensor":"gate_lidar","seq":1,"t_ns":%T,"dets":[{"z":[1,2]}]`},
	{Reason: "unknown_sensor", Body: `{"v":1,"sensor":"roof_camera","seq":1,"t_ns":%T,"dets":[]}`},
	{Reason: "bad_dims", Body: `{"v":1,"sensor":"gate_lidar","seq":1,"t_ns":%T,"dets":[{"z":[1,2,3]}]}`},
	{Reason: "non_finite", Body: `{"v":1,"sensor":"gate_radar","seq":1,"t_ns":%T,"dets":[{"z":[1e400,0.1,0]}]}`},
	{Reason: "bad_cov", Body: `{"v":1,"sensor":"gate_lidar","seq":1,"t_ns":%T,"dets":[{"z":[5,1],"r":[1,0,0,-1]}]}`},
	{Reason: "time_implausible", Body: `{"v":1,"sensor":"gate_lidar","seq":1,"t_ns":1000,"dets":[{"z":[5,1]}]}`},
	{Reason: "bad_version", Body: `{"v":2,"sensor":"gate_lidar","seq":1,"t_ns":%T,"dets":[{"z":[5,1]}]}`},
}

// DirtyRecording writes msgs with a bad entry after every step-th message,
// cycling through DirtyKinds, plus one payload over
// limits.max_payload_bytes (too_large) after the first message. Each bad payload
// carries the t_ns of the message before it, so it never holds the latest
// measurement time, and arrives between its neighbours. It returns the
// recording and how many of each reason were mixed in.
func DirtyRecording(cfg *configs.Config, msgs []Msg, step int) ([]byte, map[string]uint64) {
	var buf bytes.Buffer
	rw, err := transport.NewRecordWriter(&buf, transport.RecordOptions{Note: "gatesim dirty", Created: Created, FlushEvery: -1})
	if err != nil {
		panic(err)
	}
	counts := map[string]uint64{}
	k := 0
	for i, m := range msgs {
		if err := rw.Write(m.RxNs, m.Topic, 1, false, m.Payload); err != nil {
			panic(err)
		}
		if i+1 == len(msgs) {
			break
		}
		rx := m.RxNs + (msgs[i+1].RxNs-m.RxNs)/2
		if i == 0 {
			big := append([]byte(`{"v":1,"sensor":"gate_lidar","seq":1,"t_ns":`+strconv.FormatInt(m.TNs, 10)+`,"dets":[],"pad":"`),
				bytes.Repeat([]byte("x"), cfg.Limits.MaxPayloadBytes)...)
			big = append(big, `"}`...)
			if err := rw.Write(rx, cfg.Sensors[0].Topic, 1, false, big); err != nil {
				panic(err)
			}
			counts["too_large"]++
		}
		if i%step != step-1 {
			continue
		}
		d := DirtyKinds[k%len(DirtyKinds)]
		k++
		if d.Line != "" {
			if err := rw.Flush(); err != nil {
				panic(err)
			}
			buf.WriteString(d.Line + "\n")
			counts["malformed_line"]++
			continue
		}
		body := bytes.ReplaceAll([]byte(d.Body), []byte("%T"), []byte(strconv.FormatInt(m.TNs, 10)))
		if err := rw.Write(rx, cfg.Sensors[0].Topic, 1, false, body); err != nil {
			panic(err)
		}
		counts[d.Reason]++
	}
	if err := rw.Close(); err != nil {
		panic(err)
	}
	return buf.Bytes(), counts
}
