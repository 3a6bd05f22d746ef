package scenario

import (
	"fmt"
	"math"
)

// Vec is a point or velocity in the site frame (x east, y north), metres.
type Vec struct{ X, Y float64 }

func (a Vec) add(b Vec) Vec       { return Vec{a.X + b.X, a.Y + b.Y} }
func (a Vec) sub(b Vec) Vec       { return Vec{a.X - b.X, a.Y - b.Y} }
func (a Vec) scale(k float64) Vec { return Vec{a.X * k, a.Y * k} }
func (a Vec) dot(b Vec) float64   { return a.X*b.X + a.Y*b.Y }
func (a Vec) cross(b Vec) float64 { return a.X*b.Y - a.Y*b.X }
func (a Vec) norm() float64       { return math.Hypot(a.X, a.Y) }
func (a Vec) left() Vec           { return Vec{-a.Y, a.X} }
func (a Vec) unit() Vec           { return a.scale(1 / a.norm()) }

func distance(a, b Vec) float64    { return a.sub(b).norm() }
func angleOf(p Vec) float64        { return math.Atan2(p.Y, p.X) }
func degToRad(deg float64) float64 { return deg * math.Pi / 180 }
func lerp(a, b, t float64) float64 { return a + (b-a)*t }

func polar(r, angle float64) Vec {
	s, c := math.Sincos(angle)
	return Vec{r * c, r * s}
}

// rotate turns v counter-clockwise by yaw.
func rotate(v Vec, yaw float64) Vec {
	s, c := math.Sincos(yaw)
	return Vec{c*v.X - s*v.Y, s*v.X + c*v.Y}
}

// wrapAngle wraps a to (−π, π].
func wrapAngle(a float64) float64 { return a - 2*math.Pi*math.Ceil((a-math.Pi)/(2*math.Pi)) }

// piece is one primitive of a path: a straight line or a circular arc,
// parametrised by arc length.
type piece struct {
	s0, length float64 // where it starts along the path, and how long it is
	// line: from a along direction u
	a, u Vec
	// arc: centre c, radius r, start angle phi0 about c, turning sense dir (+1 CCW)
	arc       bool
	c         Vec
	r, phi0   float64
	direction float64
}

// Path is a route made of straight legs between waypoints whose corners are
// rounded by circular arcs of one radius (a "fillet"), so a vehicle on it has
// a continuous heading and a piecewise-constant curvature: yaw rate is
// speed × curvature, which is what a wheel odometer measures.
type Path struct {
	pieces []piece
	length float64
	loop   bool
}

// Length is the total arc length in metres.
func (p *Path) Length() float64 { return p.length }

// Loop reports whether the path closes on itself.
func (p *Path) Loop() bool { return p.loop }

// newPath builds a path through pts. With loop the last point joins the
// first. radius 0 keeps the corners sharp (the heading jumps there, as when a
// pedestrian turns on the spot). The error names the waypoint at fault.
func newPath(pts []Vec, radius float64, loop bool) (*Path, error) {
	n := len(pts)
	if n < 2 {
		return nil, fmt.Errorf("needs at least 2 waypoints, has %d", n)
	}
	legs := n - 1
	if loop {
		legs = n
	}
	next := func(i int) int { return (i + 1) % n }
	for i := 0; i < legs; i++ {
		if distance(pts[i], pts[next(i)]) < 1e-6 {
			return nil, fmt.Errorf("waypoints[%d] repeats waypoints[%d]", next(i), i)
		}
	}
	// Trim at each corner: tangent length d = R·tan(θ/2), θ the turn angle.
	trim := make([]float64, n)
	turn := make([]float64, n)
	for i := 0; i < n; i++ {
		if !loop && (i == 0 || i == n-1) {
			continue
		}
		prev := (i + n - 1) % n
		u1 := pts[i].sub(pts[prev]).unit()
		u2 := pts[next(i)].sub(pts[i]).unit()
		th := math.Atan2(u1.cross(u2), u1.dot(u2))
		if radius == 0 || math.Abs(th) < 1e-9 {
			continue
		}
		if math.Abs(th) > degToRad(179) {
			return nil, fmt.Errorf("turns back on itself at waypoints[%d]; a rounded corner needs corner_radius 0 there", i)
		}
		turn[i] = th
		trim[i] = radius * math.Tan(math.Abs(th)/2)
	}
	for i := 0; i < legs; i++ {
		j := next(i)
		if l := distance(pts[i], pts[j]); trim[i]+trim[j] > l+1e-9 {
			return nil, fmt.Errorf("corner_radius %g does not fit between waypoints[%d] and waypoints[%d]: the corners need %.2f m of a %.2f m leg",
				radius, i, j, trim[i]+trim[j], l)
		}
	}
	p := &Path{loop: loop}
	add := func(pc piece) {
		if pc.length <= 0 {
			return
		}
		pc.s0 = p.length
		p.pieces = append(p.pieces, pc)
		p.length += pc.length
	}
	for i := 0; i < legs; i++ {
		j := next(i)
		u := pts[j].sub(pts[i]).unit()
		a := pts[i].add(u.scale(trim[i]))
		b := pts[j].sub(u.scale(trim[j]))
		add(piece{a: a, u: u, length: distance(a, b)})
		if trim[j] > 0 && (loop || j != n-1) {
			th := turn[j]
			dir := math.Copysign(1, th)
			c := b.add(u.left().scale(dir * radius))
			add(piece{arc: true, c: c, r: radius, phi0: angleOf(b.sub(c)), direction: dir, length: radius * math.Abs(th)})
		}
	}
	return p, nil
}

// At returns position, unit heading angle and curvature (1/m, + to the left)
// at arc length s, which is wrapped for a loop and clamped otherwise.
func (p *Path) At(s float64) (pos Vec, yaw, curvature float64) {
	if p.loop {
		s = math.Mod(s, p.length)
		if s < 0 {
			s += p.length
		}
	} else {
		s = math.Min(math.Max(s, 0), p.length)
	}
	// Binary search for the piece holding s.
	lo, hi := 0, len(p.pieces)-1
	for lo < hi {
		mid := (lo + hi + 1) / 2
		if p.pieces[mid].s0 <= s {
			lo = mid
		} else {
			hi = mid - 1
		}
	}
	pc := &p.pieces[lo]
	ds := math.Min(s-pc.s0, pc.length)
	if !pc.arc {
		return pc.a.add(pc.u.scale(ds)), angleOf(pc.u), 0
	}
	phi := pc.phi0 + pc.direction*ds/pc.r
	pos = pc.c.add(polar(pc.r, phi))
	return pos, wrapAngle(phi + pc.direction*math.Pi/2), pc.direction / pc.r
}
