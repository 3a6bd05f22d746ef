// Package geo converts between WGS 84 geodetic coordinates, Earth-centred
// Earth-fixed (ECEF) coordinates and a local east-north-up (ENU) frame about
// a site origin. The defining parameters are those of NIMA TR8350.2 (third
// edition, 2000), Table 3.1; derived constants follow Table 3.3.
//
// Latitudes and longitudes are in degrees (as sensors report them), heights
// in metres above the ellipsoid. Nothing here allocates.
package geo

import (
	"errors"
	"fmt"
	"math"
)

// WGS 84 defining parameters (NIMA TR8350.2, Table 3.1).
const (
	A    = 6378137.0     // semi-major axis a, m
	InvF = 298.257223563 // reciprocal flattening 1/f
	F    = 1 / InvF      // flattening f
	B    = A * (1 - F)   // semi-minor axis b, m (TR8350.2 Table 3.3: 6356752.3142)
	E2   = F * (2 - F)   // first eccentricity squared e² (Table 3.3: 6.69437999014e-3)
	Ep2  = E2 / (1 - E2) // second eccentricity squared e'²
	deg  = math.Pi / 180 // radians per degree
	rad  = 180 / math.Pi // degrees per radian
	tiny = 1e-9          // m; below this a point sits on the polar axis
	maxH = 1e7           // m; |h| beyond this is not a geodetic fix we accept
)

// ErrRange reports a latitude, longitude or height outside its valid range.
var ErrRange = errors.New("geo: coordinate out of range")

// CheckGeodetic reports whether (latDeg, lonDeg, h) is a finite geodetic
// point with |lat| ≤ 90°, |lon| ≤ 360° and |h| ≤ 10 000 km.
func CheckGeodetic(latDeg, lonDeg, h float64) error {
	switch {
	case !(math.Abs(latDeg) <= 90):
		return fmt.Errorf("%w: latitude %v deg", ErrRange, latDeg)
	case !(math.Abs(lonDeg) <= 360):
		return fmt.Errorf("%w: longitude %v deg", ErrRange, lonDeg)
	case !(math.Abs(h) <= maxH):
		return fmt.Errorf("%w: height %v m", ErrRange, h)
	}
	return nil
}

// GeodeticToECEF converts geodetic latitude, longitude (degrees) and
// ellipsoidal height h (m) to ECEF metres (TR8350.2 eq. 4-14, from memory):
// X = (N+h)·cosφ·cosλ, Y = (N+h)·cosφ·sinλ, Z = (N(1−e²)+h)·sinφ with the
// prime-vertical radius N = a/√(1−e²·sin²φ).
func GeodeticToECEF(latDeg, lonDeg, h float64) (x, y, z float64) {
	sφ, cφ := math.Sincos(latDeg * deg)
	sλ, cλ := math.Sincos(lonDeg * deg)
	n := A / math.Sqrt(1-E2*sφ*sφ)
	x = (n + h) * cφ * cλ
	y = (n + h) * cφ * sλ
	z = (n*(1-E2) + h) * sφ
	return x, y, z
}

// ECEFToGeodetic converts ECEF metres to geodetic latitude, longitude
// (degrees) and ellipsoidal height (m) by Bowring's iteration on the reduced
// latitude (Bowring 1976, "Transformation from spatial to geographical
// coordinates", Survey Review 23(181)). One pass is already sub-millimetre
// for terrestrial points; we iterate until the latitude moves by less than
// 1e-14 rad (0.06 nm on the ground), at most 5 passes.
//
// The height uses h = p·cosφ + z·sinφ − a²/N, which holds at every latitude
// (no division by cosφ at the poles).
func ECEFToGeodetic(x, y, z float64) (latDeg, lonDeg, h float64) {
	p := math.Hypot(x, y)
	if p < tiny {
		// On the polar axis longitude is undefined; report 0.
		lat := math.Copysign(90, z)
		if z == 0 {
			lat = 0 // the centre of the Earth: any answer is as good
		}
		return lat, 0, math.Abs(z) - B
	}
	lon := math.Atan2(y, x)
	// Start from the reduced latitude of the spherical guess.
	β := math.Atan2(z, (1-F)*p)
	var φ float64
	for i := 0; i < 5; i++ {
		sβ, cβ := math.Sincos(β)
		φNew := math.Atan2(z+Ep2*B*sβ*sβ*sβ, p-E2*A*cβ*cβ*cβ)
		converged := i > 0 && math.Abs(φNew-φ) < 1e-14
		φ = φNew
		if converged {
			break
		}
		sφ, cφ := math.Sincos(φ)
		β = math.Atan2((1-F)*sφ, cφ)
	}
	sφ, cφ := math.Sincos(φ)
	n := A / math.Sqrt(1-E2*sφ*sφ)
	h = p*cφ + z*sφ - A*A/n
	return φ * rad, lon * rad, h
}

// Local is a local east-north-up frame tangent to the ellipsoid at an
// origin. The zero value is not usable; build one with NewLocal.
type Local struct {
	latDeg, lonDeg, h float64
	ox, oy, oz        float64 // origin in ECEF
	// Rows of the ECEF→ENU rotation (common practice; e.g. TR8350.2 §4).
	ex, ey        float64 // east  = (−sinλ, cosλ, 0)
	nx, ny, nz    float64 // north = (−sinφcosλ, −sinφsinλ, cosφ)
	ux, uy, uz    float64 // up    = (cosφcosλ, cosφsinλ, sinφ)
	okInitialised bool
}

// NewLocal returns the ENU frame about the geodetic origin (degrees, m).
func NewLocal(latDeg, lonDeg, h float64) (Local, error) {
	if err := CheckGeodetic(latDeg, lonDeg, h); err != nil {
		return Local{}, err
	}
	var l Local
	l.latDeg, l.lonDeg, l.h = latDeg, lonDeg, h
	l.ox, l.oy, l.oz = GeodeticToECEF(latDeg, lonDeg, h)
	sφ, cφ := math.Sincos(latDeg * deg)
	sλ, cλ := math.Sincos(lonDeg * deg)
	l.ex, l.ey = -sλ, cλ
	l.nx, l.ny, l.nz = -sφ*cλ, -sφ*sλ, cφ
	l.ux, l.uy, l.uz = cφ*cλ, cφ*sλ, sφ
	l.okInitialised = true
	return l, nil
}

// Origin returns the geodetic origin (degrees, m).
func (l *Local) Origin() (latDeg, lonDeg, h float64) { return l.latDeg, l.lonDeg, l.h }

// ECEFToENU rotates an ECEF point into the local frame (metres).
func (l *Local) ECEFToENU(x, y, z float64) (e, n, u float64) {
	dx, dy, dz := x-l.ox, y-l.oy, z-l.oz
	e = l.ex*dx + l.ey*dy
	n = l.nx*dx + l.ny*dy + l.nz*dz
	u = l.ux*dx + l.uy*dy + l.uz*dz
	return e, n, u
}

// ENUToECEF is the inverse of ECEFToENU (the rotation is orthonormal).
func (l *Local) ENUToECEF(e, n, u float64) (x, y, z float64) {
	x = l.ox + l.ex*e + l.nx*n + l.ux*u
	y = l.oy + l.ey*e + l.ny*n + l.uy*u
	z = l.oz + l.nz*n + l.uz*u
	return x, y, z
}

// GeodeticToENU converts a geodetic point to local east-north-up metres.
func (l *Local) GeodeticToENU(latDeg, lonDeg, h float64) (e, n, u float64) {
	x, y, z := GeodeticToECEF(latDeg, lonDeg, h)
	return l.ECEFToENU(x, y, z)
}

// ENUToGeodetic converts local east-north-up metres to a geodetic point.
func (l *Local) ENUToGeodetic(e, n, u float64) (latDeg, lonDeg, h float64) {
	x, y, z := l.ENUToECEF(e, n, u)
	return ECEFToGeodetic(x, y, z)
}

// Valid reports whether l was built by NewLocal.
func (l *Local) Valid() bool { return l.okInitialised }
