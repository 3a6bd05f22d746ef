// Package bench holds godwit's standard workloads and the measurements
// `godwit bench` prints: filter steps against a plain covariance-form
// baseline, engine throughput, decode + engine + encode from recorded
// bytes, and the MQTT paths. The workloads are invented scenes (a fixed
// sensor post in a container yard watching yard tractors and clutter) and
// are generated deterministically from a seed, so every machine runs the
// same input. The fault, flood and soak tests reuse them.
package bench

import (
	"fmt"
	"math"
	"math/rand/v2"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/transport"
)

// Start is t = 0 of every generated workload: a fixed instant, so the bytes
// never depend on the wall clock.
var Start = time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)

// Sensor names and topics of the bench post.
const (
	Vehicle     = "bench-post"
	LidarName   = "post_lidar"
	RadarName   = "post_radar"
	LidarTopic  = "bench-post/sensors/post_lidar"
	RadarTopic  = "bench-post/sensors/post_radar"
	TracksTopic = "godwit/bench-post/tracks"
	HealthTopic = "godwit/bench-post/health"
	StatusTopic = "godwit/bench-post/status"
)

// ConfigParams adjust the bench post's configuration.
type ConfigParams struct {
	BrokerURL  string  // "" means tcp://127.0.0.1:1883 (unused offline)
	ClientID   string  // "" means godwit-bench-post
	QoS        int     // broker.qos
	Persistent bool    // broker.persistent_session
	RateHz     float64 // output.rate_hz; 0 publishes after every scan
	MaxTracks  int     // tracker.max_tracks; 0 means 2048
	QueueLen   int     // limits.queue_length; 0 means 1024
	LidarMS    float64 // lidar period; 0 means 100 ms
	RadarMS    float64 // radar period; 0 means 50 ms
	LagMS      float64 // timing.lag_ms; 0 means 200 ms
	Metrics    string  // metrics.listen; "" serves no metrics
}

// Config builds the bench post's configuration: a fixed post with a
// position_xy lidar and a range_bearing_rate radar, both seeing all
// around, and a CV tracker on the square-root EKF. accel_sd 0.3 m/s² fits
// the scenes (straight driving here, 0.27 m/s² centripetal in Live), so
// the radar's NIS stays consistent and health stays ok on clean input.
func Config(p ConfigParams) (*configs.Config, error) {
	return configs.Parse("bench-post.yaml", []byte(ConfigYAML(p)))
}

// ConfigYAML is the bench post's configuration as a YAML file would hold it.
func ConfigYAML(p ConfigParams) string {
	if p.BrokerURL == "" {
		p.BrokerURL = "tcp://127.0.0.1:1883"
	}
	if p.ClientID == "" {
		p.ClientID = "godwit-bench-post"
	}
	if p.MaxTracks == 0 {
		p.MaxTracks = 2048
	}
	if p.QueueLen == 0 {
		p.QueueLen = 1024
	}
	if p.LidarMS == 0 {
		p.LidarMS = 100
	}
	if p.RadarMS == 0 {
		p.RadarMS = 50
	}
	if p.LagMS == 0 {
		p.LagMS = 200
	}
	y := fmt.Sprintf(`vehicle: %s
broker: {url: %q, client_id: %s, qos: %d, persistent_session: %t}
platform: {motion: fixed, pose: {x: 0, y: 0, yaw_deg: 0}}
sensors:
  - {name: %s, kind: position_xy, topic: %s, noise_sd: [0.2, 0.2],
     period_ms: %g, max_range: 2000, fov_deg: 360, p_detect: 0.95, clutter_per_scan: 5}
  - {name: %s, kind: range_bearing_rate, topic: %s, noise_sd: [0.3, 0.005, 0.15],
     period_ms: %g, max_range: 2000, fov_deg: 360, p_detect: 0.9, clutter_per_scan: 5}
tracker: {motion: cv, filter: srekf, accel_sd: 0.3, gate_prob: 0.999,
          confirm: {hits: 3, of: 4}, delete_misses: 6, max_tracks: %d}
timing: {lag_ms: %g, clock: synced}
output: {tracks_topic: %s, health_topic: %s, status_topic: %s, rate_hz: %g}
metrics: {listen: %q}
limits: {max_payload_bytes: 262144, queue_length: %d}
`, Vehicle, p.BrokerURL, p.ClientID, p.QoS, p.Persistent,
		LidarName, LidarTopic, p.LidarMS, RadarName, RadarTopic, p.RadarMS,
		p.MaxTracks, p.LagMS, TracksTopic, HealthTopic, StatusTopic, p.RateHz, p.Metrics, p.QueueLen)
	return y
}

// Scene is a generated workload: yard tractors on a grid, seen by the post.
type Scene struct {
	Targets int     // true targets
	Clutter float64 // mean false detections per scan and sensor (Poisson)
	Seconds float64 // scene length
	Seed    uint64
	// LidarMS and RadarMS are the sensor periods; 0 means 100 and 50 ms.
	LidarMS, RadarMS float64
	// Latency is added to each measurement time to make its arrival;
	// 0 means 5 ms.
	Latency time.Duration
}

// Message is one generated arrival.
type Message struct {
	RxNs    int64 // arrival time
	Topic   string
	Payload []byte
	Meas    transport.Measurement // the same message decoded (its own Dets)
}

// Generate makes the scene's messages in arrival order. Targets start on a
// grid 12 m apart (wider than any gate at these noise levels, so the input
// is hard for the tracker's bookkeeping, not ambiguous) and drive straight
// at 1–4 m/s; clutter is uniform over the grid's square.
func Generate(s Scene) ([]Message, error) {
	if s.Targets < 0 || s.Seconds <= 0 {
		return nil, fmt.Errorf("bench: scene needs targets ≥ 0 and seconds > 0")
	}
	lidarMS, radarMS := s.LidarMS, s.RadarMS
	if lidarMS == 0 {
		lidarMS = 100
	}
	if radarMS == 0 {
		radarMS = 50
	}
	lat := s.Latency
	if lat == 0 {
		lat = 5 * time.Millisecond
	}
	rng := rand.New(rand.NewPCG(s.Seed, 0x9e3779b97f4a7c15))
	side := int(math.Ceil(math.Sqrt(float64(s.Targets))))
	half := float64(side) * 6
	type tgt struct{ x, y, vx, vy float64 }
	tg := make([]tgt, s.Targets)
	for i := range tg {
		sp := 1 + 3*rng.Float64()
		hd := 2 * math.Pi * rng.Float64()
		// Keep the post (origin) clear: the radar's bearing is ill-posed at zero range.
		tg[i] = tgt{x: -half + 12*float64(i%side) + 6, y: 20 + 12*float64(i/side), vx: sp * math.Cos(hd), vy: sp * math.Sin(hd)}
	}
	t0 := Start.UnixNano()
	var out []Message
	var buf []byte
	type stream struct {
		name, topic string
		periodNs    int64
		next        int64
		seq         uint64
		radar       bool
	}
	ss := []*stream{
		{name: LidarName, topic: LidarTopic, periodNs: int64(lidarMS * 1e6)},
		{name: RadarName, topic: RadarTopic, periodNs: int64(radarMS * 1e6), radar: true, next: int64(radarMS*1e6) / 3},
	}
	endNs := int64(s.Seconds * 1e9)
	for {
		st := ss[0]
		if ss[1].next < st.next {
			st = ss[1]
		}
		if st.next > endNs {
			break
		}
		t := float64(st.next) * 1e-9
		st.seq++
		m := transport.Measurement{V: transport.Version, Sensor: st.name, Seq: st.seq, TNs: t0 + st.next}
		if st.radar {
			m.SensorIdx = 1
		}
		add := func(x, y, vx, vy float64) {
			var d transport.Detection
			if st.radar {
				r := math.Hypot(x, y)
				d.Dim = 3
				d.Z[0] = r + 0.3*rng.NormFloat64()
				d.Z[1] = math.Atan2(y, x) + 0.005*rng.NormFloat64()
				d.Z[2] = (x*vx+y*vy)/r + 0.15*rng.NormFloat64()
			} else {
				d.Dim = 2
				d.Z[0] = x + 0.2*rng.NormFloat64()
				d.Z[1] = y + 0.2*rng.NormFloat64()
			}
			m.Dets = append(m.Dets, d)
		}
		pd := 0.95
		if st.radar {
			pd = 0.9
		}
		for _, g := range tg {
			if rng.Float64() < pd {
				add(g.x+g.vx*t, g.y+g.vy*t, g.vx, g.vy)
			}
		}
		for k := poisson(rng, s.Clutter); k > 0; k-- {
			add(-half+2*half*rng.Float64(), 20+2*half*rng.Float64(), 0, 0)
		}
		var err error
		buf, err = transport.AppendMeasurement(buf[:0], &m)
		if err != nil {
			return nil, err
		}
		out = append(out, Message{RxNs: m.TNs + int64(lat), Topic: st.topic, Payload: append([]byte(nil), buf...), Meas: m})
		st.next += st.periodNs
	}
	return out, nil
}

// Detections counts the detections of msgs.
func Detections(msgs []Message) int {
	n := 0
	for i := range msgs {
		n += len(msgs[i].Meas.Dets)
	}
	return n
}

// poisson draws a Poisson count by Knuth's multiplication method (Knuth,
// TAOCP vol. 2), fine for the small means used here.
func poisson(rng *rand.Rand, mean float64) int {
	if mean <= 0 {
		return 0
	}
	l, k, p := math.Exp(-mean), 0, 1.0
	for {
		p *= rng.Float64()
		if p <= l {
			return k
		}
		k++
	}
}
