package scenario

import (
	"encoding/json"
	"math"
	"testing"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/filters/geo"
)

func parseText(t *testing.T, text string) *Scenario {
	t.Helper()
	sc, err := Parse("test.yaml", []byte(text), "testdata")
	if err != nil {
		t.Fatalf("parse: %v", err)
	}
	return sc
}

func near(a, b, tol float64) bool { return math.Abs(a-b) <= tol }

// Hand-worked measurements of DESIGN.md's models (sensor frame x forward,
// y left, angles CCW from x): a sensor at (1, 2) facing north (yaw 90°).
func TestIdealHandWorked(t *testing.T) {
	sp := SensorPose{Pos: Vec{1, 2}, Yaw: math.Pi / 2}
	pinhole := configs.Sensor{Kind: configs.KindPinhole, FX: 800, CX: 640}
	cases := []struct {
		name     string
		kind     string
		pos, vel Vec
		want     []float64
	}{
		// 10 m due north: straight ahead.
		{"ahead xy", configs.KindPositionXY, Vec{1, 12}, Vec{}, []float64{10, 0}},
		{"ahead rb", configs.KindRangeBearing, Vec{1, 12}, Vec{}, []float64{10, 0}},
		// 5 m due west of a north-facing sensor is on its left: bearing +90°.
		{"left xy", configs.KindPositionXY, Vec{-4, 2}, Vec{}, []float64{0, 5}},
		{"left rb", configs.KindRangeBearing, Vec{-4, 2}, Vec{}, []float64{5, math.Pi / 2}},
		// East of it is on the right: bearing −90°.
		{"right rb", configs.KindRangeBearing, Vec{4, 2}, Vec{}, []float64{3, -math.Pi / 2}},
		// A 3-4-5 triangle: offset (3, 4) east-north, i.e. 4 ahead, 3 right;
		// bearing −atan(3/4) = −0.6435 rad. Moving straight at the sensor at
		// 5 m/s: range rate −5.
		{"3-4-5 closing", configs.KindRangeBearingRate, Vec{4, 6}, Vec{-3, -4}, []float64{5, -math.Atan2(3, 4), -5}},
		// Receding north at 3 m/s straight ahead: range rate +3.
		{"receding", configs.KindRangeBearingRate, Vec{1, 12}, Vec{0, 3}, []float64{10, 0, 3}},
		// Crossing (velocity perpendicular to the line of sight): ṙ = 0.
		{"crossing", configs.KindRangeBearingRate, Vec{1, 12}, Vec{4, 0}, []float64{10, 0, 0}},
		// Pinhole: 10 m ahead and 1 m left gives u = cx − fx·y/x = 640 − 80
		// = 560 px; range √101 m.
		{"pinhole left", configs.KindPinhole, Vec{0, 12}, Vec{}, []float64{560, math.Sqrt(101)}},
		{"pinhole right", configs.KindPinhole, Vec{3, 12}, Vec{}, []float64{800, math.Sqrt(104)}},
	}
	for _, c := range cases {
		cfg := configs.Sensor{Kind: c.kind}
		if c.kind == configs.KindPinhole {
			cfg = pinhole
		}
		z, _ := Ideal(&cfg, sp, c.pos, c.vel)
		for i, w := range c.want {
			if !near(z[i], w, 1e-12) {
				t.Errorf("%s: z[%d] = %.15g, want %.15g (hand-worked)", c.name, i, z[i], w)
			}
		}
	}
}

// The sensor on a turning platform moves with v + ω × lever arm (rigid body
// kinematics, common practice): platform at the origin heading east at 5 m/s
// turning left at 0.5 rad/s, sensor 2 m ahead: it moves at (5, 1) m/s.
func TestMountedPoseHandWorked(t *testing.T) {
	p := PlatformState{Pos: Vec{0, 0}, Yaw: 0, Vel: Vec{5, 0}, Speed: 5, YawRate: 0.5}
	sp := MountedPose(p, 2, 0, 0)
	if sp.Pos != (Vec{2, 0}) || !near(sp.Vel.X, 5, 1e-15) || !near(sp.Vel.Y, 1, 1e-15) {
		t.Fatalf("sensor pose %+v, want pos (2,0) vel (5,1)", sp)
	}
	// Heading north (yaw 90°), mount 2 m ahead and 1 m left (yaw 30°):
	// lever arm in site axes is (−1, 2); sensor yaw 120°.
	p = PlatformState{Pos: Vec{10, 20}, Yaw: math.Pi / 2}
	sp = MountedPose(p, 2, 1, math.Pi/6)
	if !near(sp.Pos.X, 9, 1e-12) || !near(sp.Pos.Y, 22, 1e-12) || !near(sp.Yaw, 2*math.Pi/3, 1e-12) {
		t.Fatalf("sensor pose %+v, want (9, 22) yaw 2.0944", sp)
	}
}

// Path geometry: a 120 m × 60 m rectangle with 12 m fillets is
// 2·(120+60) − 8·12 + 2π·12 = 339.398 m long (hand-worked), on the arcs the
// curvature is 1/12 to the left, and the position is continuous.
func TestPathRoundedRectangle(t *testing.T) {
	p, err := newPath([]Vec{{-12, 0}, {108, 0}, {108, 60}, {-12, 60}}, 12, true)
	if err != nil {
		t.Fatal(err)
	}
	want := 2*(120+60) - 8*12 + 2*math.Pi*12
	if !near(p.Length(), want, 1e-9) {
		t.Fatalf("length %.9f, want %.9f", p.Length(), want)
	}
	pos, yaw, k := p.At(0)
	if pos != (Vec{0, 0}) || yaw != 0 || k != 0 {
		t.Fatalf("start %v yaw %v k %v, want the origin heading east on a straight", pos, yaw, k)
	}
	// Middle of the first arc: centre (96, 12), 45° round from the bottom.
	pos, yaw, k = p.At(96 + math.Pi*12/4)
	if !near(pos.X, 96+12*math.Sin(math.Pi/4), 1e-9) || !near(pos.Y, 12-12*math.Cos(math.Pi/4), 1e-9) ||
		!near(yaw, math.Pi/4, 1e-12) || !near(k, 1.0/12, 1e-15) {
		t.Fatalf("mid-arc %v yaw %v k %v", pos, yaw, k)
	}
	prev, _, _ := p.At(0)
	const ds = 0.05
	for s := ds; s < 2*p.Length(); s += ds {
		cur, _, _ := p.At(s)
		if d := distance(cur, prev); d > ds+1e-9 {
			t.Fatalf("jump of %.4f m at s = %.2f", d, s)
		}
		prev = cur
	}
}

// The coordinated turn closes a full circle after 2π/ω and keeps the radius
// v/ω about its centre (from the definition).
func TestTurnMotionCircle(t *testing.T) {
	tg := Target{Motion: MotionTurn, Pos: Vec{0, 0}, Speed: 4, Heading: 0, TurnRate: 0.1}
	centre := Vec{0, 40} // v/ω = 40 m to the left of a heading of east
	for _, tt := range []float64{0, 3, 11, 31.4, 50} {
		p, v, ok := tg.At(tt)
		if !ok || !near(distance(p, centre), 40, 1e-9) || !near(v.norm(), 4, 1e-12) {
			t.Fatalf("t=%g: pos %v vel %v", tt, p, v)
		}
	}
	p, _, _ := tg.At(2 * math.Pi / 0.1)
	if !near(p.X, 0, 1e-9) || !near(p.Y, 0, 1e-9) {
		t.Fatalf("after one period at %v, want the start", p)
	}
}

const noiseFree = `
config: campus-shuttle
duration_s: 8
step_ms: 20
ego:
  waypoints: [[-12, 0], [40, 0], [40, 30], [-12, 30]]
  corner_radius: 12
  speed: 5
targets:
  - {id: a, motion: cv, pos: [20, 3], vel: [1, 0.5]}
  - {id: b, class: cart, motion: turn, pos: [30, -4], speed: 2, heading_deg: 90, turn_rate_deg_s: 10}
  - {id: c, class: pedestrian, motion: path, waypoints: [[45, -5], [45, 10]], loop: true, speed: 1.2}
sensors:
  gnss: {noise_sd: [0, 0], resolution: [0, 0]}
  wheel_odometry: {noise_sd: [0, 0], resolution: [0, 0]}
  front_radar: {noise_sd: [0, 0, 0], resolution: [0, 0, 0], p_detect: 1, clutter_per_scan: 0, latency_ms: 30, jitter_ms: 30}
  front_camera: {noise_sd: [0, 0], range_sd_frac: 0, resolution: [0, 0], p_detect: 1, clutter_per_scan: 0, clock_offset_ms: 7}
  roof_lidar: {noise_sd: [0, 0], resolution: [0, 0], p_detect: 1, clutter_per_scan: 0}
`

type payload struct {
	Sensor string `json:"sensor"`
	Seq    uint64 `json:"seq"`
	TNs    int64  `json:"t_ns"`
	Dets   []struct {
		Z []float64 `json:"z"`
	} `json:"dets"`
}

// A noise-free sensor's detections invert to the truth: each target
// detection, turned back into a site position by the inverse of its model
// (written here from DESIGN.md, not taken from the simulator), lands on a
// true target position at the measurement time; every target in coverage is
// seen; ego sensors report the true antenna position and the path's speed
// and yaw rate.
func TestNoiseFreeDetectionsInvertToTruth(t *testing.T) {
	sc := parseText(t, noiseFree)
	out, err := sc.Simulate(Options{})
	if err != nil {
		t.Fatal(err)
	}
	site, err := geo.NewLocal(sc.Config.Site.Lat, sc.Config.Site.Lon, sc.Config.Site.Alt)
	if err != nil {
		t.Fatal(err)
	}
	seen := map[string]int{}
	for _, m := range out.Messages {
		var p payload
		if err := json.Unmarshal(m.Payload, &p); err != nil {
			t.Fatal(err)
		}
		s := sc.Sensors[m.Sensor]
		c := s.Cfg
		if p.TNs-m.TrueNs != int64(s.ClockOffsetMS*1e6) {
			t.Fatalf("%s: t_ns − true time = %d ns, want the clock offset %g ms", c.Name, p.TNs-m.TrueNs, s.ClockOffsetMS)
		}
		tt := float64(m.TrueNs-sc.Start.UnixNano()) / 1e9
		plat := sc.Ego.At(tt)
		sp := MountedPose(plat, c.Mount.X, c.Mount.Y, degToRad(c.Mount.YawDeg))
		switch c.Kind {
		case configs.KindGNSS:
			e, n, _ := site.GeodeticToENU(p.Dets[0].Z[0], p.Dets[0].Z[1], sc.Config.Site.Alt)
			// 2-D fix at the origin's height: the curvature drop over ~50 m is
			// ~0.2 mm (common practice), far below a GNSS fix's noise.
			if !near(e, sp.Pos.X, 1e-3) || !near(n, sp.Pos.Y, 1e-3) {
				t.Fatalf("gnss at %.2f s: (%.6f, %.6f), antenna at (%.6f, %.6f)", tt, e, n, sp.Pos.X, sp.Pos.Y)
			}
			continue
		case configs.KindOdometry:
			// Speed 5 m/s; yaw rate v/R = 5/12 rad/s on the arcs, 0 on the legs.
			v, w := p.Dets[0].Z[0], p.Dets[0].Z[1]
			if v != 5 || !(near(w, 0, 1e-15) || near(w, 5.0/12, 1e-12)) {
				t.Fatalf("odometry at %.2f s: [%g, %g], want [5, 0 or 5/12]", tt, v, w)
			}
			continue
		}
		want := 0
		for i := range sc.Targets {
			if pos, _, ok := sc.Targets[i].At(tt); ok {
				if _, local := Ideal(&c, sp, pos, Vec{}); visible(&c, local) {
					want++
				}
			}
		}
		if len(p.Dets) != want {
			t.Fatalf("%s at %.2f s: %d detections, %d targets in coverage (p_detect 1)", c.Name, tt, len(p.Dets), want)
		}
		for _, d := range p.Dets {
			var local Vec
			switch c.Kind {
			case configs.KindPositionXY:
				local = Vec{d.Z[0], d.Z[1]}
			case configs.KindRangeBearing, configs.KindRangeBearingRate:
				local = Vec{d.Z[0] * math.Cos(d.Z[1]), d.Z[0] * math.Sin(d.Z[1])}
			case configs.KindPinhole:
				b := math.Atan((c.CX - d.Z[0]) / c.FX)
				local = Vec{d.Z[1] * math.Cos(b), d.Z[1] * math.Sin(b)}
			}
			s, cy := math.Sincos(sp.Yaw)
			site := Vec{sp.Pos.X + cy*local.X - s*local.Y, sp.Pos.Y + s*local.X + cy*local.Y}
			best, bestD := "", math.Inf(1)
			for i := range sc.Targets {
				if pos, _, ok := sc.Targets[i].At(tt); ok && distance(pos, site) < bestD {
					best, bestD = sc.Targets[i].ID, distance(pos, site)
				}
			}
			if bestD > 1e-9 {
				t.Fatalf("%s at %.2f s: detection %v inverts to %v, %.3g m from the nearest target", c.Name, tt, d.Z, site, bestD)
			}
			if c.Kind == configs.KindRangeBearingRate {
				// ṙ against a forward difference of the range over 1 µs:
				// forward, because the sensor's velocity jumps where the
				// route passes from a leg to an arc (the yaw rate steps), and
				// the measurement belongs to the piece starting there.
				tg := sc.targetByID(best)
				rng := func(t float64) float64 {
					pos, _, _ := tg.At(t)
					sp := MountedPose(sc.Ego.At(t), c.Mount.X, c.Mount.Y, 0)
					return distance(pos, sp.Pos)
				}
				const h = 1e-6
				fd := (rng(tt+h) - rng(tt)) / h
				if !near(d.Z[2], fd, 1e-4) {
					t.Fatalf("radar at %.2f s: range rate %.6f, forward difference %.6f", tt, d.Z[2], fd)
				}
			}
			seen[c.Name]++
		}
	}
	for _, name := range []string{"front_radar", "front_camera", "roof_lidar"} {
		if seen[name] == 0 {
			t.Errorf("%s saw nothing; the check above never ran for it", name)
		}
	}
}

func (sc *Scenario) targetByID(id string) *Target {
	for i := range sc.Targets {
		if sc.Targets[i].ID == id {
			return &sc.Targets[i]
		}
	}
	return nil
}
