package scenario

import (
	"errors"
	"fmt"
	"io/fs"
	"math"
	"math/rand/v2"
	"os"
	"path/filepath"
	"slices"
	"sort"
	"strings"
	"time"

	"github.com/godwit-fusion/godwit/configs"
	"github.com/godwit-fusion/godwit/configs/yamlstrict"
	"github.com/godwit-fusion/godwit/examples/scenarios"
	"gopkg.in/yaml.v3"
)

// DefaultStart is t = 0 of a scenario that does not give start: a fixed
// instant, so that output never depends on the wall clock.
var DefaultStart = time.Date(2026, 3, 2, 8, 0, 0, 0, time.UTC)

// Limits that keep a scenario a scenario rather than a way to fill a disk.
const (
	maxDurationS = 3600
	maxTargets   = 5000
	maxClutter   = 500 // Poisson mean per scan
)

var (
	topKeys    = []string{"description", "config", "start", "duration_s", "step_ms", "seed", "ego", "targets", "crowds", "sensors"}
	egoKeys    = []string{"waypoints", "corner_radius", "loop", "speed", "start_m"}
	targetKeys = []string{"id", "class", "start_s", "end_s", "motion", "waypoints", "corner_radius", "loop", "speed", "start_m",
		"pos", "vel", "heading_deg", "turn_rate_deg_s"}
	motionKeys = map[string][]string{
		MotionPath: {"waypoints", "corner_radius", "loop", "speed", "start_m"},
		MotionCV:   {"pos", "vel"},
		MotionTurn: {"pos", "speed", "heading_deg", "turn_rate_deg_s"},
	}
	crowdKeys  = []string{"prefix", "count", "class", "area", "speed", "legs"}
	sensorKeys = []string{"off", "p_detect", "clutter_per_scan", "max_range", "fov_deg", "noise_sd",
		"range_sd_frac", "latency_ms", "jitter_ms", "clock_offset_ms", "phase_ms", "loss", "dropouts", "malformed", "resolution", "clutter_rate_max"}
	burstKeys = []string{"at_s", "count"}
)

// Names lists the shipped scenarios, sorted.
func Names() []string {
	ents, _ := fs.ReadDir(scenarios.FS, ".")
	var out []string
	for _, e := range ents {
		if n, ok := strings.CutSuffix(e.Name(), ".yaml"); ok {
			out = append(out, n)
		}
	}
	sort.Strings(out)
	return out
}

// Shipped parses a shipped scenario by name (with or without .yaml).
func Shipped(name string) (*Scenario, error) {
	name = strings.TrimSuffix(name, ".yaml")
	data, err := scenarios.FS.ReadFile(name + ".yaml")
	if err != nil {
		return nil, fmt.Errorf("scenario: no shipped scenario %q (shipped: %s)", name, strings.Join(Names(), ", "))
	}
	return Parse(name+".yaml", data, "")
}

// Load reads a scenario file. A config given as a path is relative to the
// scenario file's folder.
func Load(path string) (*Scenario, error) {
	data, err := os.ReadFile(path)
	if err != nil {
		return nil, fmt.Errorf("scenario: %w", err)
	}
	return Parse(path, data, filepath.Dir(path))
}

// Open takes a shipped scenario name or a file path: an existing file wins,
// so a local file may shadow a shipped name.
func Open(nameOrPath string) (*Scenario, error) {
	if st, err := os.Stat(nameOrPath); err == nil && !st.IsDir() {
		return Load(nameOrPath)
	}
	if slices.Contains(Names(), strings.TrimSuffix(nameOrPath, ".yaml")) && !strings.ContainsAny(nameOrPath, `/\`) {
		return Shipped(nameOrPath)
	}
	return nil, fmt.Errorf("scenario: %q is neither a file nor a shipped scenario (shipped: %s)", nameOrPath, strings.Join(Names(), ", "))
}

// Parse decodes a scenario strictly and validates it against its paired
// configuration. file labels the messages; dir is where a config path is
// looked up ("" allows only shipped config names). On any problem it returns
// nil and an *ErrorList with every problem found, each with file:line.
func Parse(file string, data []byte, dir string) (*Scenario, error) {
	d := newDecoder(file)
	var doc yaml.Node
	if err := yaml.Unmarshal(data, &doc); err != nil {
		d.errorf(yamlErrLine(err), "", "is not valid YAML: %s", yamlErrText(err))
		return nil, d.list()
	}
	if doc.Kind == 0 || len(doc.Content) == 0 {
		d.errorf(0, "", "is empty; a scenario needs at least config and duration_s")
		return nil, d.list()
	}
	sc := &Scenario{File: file, Name: strings.TrimSuffix(filepath.Base(file), ".yaml"), Start: DefaultStart, Step: 0.1, Seed: 1}
	top := d.mapping(doc.Content[0], "", topKeys)
	if top == nil {
		return nil, d.list()
	}
	if n := top.get("description"); n != nil {
		sc.Description, _ = d.str(n, "description")
	}
	if n := top.get("start"); n != nil {
		if s, ok := d.str(n, "start"); ok {
			t, err := time.Parse(time.RFC3339Nano, s)
			if err != nil {
				d.errorf(line(n), "start", "must be an RFC 3339 time such as 2026-03-02T08:00:00Z, got %q", s)
			} else {
				sc.Start = t.UTC()
			}
		}
	}
	if n := top.get("duration_s"); n != nil {
		sc.Duration, _ = d.numIn(n, "duration_s", 1e-3, maxDurationS, fmt.Sprintf("above 0 and at most %d s", maxDurationS))
	} else {
		d.errorf(top.line, "", "duration_s is missing (seconds of simulated time)")
	}
	if n := top.get("step_ms"); n != nil {
		if v, ok := d.numIn(n, "step_ms", 1, 10000, "1..10000 ms"); ok {
			sc.Step = v / 1000
		}
	}
	if n := top.get("seed"); n != nil {
		if v, ok := d.integer(n, "seed"); ok {
			if v < 0 {
				d.errorf(line(n), "seed", "is %d, must be ≥ 0", v)
			}
			sc.Seed = uint64(v)
		}
	}
	cfgOK := false
	if n := top.get("config"); n != nil {
		if ref, ok := d.str(n, "config"); ok {
			sc.ConfigRef = ref
			sc.Config = d.loadConfig(ref, dir, line(n))
			cfgOK = sc.Config != nil
		}
	} else {
		d.errorf(top.line, "", "config is missing (a shipped config name such as %s, or a path)", strings.Join(configs.Examples(), ", "))
	}
	if cfgOK {
		d.ego(top.get("ego"), sc, top.line)
	}
	d.targets(top.get("targets"), sc)
	d.crowds(top.get("crowds"), sc)
	if len(sc.Targets) > maxTargets {
		d.errorf(top.line, "", "has %d targets, at most %d", len(sc.Targets), maxTargets)
	}
	if cfgOK {
		d.sensors(top.get("sensors"), sc)
	}
	if err := d.list(); err != nil {
		return nil, err
	}
	return sc, nil
}

// yaml.v3 reports syntax errors as "yaml: line N: text".
func yamlErrLine(err error) int {
	var n int
	msg := err.Error()
	if i := strings.Index(msg, "line "); i >= 0 {
		fmt.Sscanf(msg[i:], "line %d", &n)
	}
	return n
}

func yamlErrText(err error) string {
	msg := strings.TrimPrefix(err.Error(), "yaml: ")
	if i := strings.Index(msg, ": "); strings.HasPrefix(msg, "line ") && i >= 0 {
		msg = msg[i+2:]
	}
	return msg
}

func (d *decoder) loadConfig(ref, dir string, ln int) *configs.Config {
	if slices.Contains(configs.Examples(), strings.TrimSuffix(ref, ".yaml")) && !strings.ContainsAny(ref, `/\`) {
		c, err := configs.Example(ref)
		if err != nil {
			d.errorf(ln, "config", "names the shipped config %s, which does not load: %v", ref, err)
			return nil
		}
		return c
	}
	if dir == "" {
		d.errorf(ln, "config", "is %q, not a shipped config (%s); a shipped scenario can only pair with those", ref, strings.Join(configs.Examples(), ", "))
		return nil
	}
	path := ref
	if !filepath.IsAbs(path) {
		path = filepath.Join(dir, ref)
	}
	if _, err := os.Stat(path); err != nil {
		d.errorf(ln, "config", "is %q: neither a shipped config (%s) nor a readable file: %v", ref, strings.Join(configs.Examples(), ", "), err)
		return nil
	}
	c, err := configs.Load(path)
	if err != nil {
		var list *configs.ErrorList
		if errors.As(err, &list) {
			d.errorf(ln, "config", "%s does not validate:\n%v", path, err)
		} else {
			d.errorf(ln, "config", "is %q: neither a shipped config (%s) nor a readable file: %v", ref, strings.Join(configs.Examples(), ", "), err)
		}
		return nil
	}
	return c
}

// route reads waypoints, corner_radius and loop of an ego or path target.
func (d *decoder) route(m *mapping, path string, loopDefault bool) *Path {
	wn := m.get("waypoints")
	if wn == nil {
		d.errorf(m.line, path, "needs waypoints: [[x, y], ...] in site metres")
		return nil
	}
	items, ln, ok := d.seq(wn, yamlstrict.Join(path, "waypoints"))
	if !ok {
		return nil
	}
	pts := make([]Vec, 0, len(items))
	good := true
	for i, it := range items {
		p, ok := d.point(it, fmt.Sprintf("%s.waypoints[%d]", path, i))
		good = good && ok
		pts = append(pts, p)
	}
	radius := 0.0
	if n := m.get("corner_radius"); n != nil {
		radius, ok = d.numIn(n, yamlstrict.Join(path, "corner_radius"), 0, 1e4, "0..10000 m")
		good = good && ok
	}
	loop := loopDefault
	if n := m.get("loop"); n != nil {
		loop, ok = d.boolean(n, yamlstrict.Join(path, "loop"))
		good = good && ok
	}
	if !good {
		return nil
	}
	p, err := newPath(pts, radius, loop)
	if err != nil {
		d.errorf(ln, yamlstrict.Join(path, "waypoints"), "%v", err)
		return nil
	}
	return p
}

func (d *decoder) ego(n *yaml.Node, sc *Scenario, topLine int) {
	cfg := sc.Config
	moving := cfg.Platform.Motion == configs.MotionMoving
	if n == nil {
		if moving {
			d.errorf(topLine, "", "ego is missing: config %s has a moving platform, so the scenario must give its route (ego.waypoints, ego.speed)", sc.ConfigRef)
		}
		sc.Ego = Ego{Post: Pose{cfg.Platform.Pose.X, cfg.Platform.Pose.Y, degToRad(cfg.Platform.Pose.YawDeg)}}
		return
	}
	if !moving {
		d.errorf(line(n), "ego", "is given, but config %s has a fixed platform: the post stands at its platform.pose", sc.ConfigRef)
		return
	}
	m := d.mapping(n, "ego", egoKeys)
	if m == nil {
		return
	}
	sc.Ego.Moving = true
	sc.Ego.Route = d.route(m, "ego", true)
	if sn := m.get("speed"); sn != nil {
		sc.Ego.Speed, _ = d.numIn(sn, "ego.speed", 0, 60, "0..60 m/s")
	} else {
		d.errorf(m.line, "ego", "needs speed (m/s along the route)")
	}
	if sn := m.get("start_m"); sn != nil {
		sc.Ego.StartM, _ = d.numIn(sn, "ego.start_m", 0, 1e6, "≥ 0 m")
	}
}

func (d *decoder) targets(n *yaml.Node, sc *Scenario) {
	if n == nil {
		return
	}
	items, _, ok := d.seq(n, "targets")
	if !ok {
		return
	}
	seen := map[string]string{} // id -> where it was first used
	for i, it := range items {
		path := fmt.Sprintf("targets[%d]", i)
		m := d.mapping(it, path, targetKeys)
		if m == nil {
			continue
		}
		tg := Target{}
		if idn := m.get("id"); idn != nil {
			if s, ok := d.str(idn, yamlstrict.Join(path, "id")); ok {
				switch prev, dup := seen[s]; {
				case s == "":
					d.errorf(line(idn), yamlstrict.Join(path, "id"), "is empty")
				case dup:
					d.errorf(line(idn), yamlstrict.Join(path, "id"), "%q is already used by %s", s, prev)
				default:
					seen[s] = path
				}
				tg.ID = s
			}
		} else {
			d.errorf(m.line, path, "needs an id (a short name such as p1, used in truth.jsonl)")
		}
		if cn := m.get("class"); cn != nil {
			tg.Class, _ = d.str(cn, yamlstrict.Join(path, "class"))
		}
		if sn := m.get("start_s"); sn != nil {
			tg.StartS, _ = d.numIn(sn, yamlstrict.Join(path, "start_s"), 0, maxDurationS, "0..3600 s")
		}
		if en := m.get("end_s"); en != nil {
			if v, ok := d.numIn(en, yamlstrict.Join(path, "end_s"), 0, maxDurationS, "0..3600 s"); ok {
				if v <= tg.StartS {
					d.errorf(line(en), yamlstrict.Join(path, "end_s"), "is %s, must be after start_s %s", fmtNum(v), fmtNum(tg.StartS))
				}
				tg.EndS = v
			}
		}
		mn := m.get("motion")
		if mn == nil {
			d.errorf(m.line, path, "needs motion: path, cv or turn")
			continue
		}
		kind, ok := d.str(mn, yamlstrict.Join(path, "motion"))
		if !ok {
			continue
		}
		used, known := motionKeys[kind]
		if !known {
			d.errorf(line(mn), yamlstrict.Join(path, "motion"), "is %q, must be path, cv or turn", kind)
			continue
		}
		tg.Motion = kind
		for _, f := range m.fields {
			if slices.Contains(motionKeys[MotionPath], f.key) || slices.Contains(motionKeys[MotionCV], f.key) || slices.Contains(motionKeys[MotionTurn], f.key) {
				if !slices.Contains(used, f.key) {
					d.errorf(f.line, yamlstrict.Join(path, f.key), "does not apply to motion %s (it uses %s)", kind, strings.Join(used, ", "))
				}
			}
		}
		need := func(key string) *yaml.Node {
			v := m.get(key)
			if v == nil {
				d.errorf(m.line, path, "motion %s needs %s", kind, key)
			}
			return v
		}
		switch kind {
		case MotionPath:
			tg.Path = d.route(m, path, false)
			if v := need("speed"); v != nil {
				tg.Speed, _ = d.numIn(v, yamlstrict.Join(path, "speed"), 0, 60, "0..60 m/s")
			}
			if v := m.get("start_m"); v != nil {
				tg.StartM, _ = d.numIn(v, yamlstrict.Join(path, "start_m"), 0, 1e6, "≥ 0 m")
			}
		case MotionCV:
			if v := need("pos"); v != nil {
				tg.Pos, _ = d.point(v, yamlstrict.Join(path, "pos"))
			}
			if v := need("vel"); v != nil {
				tg.Vel, _ = d.point(v, yamlstrict.Join(path, "vel"))
			}
		case MotionTurn:
			if v := need("pos"); v != nil {
				tg.Pos, _ = d.point(v, yamlstrict.Join(path, "pos"))
			}
			if v := need("speed"); v != nil {
				tg.Speed, _ = d.numIn(v, yamlstrict.Join(path, "speed"), 0, 60, "0..60 m/s")
			}
			if v := need("heading_deg"); v != nil {
				h, _ := d.numIn(v, yamlstrict.Join(path, "heading_deg"), -360, 360, "within ±360°")
				tg.Heading = degToRad(h)
			}
			if v := need("turn_rate_deg_s"); v != nil {
				w, _ := d.numIn(v, yamlstrict.Join(path, "turn_rate_deg_s"), -180, 180, "within ±180 °/s")
				tg.TurnRate = degToRad(w)
			}
		}
		sc.Targets = append(sc.Targets, tg)
	}
}

// crowds expands each crowd into targets wandering between random
// waypoints inside an area. Their layout is drawn from the scenario's
// default seed (not --seed), so the same scene is measured with new noise
// when only --seed changes.
func (d *decoder) crowds(n *yaml.Node, sc *Scenario) {
	if n == nil {
		return
	}
	items, _, ok := d.seq(n, "crowds")
	if !ok {
		return
	}
	ids := map[string]bool{}
	for _, t := range sc.Targets {
		ids[t.ID] = true
	}
	for i, it := range items {
		path := fmt.Sprintf("crowds[%d]", i)
		m := d.mapping(it, path, crowdKeys)
		if m == nil {
			continue
		}
		good := true
		var prefix, class string
		count, legs := int64(0), int64(4)
		var area []float64
		speed := []float64{0.8, 1.6}
		if v := m.get("prefix"); v != nil {
			prefix, ok = d.str(v, yamlstrict.Join(path, "prefix"))
			good = good && ok
		} else {
			d.errorf(m.line, path, "needs prefix (ids are prefix1, prefix2, ...)")
			good = false
		}
		if v := m.get("class"); v != nil {
			class, _ = d.str(v, yamlstrict.Join(path, "class"))
		}
		if v := m.get("count"); v != nil {
			count, ok = d.integer(v, yamlstrict.Join(path, "count"))
			if ok && (count < 1 || count > maxTargets) {
				d.errorf(line(v), yamlstrict.Join(path, "count"), "is %d, must be 1..%d", count, maxTargets)
				ok = false
			}
			good = good && ok
		} else {
			d.errorf(m.line, path, "needs count")
			good = false
		}
		if v := m.get("legs"); v != nil {
			legs, ok = d.integer(v, yamlstrict.Join(path, "legs"))
			if ok && (legs < 2 || legs > 50) {
				d.errorf(line(v), yamlstrict.Join(path, "legs"), "is %d, must be 2..50", legs)
				ok = false
			}
			good = good && ok
		}
		if v := m.get("area"); v != nil {
			area, ok = d.nums(v, yamlstrict.Join(path, "area"), 4, "an area [x_min, y_min, x_max, y_max]")
			if ok && slices.ContainsFunc(area, func(x float64) bool { return math.Abs(x) > maxCoord }) {
				d.errorf(line(v), yamlstrict.Join(path, "area"), "reaches beyond ±%g m", maxCoord)
				ok = false
			} else if ok && (area[2]-area[0] < 1 || area[3]-area[1] < 1) {
				d.errorf(line(v), yamlstrict.Join(path, "area"), "must have x_max and y_max at least 1 m above x_min and y_min")
				ok = false
			}
			good = good && ok
		} else {
			d.errorf(m.line, path, "needs area: [x_min, y_min, x_max, y_max]")
			good = false
		}
		if v := m.get("speed"); v != nil {
			speed, ok = d.nums(v, yamlstrict.Join(path, "speed"), 2, "a speed range [min, max]")
			if ok && (speed[0] < 0 || speed[1] < speed[0] || speed[1] > 60) {
				d.errorf(line(v), yamlstrict.Join(path, "speed"), "must be [min, max] with 0 ≤ min ≤ max ≤ 60 m/s")
				ok = false
			}
			good = good && ok
		}
		if !good {
			continue
		}
		r := rand.New(rand.NewPCG(sc.Seed, streamID("crowd:"+prefix)))
		for k := 1; k <= int(count); k++ {
			id := fmt.Sprintf("%s%d", prefix, k)
			if ids[id] {
				d.errorf(m.line, yamlstrict.Join(path, "prefix"), "makes id %q, which is already used", id)
				break
			}
			ids[id] = true
			pts := make([]Vec, legs)
			for j := range pts {
				pts[j] = Vec{lerp(area[0], area[2], r.Float64()), lerp(area[1], area[3], r.Float64())}
			}
			p, err := newPath(pts, 0, true)
			if err != nil { // two equal random points: practically impossible
				d.errorf(m.line, path, "drew a degenerate path for %s: %v", id, err)
				break
			}
			sc.Targets = append(sc.Targets, Target{
				ID: id, Class: class, Motion: MotionPath, Path: p,
				Speed: lerp(speed[0], speed[1], r.Float64()), StartM: r.Float64() * p.Length(),
			})
		}
	}
}

func (d *decoder) sensors(n *yaml.Node, sc *Scenario) {
	cfg := sc.Config
	sc.Sensors = make([]Sensor, len(cfg.Sensors))
	for i, cs := range cfg.Sensors {
		sc.Sensors[i] = Sensor{Cfg: cs, Index: i, Resolution: defaultResolution(cs.Kind), ClutterRate: 10}
		sc.Sensors[i].Cfg.NoiseSD = slices.Clone(cs.NoiseSD)
	}
	if n == nil {
		return
	}
	m := d.mapping(n, "sensors", nil)
	if m == nil {
		return
	}
	for _, f := range m.fields {
		idx := slices.IndexFunc(cfg.Sensors, func(s configs.Sensor) bool { return s.Name == f.key })
		if idx < 0 {
			names := make([]string, len(cfg.Sensors))
			for i, s := range cfg.Sensors {
				names[i] = s.Name
			}
			d.errorf(f.line, yamlstrict.Join("sensors", f.key), "is not a sensor of config %s (its sensors: %s)", sc.ConfigRef, strings.Join(names, ", "))
			continue
		}
		d.sensor(f.val, yamlstrict.Join("sensors", f.key), &sc.Sensors[idx])
	}
	for i := range sc.Sensors {
		s := &sc.Sensors[i]
		if s.Malformed.Count > 0 && s.Malformed.AtS >= sc.Duration {
			d.errorf(s.Malformed.line, yamlstrict.Join("sensors", s.Cfg.Name)+".malformed.at_s", "is %s s, after the end of the scenario (%s s)", fmtNum(s.Malformed.AtS), fmtNum(sc.Duration))
		}
	}
}

// defaultResolution is the quantum a driver typically reports at: 1 mm,
// 10 µrad, 1 mm/s, 0.01 px, 1e-9° (about 0.1 mm) — common practice, and
// far below the noise, so files stay small without changing the statistics.
func defaultResolution(kind string) []float64 {
	switch kind {
	case configs.KindPositionXY:
		return []float64{1e-3, 1e-3}
	case configs.KindRangeBearing:
		return []float64{1e-3, 1e-5}
	case configs.KindRangeBearingRate:
		return []float64{1e-3, 1e-5, 1e-3}
	case configs.KindPinhole:
		return []float64{1e-2, 1e-3}
	case configs.KindGNSS:
		return []float64{1e-9, 1e-9}
	case configs.KindOdometry:
		return []float64{1e-4, 1e-5}
	}
	return nil
}

func (d *decoder) sensor(n *yaml.Node, path string, s *Sensor) {
	m := d.mapping(n, path, sensorKeys)
	if m == nil {
		return
	}
	ego := configs.IsEgoKind(s.Cfg.Kind)
	dim := configs.MeasDim(s.Cfg.Kind)
	for _, f := range m.fields {
		p := yamlstrict.Join(path, f.key)
		switch f.key {
		case "p_detect", "clutter_per_scan", "max_range", "fov_deg":
			if ego {
				d.errorf(f.line, p, "does not apply to %s sensor %s (it measures the platform itself)", s.Cfg.Kind, s.Cfg.Name)
				continue
			}
		case "range_sd_frac":
			if s.Cfg.Kind != configs.KindPinhole {
				d.errorf(f.line, p, "applies to pinhole sensors only, %s is %s", s.Cfg.Name, s.Cfg.Kind)
				continue
			}
		case "clutter_rate_max":
			if s.Cfg.Kind != configs.KindRangeBearingRate {
				d.errorf(f.line, p, "applies to range_bearing_rate sensors only, %s is %s", s.Cfg.Name, s.Cfg.Kind)
				continue
			}
		}
		switch f.key {
		case "off":
			s.Off, _ = d.boolean(f.val, p)
		case "p_detect":
			s.Cfg.PDetect, _ = d.numIn(f.val, p, 0, 1, "0..1")
		case "clutter_per_scan":
			s.Cfg.ClutterPerScan, _ = d.numIn(f.val, p, 0, maxClutter, fmt.Sprintf("0..%d (a Poisson mean per scan)", maxClutter))
		case "max_range":
			s.Cfg.MaxRange, _ = d.numIn(f.val, p, 0, 1e5, "0..100000 m (0: unlimited)")
		case "fov_deg":
			if v, ok := d.numIn(f.val, p, 1e-3, 360, "above 0 and at most 360"); ok {
				if s.Cfg.Kind == configs.KindPinhole && v >= 180 {
					d.errorf(line(f.val), p, "is %s, a pinhole camera sees less than 180°", fmtNum(v))
				}
				s.Cfg.FOVDeg = v
			}
		case "noise_sd":
			if v, ok := d.nums(f.val, p, dim, "kind "+s.Cfg.Kind); ok {
				for i, x := range v {
					if x < 0 {
						d.errorf(line(f.val), fmt.Sprintf("%s[%d]", p, i), "is %s, must be ≥ 0 (0: noise-free)", fmtNum(x))
					}
				}
				s.Cfg.NoiseSD = v
			}
		case "range_sd_frac":
			s.Cfg.RangeSDFrac, _ = d.numIn(f.val, p, 0, 1, "0..1")
		case "resolution":
			if v, ok := d.nums(f.val, p, dim, "kind "+s.Cfg.Kind); ok {
				for i, x := range v {
					if x < 0 {
						d.errorf(line(f.val), fmt.Sprintf("%s[%d]", p, i), "is %s, must be ≥ 0 (0: full precision)", fmtNum(x))
					}
				}
				s.Resolution = v
			}
		case "latency_ms":
			s.LatencyMS, _ = d.numIn(f.val, p, 0, 5000, "0..5000 ms")
		case "jitter_ms":
			s.JitterMS, _ = d.numIn(f.val, p, 0, 5000, "0..5000 ms")
		case "clock_offset_ms":
			s.ClockOffsetMS, _ = d.numIn(f.val, p, -60000, 60000, "within ±60000 ms")
		case "phase_ms":
			s.PhaseMS, _ = d.numIn(f.val, p, 0, math.Max(s.Cfg.PeriodMS, 0), fmt.Sprintf("0..%s ms (the period)", fmtNum(s.Cfg.PeriodMS)))
		case "loss":
			s.Loss, _ = d.numIn(f.val, p, 0, 1, "0..1 (probability a message is lost)")
		case "clutter_rate_max":
			s.ClutterRate, _ = d.numIn(f.val, p, 0, 200, "0..200 m/s")
		case "dropouts":
			items, _, ok := d.seq(f.val, p)
			if !ok {
				continue
			}
			for i, it := range items {
				ip := fmt.Sprintf("%s[%d]", p, i)
				w, ok := d.nums(it, ip, 2, "a window [from_s, to_s]")
				if !ok {
					continue
				}
				if w[0] < 0 || w[1] <= w[0] {
					d.errorf(line(it), ip, "must be [from_s, to_s] with 0 ≤ from_s < to_s")
					continue
				}
				s.Dropouts = append(s.Dropouts, Window{w[0], w[1]})
			}
		case "malformed":
			bm := d.mapping(f.val, p, burstKeys)
			if bm == nil {
				continue
			}
			if v := bm.get("at_s"); v != nil {
				s.Malformed.AtS, _ = d.numIn(v, yamlstrict.Join(p, "at_s"), 0, maxDurationS, "0..3600 s")
				s.Malformed.line = line(v)
			} else {
				d.errorf(bm.line, p, "needs at_s")
			}
			if v := bm.get("count"); v != nil {
				if c, ok := d.integer(v, yamlstrict.Join(p, "count")); ok {
					if c < 1 || c > 1000 {
						d.errorf(line(v), yamlstrict.Join(p, "count"), "is %d, must be 1..1000", c)
					} else {
						s.Malformed.Count = int(c)
					}
				}
			} else {
				d.errorf(bm.line, p, "needs count")
			}
		}
	}
}

// streamID derives a random-stream number from a name (FNV-1a, 64 bit), so
// each sensor draws from its own stream and adding a sensor changes none of
// the others.
func streamID(name string) uint64 {
	h := uint64(14695981039346656037)
	for i := 0; i < len(name); i++ {
		h ^= uint64(name[i])
		h *= 1099511628211
	}
	return h
}
