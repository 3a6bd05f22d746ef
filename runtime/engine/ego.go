package engine

import "math"

// Ego prior when the estimator starts: the configured pose, loosely when
// GNSS will correct it, tightly (known start pose) when nothing can.
const (
	egoKnownPosSD    = 0.1  // m
	egoKnownYawSD    = 0.01 // rad
	egoInitPosSD     = 10.0 // m
	egoInitYawSD     = 0.5  // rad
	egoInitSpeedSD   = 3.0  // m/s
	egoInitYawRateSD = 0.3  // rad/s
)

// egoUpdate feeds one odometry or gnss message to the ego estimator.
func (e *Engine) egoUpdate(sc *scan, s *sensorRT) {
	st := &e.st
	d := &sc.dets[0]
	z := e.ws.z[:2] // workspace: a local array would escape through the interface
	switch s.kind {
	case kindOdometry:
		z[0], z[1] = d.z[0], d.z[1]
	case kindGNSS:
		if err := s.gnss.Preprocess(z, d.z[:2]); err != nil {
			e.counters.FilterErrors++ // cannot happen: Ingest checked the fix
			return
		}
	}
	if !st.egoInit {
		p := e.fixedPose
		x0, S0 := e.ws.x0[:5], e.ws.S0[:25]
		clear(x0)
		clear(S0)
		x0[0], x0[1], x0[3] = p.X, p.Y, p.Yaw
		if s.kind == kindGNSS {
			c, sn := math.Cos(p.Yaw), math.Sin(p.Yaw)
			x0[0] = z[0] - (c*s.mount.X - sn*s.mount.Y)
			x0[1] = z[1] - (sn*s.mount.X + c*s.mount.Y)
		}
		for k := 0; k < 5; k++ {
			S0[k*5+k] = e.egoPrior[k]
		}
		if err := st.ego.Init(x0, S0); err != nil {
			e.counters.FilterErrors++
			return
		}
		st.egoInit, st.egoNs = true, sc.tNs
		if s.kind == kindGNSS {
			return // the fix is the prior's centre; using it twice would be overconfident
		}
	}
	rs := s.rsDefault[:4]
	if d.hasR {
		rs = d.rs[:4]
	}
	var err error
	if s.kind == kindOdometry {
		err = st.ego.Prepare(e.odo, rs)
	} else {
		err = st.ego.Prepare(s.gnss, rs)
	}
	if err != nil {
		e.counters.FilterErrors++
		return
	}
	nis, err := st.ego.Update(z)
	if err != nil {
		e.counters.FilterErrors++
		return
	}
	if sc.fresh {
		s.addNIS(nis)
	}
}
