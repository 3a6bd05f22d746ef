package models

import (
	"fmt"
	"math"

	"github.com/godwit-fusion/godwit/filters/geo"
)

// The ego measurement models observe the platform itself, whose state is the
// Ego layout [px, py, v, yaw, yawrate] in the site frame. They have a mount
// (where the antenna or the odometry reference sits on the platform) but no
// separate platform pose: the state is the platform.

const egoDim = 5

func checkEgo(k Kinematics) error {
	if k == nil || k.Dim() != egoDim {
		return fmt.Errorf("%w: ego measurements need the 5-state Ego layout", ErrParam)
	}
	return nil
}

// ---------------------------------------------------------------- gnss

// GNSS is a satellite position fix of the platform's antenna. The raw
// measurement is [lat_deg, lon_deg] (WGS 84). Because residuals in degrees
// are awkward and anisotropic, the filter works in site metres: call
// Preprocess to turn the raw fix into z = [east, north] of the antenna about
// the site origin (WGS 84 → ECEF → ENU, NIMA TR8350.2), and give its noise
// in metres. The fix is treated as lying at the site origin's height (a 2-D
// fix); the horizontal error of that is below a millimetre for heights
// within a few hundred metres of the origin over a site a few km across.
type GNSS struct {
	site  geo.Local
	mount Mount
	sd    [2]float64
}

// NewGNSS returns a gnss model for the Ego state layout, with the site
// origin (degrees, metres) and the antenna mount on the platform.
func NewGNSS(k Kinematics, siteLatDeg, siteLonDeg, siteAlt float64, mount Mount) (*GNSS, error) {
	if err := checkEgo(k); err != nil {
		return nil, err
	}
	if !finite(mount.X, mount.Y, mount.Yaw) {
		return nil, fmt.Errorf("%w: mount %+v is not finite", ErrParam, mount)
	}
	l, err := geo.NewLocal(siteLatDeg, siteLonDeg, siteAlt)
	if err != nil {
		return nil, fmt.Errorf("%w: site origin: %v", ErrParam, err)
	}
	return &GNSS{site: l, mount: mount}, nil
}

// Dim is 2 (east, north in metres after Preprocess).
func (*GNSS) Dim() int { return 2 }

// Preprocess converts a raw fix [lat_deg, lon_deg] into site metres
// [east, north]. dst and raw may alias.
func (g *GNSS) Preprocess(dst, raw []float64) error {
	if len(raw) != 2 || len(dst) < 2 {
		return fmt.Errorf("%w: gnss fix needs [lat_deg, lon_deg], got %d values", ErrParam, len(raw))
	}
	_, _, h := g.site.Origin()
	if err := geo.CheckGeodetic(raw[0], raw[1], h); err != nil {
		return err
	}
	e, n, _ := g.site.GeodeticToENU(raw[0], raw[1], h)
	dst[0], dst[1] = e, n
	return nil
}

// Site returns the local frame about the site origin.
func (g *GNSS) Site() *geo.Local { return &g.site }

// Predict writes the antenna position p + R(yaw)·lever arm.
func (g *GNSS) Predict(z, x []float64) {
	s, c := math.Sincos(x[3])
	z[0] = x[0] + c*g.mount.X - s*g.mount.Y
	z[1] = x[1] + s*g.mount.X + c*g.mount.Y
}

// Jacobian writes ∂z/∂x (2×5).
func (g *GNSS) Jacobian(H, x []float64) {
	s, c := math.Sincos(x[3])
	zero(H[:10])
	H[0*5+0] = 1
	H[1*5+1] = 1
	H[0*5+3] = -s*g.mount.X - c*g.mount.Y
	H[1*5+3] = c*g.mount.X - s*g.mount.Y
}

// Residual is a − b (metres).
func (*GNSS) Residual(dst, a, b []float64) {
	dst[0] = a[0] - b[0]
	dst[1] = a[1] - b[1]
}

// SetNoise sets the horizontal s.d. (m) for east and north.
func (g *GNSS) SetNoise(sd []float64) error {
	if len(sd) != 2 {
		return fmt.Errorf("%w: gnss noise_sd has %d values, need 2", ErrParam, len(sd))
	}
	var tmp [4]float64
	if err := DiagSqrt(tmp[:], sd); err != nil {
		return err
	}
	copy(g.sd[:], sd)
	return nil
}

// NoiseSqrt writes diag(noise_sd) in metres; x is unused.
func (g *GNSS) NoiseSqrt(Rs, x []float64) error {
	if g.sd[0] == 0 {
		return fmt.Errorf("%w: noise not configured (SetNoise)", ErrParam)
	}
	return DiagSqrt(Rs, g.sd[:])
}

// ---------------------------------------------------------------- odometry

// Odometry measures the platform's own speed and yaw rate, z = [v, yawrate],
// i.e. x[2] and x[4] of the Ego state. Wheel odometry reports the motion of
// the platform's reference point, so the mount plays no part.
type Odometry struct {
	sd [2]float64
}

// NewOdometry returns an odometry model for the Ego state layout.
func NewOdometry(k Kinematics) (*Odometry, error) {
	if err := checkEgo(k); err != nil {
		return nil, err
	}
	return &Odometry{}, nil
}

// Dim is 2.
func (*Odometry) Dim() int { return 2 }

// Predict writes [v, yawrate].
func (*Odometry) Predict(z, x []float64) {
	z[0], z[1] = x[2], x[4]
}

// Jacobian selects x[2] and x[4].
func (*Odometry) Jacobian(H, x []float64) {
	zero(H[:10])
	H[0*5+2] = 1
	H[1*5+4] = 1
}

// Residual is a − b (a yaw rate is not an angle: no wrapping).
func (*Odometry) Residual(dst, a, b []float64) {
	dst[0] = a[0] - b[0]
	dst[1] = a[1] - b[1]
}

// SetNoise sets the s.d. of speed (m/s) and yaw rate (rad/s).
func (o *Odometry) SetNoise(sd []float64) error {
	if len(sd) != 2 {
		return fmt.Errorf("%w: odometry noise_sd has %d values, need 2", ErrParam, len(sd))
	}
	var tmp [4]float64
	if err := DiagSqrt(tmp[:], sd); err != nil {
		return err
	}
	copy(o.sd[:], sd)
	return nil
}

// NoiseSqrt writes diag(noise_sd); x is unused.
func (o *Odometry) NoiseSqrt(Rs, x []float64) error {
	if o.sd[0] == 0 {
		return fmt.Errorf("%w: noise not configured (SetNoise)", ErrParam)
	}
	return DiagSqrt(Rs, o.sd[:])
}
