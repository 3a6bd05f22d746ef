package engine

import (
	"math"
)

// odometryModel measures the platform's own speed and yaw rate,
// z = [v, yaw_rate], from the ego state [px, py, v, yaw, yawrate].
type odometryModel struct{}

func (odometryModel) Dim() int { return 2 }
func (odometryModel) Predict(z, x []float64) {
	z[0], z[1] = x[2], x[4]
}
func (odometryModel) Jacobian(H, x []float64) {
	clear(H[:10])
	H[2], H[5+4] = 1, 1
}
func (odometryModel) Residual(dst, a, b []float64) {
	dst[0], dst[1] = a[0]-b[0], a[1]-b[1]
}

// gnssModel measures the antenna position in the site frame, z = [east,
// north] metres, after the WGS 84 fix has been converted about the site
// origin. The antenna sits at the sensor mount: p + Rot(yaw)·mount.
type gnssModel struct {
	mx, my float64
}

func (gnssModel) Dim() int { return 2 }
func (g *gnssModel) Predict(z, x []float64) {
	c, s := math.Cos(x[3]), math.Sin(x[3])
	z[0] = x[0] + c*g.mx - s*g.my
	z[1] = x[1] + s*g.mx + c*g.my
}
func (g *gnssModel) Jacobian(H, x []float64) {
	c, s := math.Cos(x[3]), math.Sin(x[3])
	clear(H[:10])
	H[0], H[5+1] = 1, 1
	H[3] = -s*g.mx - c*g.my
	H[5+3] = c*g.mx - s*g.my
}
func (gnssModel) Residual(dst, a, b []float64) {
	dst[0], dst[1] = a[0]-b[0], a[1]-b[1]
}

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
		east, north, _ := e.site.GeodeticToENU(d.z[0], d.z[1], e.siteAlt)
		z[0], z[1] = east, north
		e.gnss.mx, e.gnss.my = s.mount.X, s.mount.Y
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
		st.egoInit = true
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
		err = st.ego.Prepare(e.gnss, rs)
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
