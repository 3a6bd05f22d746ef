package eval

import (
	"math"
	"sort"
)

// truthAt places the truth at time t (ns) into dst (reused) and returns it
// with the ego pose, or ok = false when no truth line is close enough.
//
// Alignment rule: when lines at t0 ≤ t ≤ t1 bracket t and t1 − t0 ≤ 2·tol,
// an object listed on both is interpolated linearly in position and
// velocity; an object listed on only one of them is kept when that line is
// the nearer one, carried there at its own velocity (it appears or vanishes
// halfway between the lines). Otherwise the nearest line within tol is
// used, every object carried to t at its velocity (the ends of the truth,
// or gaps in it). Linear interpolation between 50–100 ms truth steps errs
// by millimetres on the scenarios' turns (sagitta s²/8R), far below any
// sensor's noise.
func truthAt(lines []TruthLine, t, tol int64, dst []TruthObject) (objs []TruthObject, ego TruthEgo, hasEgo, ok bool) {
	dst = dst[:0]
	n := len(lines)
	if n == 0 {
		return dst, ego, false, false
	}
	k := sort.Search(n, func(i int) bool { return lines[i].TNs >= t })
	if k < n && lines[k].TNs == t {
		dst = append(dst, lines[k].Objects...)
		if lines[k].Ego != nil {
			ego = *lines[k].Ego
			return dst, ego, true, true
		}
		return dst, ego, false, true
	}
	gap := int64(math.MaxInt64 - 1)
	if tol < gap/2 {
		gap = 2 * tol
	}
	if k > 0 && k < n && sub(lines[k].TNs, lines[k-1].TNs) <= gap {
		a, b := &lines[k-1], &lines[k]
		w := float64(t-a.TNs) / float64(b.TNs-a.TNs)
		nearA := t-a.TNs <= b.TNs-t
		for i := range a.Objects {
			oa := &a.Objects[i]
			if ob := find(b.Objects, oa.ID, i); ob != nil {
				dst = append(dst, TruthObject{ID: oa.ID, Pos: lerp2(oa.Pos, ob.Pos, w), Vel: lerp2(oa.Vel, ob.Vel, w)})
			} else if nearA {
				dst = append(dst, carry(oa, t-a.TNs))
			}
		}
		if !nearA {
			for i := range b.Objects {
				ob := &b.Objects[i]
				if find(a.Objects, ob.ID, i) == nil {
					dst = append(dst, carry(ob, t-b.TNs))
				}
			}
		}
		switch {
		case a.Ego != nil && b.Ego != nil:
			dy := math.Remainder(b.Ego.Yaw-a.Ego.Yaw, 2*math.Pi)
			ego = TruthEgo{Pos: lerp2(a.Ego.Pos, b.Ego.Pos, w), Yaw: math.Remainder(a.Ego.Yaw+w*dy, 2*math.Pi)}
			return dst, ego, true, true
		case nearA && a.Ego != nil:
			ego = *a.Ego
			return dst, ego, true, true
		case !nearA && b.Ego != nil:
			ego = *b.Ego
			return dst, ego, true, true
		}
		return dst, ego, false, true
	}
	// Nearest line within tol.
	j := -1
	switch {
	case k == 0:
		j = 0
	case k == n:
		j = n - 1
	case sub(t, lines[k-1].TNs) <= sub(lines[k].TNs, t):
		j = k - 1
	default:
		j = k
	}
	dt := sub(t, lines[j].TNs)
	if dt > tol || dt < -tol {
		return dst, ego, false, false
	}
	for i := range lines[j].Objects {
		dst = append(dst, carry(&lines[j].Objects[i], dt))
	}
	if lines[j].Ego != nil {
		ego = *lines[j].Ego
		return dst, ego, true, true
	}
	return dst, ego, false, true
}

// find looks up id, trying index hint first: consecutive truth lines
// usually list the same objects in the same order.
func find(objs []TruthObject, id string, hint int) *TruthObject {
	if hint < len(objs) && objs[hint].ID == id {
		return &objs[hint]
	}
	for i := range objs {
		if objs[i].ID == id {
			return &objs[i]
		}
	}
	return nil
}

func lerp2(a, b [2]float64, w float64) [2]float64 {
	return [2]float64{a[0] + w*(b[0]-a[0]), a[1] + w*(b[1]-a[1])}
}

func carry(o *TruthObject, dtNs int64) TruthObject {
	s := float64(dtNs) * 1e-9
	return TruthObject{ID: o.ID, Pos: [2]float64{o.Pos[0] + s*o.Vel[0], o.Pos[1] + s*o.Vel[1]}, Vel: o.Vel}
}

// sub is a − b saturated to the int64 range: times from a broken file may
// lie far apart.
func sub(a, b int64) int64 {
	d := a - b
	if (b < 0 && d < a) || (b > 0 && d > a) {
		if b < 0 {
			return math.MaxInt64
		}
		return math.MinInt64
	}
	return d
}
