package scenario

import (
	"fmt"
	"math"
	"math/rand/v2"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/filters/geo"
	"github.com/godwit-fusion/godwit/transport"
)

// defaultClutterRange bounds clutter of a sensor configured without a
// max_range.
const defaultClutterRange = 200.0

// sensorSim produces the messages of one sensor from its own random stream.
type sensorSim struct {
	sc      *Scenario
	s       *Sensor
	site    *geo.Local
	classes []string
	startNs int64
	durNs   int64
	r       *rand.Rand

	m     transport.Measurement
	buf   []byte
	order int
}

// SensorPose is where a sensor is and how it moves, in the site frame.
type SensorPose struct {
	Pos Vec
	Yaw float64
	Vel Vec // of the sensor itself: platform velocity + ω × lever arm
}

// MountedPose places a sensor mounted at (mx, my, myaw) on the platform.
func MountedPose(p PlatformState, mx, my, myaw float64) SensorPose {
	lever := rotate(Vec{mx, my}, p.Yaw)
	// Rigid body: v_sensor = v_platform + ω × lever arm.
	return SensorPose{
		Pos: p.Pos.add(lever),
		Yaw: p.Yaw + myaw,
		Vel: p.Vel.add(Vec{-p.YawRate * lever.Y, p.YawRate * lever.X}),
	}
}

// Ideal is the noise-free measurement of a target at pos moving with vel,
// seen from sensor pose sp, in the kind's component order (DESIGN.md,
// measurement models; sensor frame x forward, y left, angles CCW from x):
// position_xy [x, y]; range_bearing [r, b]; range_bearing_rate [r, b, ṙ];
// pinhole [u, r] with u = cx − fx·y/x. It also returns the sensor-frame
// point, from which visibility is judged.
func Ideal(c *configs.Sensor, sp SensorPose, pos, vel Vec) (z [transport.MaxMeasDim]float64, local Vec) {
	d := pos.sub(sp.Pos)
	local = rotate(d, -sp.Yaw)
	r := local.norm()
	b := math.Atan2(local.Y, local.X)
	switch c.Kind {
	case configs.KindPositionXY:
		z[0], z[1] = local.X, local.Y
	case configs.KindRangeBearing:
		z[0], z[1] = r, b
	case configs.KindRangeBearingRate:
		z[0], z[1] = r, b
		if r > 0 {
			// ṙ = d·(v_target − v_sensor)/r, the radial component of the
			// relative velocity.
			z[2] = d.dot(vel.sub(sp.Vel)) / r
		}
	case configs.KindPinhole:
		z[0], z[1] = c.CX-c.FX*local.Y/local.X, r
	}
	return z, local
}

// visible applies the sensor's range and field-of-view limits.
func visible(c *configs.Sensor, local Vec) bool {
	r := local.norm()
	if r < 1e-6 || (c.MaxRange > 0 && r > c.MaxRange) {
		return false
	}
	if c.Kind == configs.KindPinhole && local.X <= 0 {
		return false
	}
	if c.FOVDeg <= 0 || c.FOVDeg >= 360 {
		return true
	}
	return math.Abs(math.Atan2(local.Y, local.X)) <= degToRad(c.FOVDeg)/2
}

func (g *sensorSim) run(out *Output) error {
	c := &g.s.Cfg
	periodNs := int64(math.Round(c.PeriodMS * 1e6))
	if periodNs <= 0 {
		return fmt.Errorf("scenario: sensor %s has period_ms %g; the simulator needs a positive period", c.Name, c.PeriodMS)
	}
	phaseNs := int64(math.Round(g.s.PhaseMS * 1e6))
	offsetNs := int64(math.Round(g.s.ClockOffsetMS * 1e6))
	dim := configs.MeasDim(c.Kind)
	if dim == 0 || len(c.NoiseSD) != dim {
		return fmt.Errorf("scenario: sensor %s of kind %q has %d noise_sd values, want %d", c.Name, c.Kind, len(c.NoiseSD), dim)
	}
	burstNs := int64(math.Round(g.s.Malformed.AtS * 1e9))
	burstDone := g.s.Malformed.Count == 0
	var seq uint64
	for k := int64(0); ; k++ {
		tn := phaseNs + k*periodNs
		if !burstDone && burstNs <= tn {
			g.burst(out, burstNs, seq, offsetNs)
			burstDone = true
		}
		if tn >= g.durNs {
			break
		}
		seq++
		t := float64(tn) / 1e9
		g.m = transport.Measurement{V: transport.Version, Sensor: c.Name, Seq: seq, TNs: g.startNs + tn + offsetNs, Dets: g.m.Dets[:0]}
		nt, ncl := g.scan(t)
		// The scan is drawn even when it will be lost, so a dropout or a
		// loss rate changes no other message's noise.
		lost := g.s.droppedAt(t)
		if g.s.Loss > 0 && g.r.Float64() < g.s.Loss {
			lost = true
		}
		lat := g.s.LatencyMS + g.s.JitterMS*(2*g.r.Float64()-1)
		if lost {
			out.Stats.Lost++
			continue
		}
		payload, err := transport.AppendMeasurement(nil, &g.m)
		if err != nil {
			return fmt.Errorf("scenario: sensor %s at %.3f s: %w", c.Name, t, err)
		}
		out.Messages = append(out.Messages, Message{
			RxNs: g.startNs + tn + int64(math.Round(math.Max(lat, 0)*1e6)), TrueNs: g.startNs + tn,
			Topic: c.Topic, Sensor: g.s.Index, Payload: payload, order: g.order,
		})
		g.order++
		out.Stats.Scans++
		out.Stats.Targets += nt
		out.Stats.Clutter += ncl
	}
	return nil
}

// scan fills g.m.Dets for the scan at time t and returns the number of
// target and clutter detections.
func (g *sensorSim) scan(t float64) (targets, clutter int) {
	c := &g.s.Cfg
	plat := g.sc.Ego.At(t)
	sp := MountedPose(plat, c.Mount.X, c.Mount.Y, degToRad(c.Mount.YawDeg))
	switch c.Kind {
	case configs.KindGNSS:
		// noise_sd is [east m, north m]: the fix is filtered in site
		// metres (configs/REFERENCE.md).
		e := sp.Pos.X + c.NoiseSD[0]*g.r.NormFloat64()
		n := sp.Pos.Y + c.NoiseSD[1]*g.r.NormFloat64()
		lat, lon, _ := g.site.ENUToGeodetic(e, n, 0)
		g.add(transport.Detection{Dim: 2, Z: [3]float64{lat, lon}})
		return 0, 0
	case configs.KindOdometry:
		v := plat.Speed + c.NoiseSD[0]*g.r.NormFloat64()
		w := plat.YawRate + c.NoiseSD[1]*g.r.NormFloat64()
		g.add(transport.Detection{Dim: 2, Z: [3]float64{v, w}})
		return 0, 0
	}
	dim := configs.MeasDim(c.Kind)
	for i := range g.sc.Targets {
		tg := &g.sc.Targets[i]
		pos, vel, ok := tg.At(t)
		if !ok {
			continue
		}
		z, local := Ideal(c, sp, pos, vel)
		if !visible(c, local) {
			continue
		}
		if g.r.Float64() >= c.PDetect {
			continue
		}
		det := transport.Detection{Dim: dim, Z: z}
		g.noise(&det)
		if c.Kind == configs.KindPinhole && tg.Class != "" {
			det.Class, det.Score, det.HasScore = tg.Class, round3(0.6+0.35*g.r.Float64()), true
		}
		g.add(det)
		targets++
	}
	n := poisson(g.r, c.ClutterPerScan)
	for range n {
		g.add(g.clutter(sp))
	}
	// Drivers report in their own order, not the scenario's.
	g.r.Shuffle(len(g.m.Dets), func(i, j int) { g.m.Dets[i], g.m.Dets[j] = g.m.Dets[j], g.m.Dets[i] })
	return targets, n
}

func round3(v float64) float64 { return math.Round(v*1000) / 1000 }

// add quantises a detection to the sensor's resolution and appends it.
func (g *sensorSim) add(det transport.Detection) {
	for i := 0; i < det.Dim && i < len(g.s.Resolution); i++ {
		det.Z[i] = quantize(det.Z[i], g.s.Resolution[i])
	}
	g.m.Dets = append(g.m.Dets, det)
}

// quantize rounds v to a multiple of q (0: unchanged). For a decimal
// quantum (10⁻ᵏ) it divides by the exact 10ᵏ, so the result is the double
// nearest the decimal and prints short (70.076, not 70.07600000000001).
func quantize(v, q float64) float64 {
	if q <= 0 {
		return v
	}
	if inv := math.Round(1 / q); inv >= 1 && math.Abs(inv*q-1) < 1e-12 {
		return math.Round(v*inv)/inv + 0
	}
	return math.Round(v/q)*q + 0
}

// noise adds the sensor's Gaussian measurement noise.
func (g *sensorSim) noise(det *transport.Detection) {
	c := &g.s.Cfg
	for i := 0; i < det.Dim; i++ {
		sd := c.NoiseSD[i]
		if c.Kind == configs.KindPinhole && i == 1 {
			// σ_r grows with range: √(σ₀² + (frac·r)²), independent sources
			// in quadrature (common practice; as DESIGN.md's pinhole model).
			sd = math.Hypot(sd, c.RangeSDFrac*det.Z[1])
		}
		det.Z[i] += sd * g.r.NormFloat64()
	}
	switch c.Kind {
	case configs.KindRangeBearing, configs.KindRangeBearingRate:
		det.Z[0] = math.Abs(det.Z[0])
		det.Z[1] = wrapAngle(det.Z[1])
	case configs.KindPinhole:
		det.Z[1] = math.Abs(det.Z[1])
	}
}

// clutter draws one false detection uniformly over the area the sensor sees:
// r = R·√U makes the density uniform per square metre of the sector.
func (g *sensorSim) clutter(sp SensorPose) transport.Detection {
	c := &g.s.Cfg
	rmax := c.MaxRange
	if rmax <= 0 {
		rmax = defaultClutterRange
	}
	fov := 2 * math.Pi
	if c.FOVDeg > 0 && c.FOVDeg < 360 {
		fov = degToRad(c.FOVDeg)
	}
	r := rmax * math.Sqrt(g.r.Float64())
	b := (g.r.Float64() - 0.5) * fov
	local := polar(r, b)
	det := transport.Detection{Dim: configs.MeasDim(c.Kind)}
	switch c.Kind {
	case configs.KindPositionXY:
		det.Z[0], det.Z[1] = local.X, local.Y
	case configs.KindRangeBearing:
		det.Z[0], det.Z[1] = r, b
	case configs.KindRangeBearingRate:
		det.Z[0], det.Z[1], det.Z[2] = r, b, g.s.ClutterRate*(2*g.r.Float64()-1)
	case configs.KindPinhole:
		det.Z[0], det.Z[1] = c.CX-c.FX*local.Y/math.Max(local.X, 1e-3), r
		if len(g.classes) > 0 {
			det.Class = g.classes[g.r.IntN(len(g.classes))]
			det.Score, det.HasScore = round3(0.3+0.3*g.r.Float64()), true
		}
	}
	return det
}

// poisson draws a Poisson(λ) count by Knuth's multiplication method (Knuth,
// The Art of Computer Programming vol. 2, §3.4.1), fine for the λ ≤ 500 the
// format allows: e^−500 ≈ 7e−218 is still a normal float64.
func poisson(r *rand.Rand, lambda float64) int {
	if lambda <= 0 {
		return 0
	}
	limit := math.Exp(-lambda)
	k, p := 0, r.Float64()
	for p > limit {
		k++
		p *= r.Float64()
	}
	return k
}

// The malformed messages cycle through the decoder's reasons for rejection
// (DESIGN.md, measurement message), so a replay shows every counter move.
var malformedKinds = []string{"bad_json", "bad_dims", "non_finite", "bad_cov", "time_implausible", "unknown_sensor", "bad_version", "not_object", "binary"}

// burst emits the malformed messages, 1 ms apart from atNs (scenario time).
func (g *sensorSim) burst(out *Output, atNs int64, seq uint64, offsetNs int64) {
	c := &g.s.Cfg
	dim := configs.MeasDim(c.Kind)
	for i := 0; i < g.s.Malformed.Count; i++ {
		tn := atNs + int64(i)*1e6
		if tn >= g.durNs {
			break
		}
		tns := g.startNs + tn + offsetNs
		zs := "[" + repeatNum("1.5", dim) + "]"
		head := fmt.Sprintf(`{"v":1,"sensor":%q,"seq":%d,"t_ns":%d,"dets":`, c.Name, seq, tns)
		var p string
		switch malformedKinds[i%len(malformedKinds)] {
		case "bad_json":
			p = head + `[{"z":[1.5,` // cut off mid-message
		case "bad_dims":
			p = head + `[{"z":[` + repeatNum("1.5", dim+1) + `]}]}`
		case "non_finite":
			p = head + `[{"z":[1e999` + repeatTail("1.5", dim-1) + `]}]}`
		case "bad_cov":
			p = head + `[{"z":` + zs + `,"r":[` + negIdentity(dim) + `]}]}`
		case "time_implausible":
			// A driver that writes milliseconds where nanoseconds belong.
			p = fmt.Sprintf(`{"v":1,"sensor":%q,"seq":%d,"t_ns":%d,"dets":[{"z":%s}]}`, c.Name, seq, tns/1e6, zs)
		case "unknown_sensor":
			p = fmt.Sprintf(`{"v":1,"sensor":%q,"seq":%d,"t_ns":%d,"dets":[{"z":%s}]}`, c.Name+"_old", seq, tns, zs)
		case "bad_version":
			p = fmt.Sprintf(`{"v":2,"sensor":%q,"seq":%d,"t_ns":%d,"dets":[{"z":%s}]}`, c.Name, seq, tns, zs)
		case "not_object":
			p = `[` + zs + `]`
		case "binary":
			p = "\xff\xfe\x00garbage\x01"
		}
		rx := g.startNs + tn + int64(math.Round(g.s.LatencyMS*1e6))
		out.Messages = append(out.Messages, Message{RxNs: rx, TrueNs: g.startNs + tn, Topic: c.Topic, Sensor: g.s.Index,
			Payload: []byte(p), Malformed: true, order: g.order})
		g.order++
		out.Stats.Malformed++
	}
}

func repeatNum(v string, n int) string {
	s := ""
	for i := 0; i < n; i++ {
		if i > 0 {
			s += ","
		}
		s += v
	}
	return s
}

func repeatTail(v string, n int) string {
	s := ""
	for i := 0; i < n; i++ {
		s += "," + v
	}
	return s
}

// negIdentity is −I (n×n, row-major): symmetric but not positive definite.
func negIdentity(n int) string {
	s := ""
	for i := 0; i < n*n; i++ {
		if i > 0 {
			s += ","
		}
		if i%(n+1) == 0 {
			s += "-1"
		} else {
			s += "0"
		}
	}
	return s
}
