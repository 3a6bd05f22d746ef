package scenario

import (
	"math"
	"time"

	"github.com/godwit-fusion/godwit/configs"
)

// Scenario is a parsed, validated scenario: what moves where, and how each
// sensor of the paired configuration sees it. Times are seconds from the
// scenario start unless a name says otherwise.
type Scenario struct {
	Name        string // file name without .yaml
	File        string // as given to Parse, for messages
	Description string
	ConfigRef   string          // the config key as written
	Config      *configs.Config // the paired configuration, loaded
	Start       time.Time       // t = 0, a fixed instant (no wall clock)
	Duration    float64         // s
	Step        float64         // truth interval, s
	Seed        uint64          // default seed

	Ego     Ego
	Targets []Target // the listed targets, then every crowd's, in file order
	Sensors []Sensor // one per configured sensor, in configuration order
}

// Ego is the platform: a fixed post, or a vehicle driving a route at
// constant speed.
type Ego struct {
	Moving bool
	Post   Pose // fixed platform: the configuration's platform.pose
	Route  *Path
	Speed  float64 // m/s along the route
	StartM float64 // distance along the route at t = 0
}

// Pose is a planar pose in the site frame (metres, radians CCW from east).
type Pose struct{ X, Y, Yaw float64 }

// PlatformState is the platform's pose and motion at one instant.
type PlatformState struct {
	Pos     Vec
	Yaw     float64
	Vel     Vec // of the reference point, site axes
	Speed   float64
	YawRate float64
}

// At evaluates the platform at time t.
func (e *Ego) At(t float64) PlatformState {
	if !e.Moving {
		return PlatformState{Pos: Vec{e.Post.X, e.Post.Y}, Yaw: e.Post.Yaw}
	}
	s := e.StartM + e.Speed*t
	v := e.Speed
	if !e.Route.Loop() && s >= e.Route.Length() {
		v = 0 // an open route ends: the vehicle stops there
	}
	pos, yaw, k := e.Route.At(s)
	return PlatformState{Pos: pos, Yaw: yaw, Vel: polar(v, yaw), Speed: v, YawRate: v * k}
}

// Motion kinds of a target.
const (
	MotionPath = "path" // waypoints at constant speed
	MotionCV   = "cv"   // constant velocity from pos
	MotionTurn = "turn" // constant speed and turn rate (coordinated turn)
)

// Target is one invented object (pedestrian, cyclist, delivery cart, yard
// tractor, trailer...). It exists from StartS until EndS (0: the end), or
// until an open path runs out.
type Target struct {
	ID     string
	Class  string
	StartS float64
	EndS   float64
	Motion string

	Path   *Path   // path
	Speed  float64 // path, turn: m/s
	StartM float64 // path: distance along the path at StartS

	Pos      Vec     // cv, turn: position at StartS
	Vel      Vec     // cv
	Heading  float64 // turn: rad at StartS
	TurnRate float64 // turn: rad/s
}

// At returns the target's position and velocity at time t and whether it
// exists then.
func (tg *Target) At(t float64) (pos, vel Vec, ok bool) {
	if t < tg.StartS || (tg.EndS > 0 && t >= tg.EndS) {
		return Vec{}, Vec{}, false
	}
	tau := t - tg.StartS
	switch tg.Motion {
	case MotionPath:
		s := tg.StartM + tg.Speed*tau
		if !tg.Path.Loop() && s > tg.Path.Length() {
			return Vec{}, Vec{}, false // walked off the end of its path
		}
		p, yaw, _ := tg.Path.At(s)
		return p, polar(tg.Speed, yaw), true
	case MotionCV:
		return tg.Pos.add(tg.Vel.scale(tau)), tg.Vel, true
	case MotionTurn:
		// Coordinated turn at constant speed v and rate ω: the heading is
		// h0 + ωτ and the position follows the circle of radius v/ω
		// (e.g. Bar-Shalom, Li & Kirubarajan 2001, §11.7, from memory).
		h := tg.Heading + tg.TurnRate*tau
		var d Vec
		if math.Abs(tg.TurnRate*tau) < 1e-9 {
			d = polar(tg.Speed*tau, tg.Heading)
		} else {
			r := tg.Speed / tg.TurnRate
			sh, ch := math.Sincos(h)
			s0, c0 := math.Sincos(tg.Heading)
			d = Vec{r * (sh - s0), r * (c0 - ch)}
		}
		return tg.Pos.add(d), polar(tg.Speed, h), true
	}
	return Vec{}, Vec{}, false
}

// Sensor is one configured sensor with the scenario's effects. Cfg holds the
// configuration's values with the scenario's overrides applied (p_detect,
// clutter_per_scan, max_range, fov_deg, noise_sd): the simulator draws from
// these while the paired configuration still says what the engine assumes.
type Sensor struct {
	Cfg   configs.Sensor
	Index int // in the configuration

	Off           bool      // sends nothing at all
	LatencyMS     float64   // mean delay from measurement to arrival
	JitterMS      float64   // arrival delay is LatencyMS ± JitterMS, uniform
	ClockOffsetMS float64   // sensor clock minus true time
	PhaseMS       float64   // first scan time
	Loss          float64   // probability that a message is lost in transit
	Dropouts      []Window  // intervals in which nothing arrives
	Malformed     Burst     // broken messages on the sensor's topic
	Resolution    []float64 // per component quantum of the reported z (0: full precision)
	ClutterRate   float64   // radar: clutter range rates are uniform in ±this, m/s
}

// Window is an interval [From, To) in seconds.
type Window struct{ From, To float64 }

// Burst is Count malformed messages arriving from AtS on, 1 ms apart.
type Burst struct {
	AtS   float64
	Count int
	line  int // of at_s, for messages
}

func (s *Sensor) droppedAt(t float64) bool {
	for _, w := range s.Dropouts {
		if t >= w.From && t < w.To {
			return true
		}
	}
	return false
}
