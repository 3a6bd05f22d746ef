package geo

import (
	"errors"
	"math"
	"testing"

	"pgregory.net/rapid"
)

func near(t *testing.T, what string, got, want, tol float64) {
	t.Helper()
	if !(math.Abs(got-want) <= tol) {
		t.Errorf("%s = %.10g, want %.10g ± %g", what, got, want, tol)
	}
}

// Derived constants against NIMA TR8350.2 Table 3.3 (values from memory).
func TestDerivedConstants(t *testing.T) {
	near(t, "b", B, 6356752.3142, 1e-4)                                  // TR8350.2 Table 3.3, semi-minor axis
	near(t, "e²", E2, 6.69437999014e-3, 1e-14)                           // TR8350.2 Table 3.3, first eccentricity squared
	near(t, "e'²", Ep2, 6.73949674228e-3, 1e-14)                         // TR8350.2 Table 3.3, second eccentricity squared
	near(t, "polar radius of curvature a²/b", A*A/B, 6399593.6258, 1e-3) // TR8350.2 Table 3.3
}

// Points whose ECEF coordinates follow from the ellipsoid's axes alone
// (a = 6378137 m, b = 6356752.314 m; TR8350.2 Table 3.1 / 3.3).
func TestKnownPoints(t *testing.T) {
	cases := []struct {
		name        string
		lat, lon, h float64
		x, y, z     float64
	}{
		{"equator, prime meridian", 0, 0, 0, 6378137, 0, 0},
		{"equator, 90° E", 0, 90, 0, 0, 6378137, 0},
		{"equator, 180°", 0, 180, 0, -6378137, 0, 0},
		{"north pole", 90, 0, 0, 0, 0, 6356752.314},
		{"south pole", -90, 0, 0, 0, 0, -6356752.314},
		{"north pole, 1 km up", 90, 0, 1000, 0, 0, 6357752.314},
		{"equator, 100 m below", 0, 0, -100, 6378037, 0, 0},
	}
	for _, c := range cases {
		x, y, z := GeodeticToECEF(c.lat, c.lon, c.h)
		// 1 mm: b is quoted to the millimetre.
		near(t, c.name+" x", x, c.x, 1e-3)
		near(t, c.name+" y", y, c.y, 1e-3)
		near(t, c.name+" z", z, c.z, 1e-3)
		lat, lon, h := ECEFToGeodetic(c.x, c.y, c.z)
		near(t, c.name+" lat", lat, c.lat, 1e-9)
		near(t, c.name+" h", h, c.h, 1e-3)
		if math.Abs(c.lat) != 90 { // longitude is undefined at the poles
			near(t, c.name+" lon", math.Remainder(lon-c.lon, 360), 0, 1e-9)
		}
	}
}

// Geodetic height is measured along the ellipsoid normal, whose direction is
// (cosφcosλ, cosφsinλ, sinφ) — the definition of geodetic latitude (common
// practice). So ECEF(φ,λ,h) − ECEF(φ,λ,0) must be h times that unit vector.
func TestHeightAlongNormal(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		lat := rapid.Float64Range(-90, 90).Draw(t, "lat")
		lon := rapid.Float64Range(-180, 180).Draw(t, "lon")
		h := rapid.Float64Range(-5000, 50000).Draw(t, "h")
		x0, y0, z0 := GeodeticToECEF(lat, lon, 0)
		x1, y1, z1 := GeodeticToECEF(lat, lon, h)
		φ, λ := lat*math.Pi/180, lon*math.Pi/180
		nx, ny, nz := math.Cos(φ)*math.Cos(λ), math.Cos(φ)*math.Sin(λ), math.Sin(φ)
		for i, d := range [3]float64{x1 - x0 - h*nx, y1 - y0 - h*ny, z1 - z0 - h*nz} {
			if math.Abs(d) > 1e-6 {
				t.Fatalf("component %d off the normal by %g m", i, d)
			}
		}
	})
}

// On the equator the ellipsoid is a circle of radius a, so a point 1° east of
// an origin at (0°, 0°, 0 m) sits at east = a·sin1°, north = 0,
// up = a·(cos1° − 1) exactly (plane geometry).
func TestENUEquatorGeometry(t *testing.T) {
	l, err := NewLocal(0, 0, 0)
	if err != nil {
		t.Fatal(err)
	}
	e, n, u := l.GeodeticToENU(0, 1, 0)
	one := math.Pi / 180
	near(t, "east", e, A*math.Sin(one), 1e-6)
	near(t, "north", n, 0, 1e-6)
	near(t, "up", u, A*(math.Cos(one)-1), 1e-6)
	// Above the origin by 10 m: pure up.
	e, n, u = l.GeodeticToENU(0, 0, 10)
	near(t, "east (above)", e, 0, 1e-9)
	near(t, "north (above)", n, 0, 1e-9)
	near(t, "up (above)", u, 10, 1e-9)
}

// The requirement: an ENU round trip below 1 mm, over random origins
// and random site-scale offsets (up to 20 km, which covers any yard or campus).
func TestENURoundTrip(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		lat0 := rapid.Float64Range(-89.9, 89.9).Draw(t, "lat0")
		lon0 := rapid.Float64Range(-180, 180).Draw(t, "lon0")
		h0 := rapid.Float64Range(-400, 5000).Draw(t, "h0")
		l, err := NewLocal(lat0, lon0, h0)
		if err != nil {
			t.Fatal(err)
		}
		e := rapid.Float64Range(-20000, 20000).Draw(t, "e")
		n := rapid.Float64Range(-20000, 20000).Draw(t, "n")
		u := rapid.Float64Range(-500, 500).Draw(t, "u")
		lat, lon, h := l.ENUToGeodetic(e, n, u)
		e2, n2, u2 := l.GeodeticToENU(lat, lon, h)
		d := math.Sqrt((e2-e)*(e2-e) + (n2-n)*(n2-n) + (u2-u)*(u2-u))
		if d >= 1e-3 {
			t.Fatalf("round trip error %g m", d)
		}
	})
}

// Geodetic → ECEF → geodetic over the whole globe, including near the poles.
func TestGeodeticRoundTrip(t *testing.T) {
	rapid.Check(t, func(t *rapid.T) {
		lat := rapid.Float64Range(-90, 90).Draw(t, "lat")
		lon := rapid.Float64Range(-180, 180).Draw(t, "lon")
		h := rapid.Float64Range(-10000, 100000).Draw(t, "h")
		lat2, lon2, h2 := ECEFToGeodetic(GeodeticToECEF(lat, lon, h))
		// 1e-10° is about 11 µm on the ground.
		if math.Abs(lat2-lat) > 1e-10 || math.Abs(h2-h) > 1e-5 {
			t.Fatalf("(%v,%v,%v) → (%v,%v,%v)", lat, lon, h, lat2, lon2, h2)
		}
		// Longitude is meaningless within a micrometre of the polar axis.
		if 90-math.Abs(lat) > 1e-9 && math.Abs(math.Remainder(lon2-lon, 360)) > 1e-9 {
			t.Fatalf("lon %v → %v at lat %v", lon, lon2, lat)
		}
	})
}

func TestBadInput(t *testing.T) {
	bad := [][3]float64{
		{91, 0, 0}, {-90.5, 0, 0}, {math.NaN(), 0, 0}, {0, math.Inf(1), 0},
		{0, 400, 0}, {0, 0, math.NaN()}, {0, 0, 2e7},
	}
	for _, b := range bad {
		if _, err := NewLocal(b[0], b[1], b[2]); !errors.Is(err, ErrRange) {
			t.Errorf("NewLocal%v: err = %v, want ErrRange", b, err)
		}
	}
	var l Local
	if l.Valid() {
		t.Error("zero Local reports valid")
	}
}

func TestZeroAllocs(t *testing.T) {
	l, _ := NewLocal(10, 20, 30)
	var sink float64
	allocs := testing.AllocsPerRun(100, func() {
		e, n, u := l.GeodeticToENU(10.001, 20.002, 35)
		lat, lon, h := l.ENUToGeodetic(e, n, u)
		sink += lat + lon + h
	})
	if allocs != 0 {
		t.Errorf("%v allocs per round trip, want 0", allocs)
	}
	_ = sink
}

func BenchmarkGeodeticToENU(b *testing.B) {
	l, _ := NewLocal(10, 20, 30)
	var s float64
	b.ReportAllocs()
	for b.Loop() {
		e, n, u := l.GeodeticToENU(10.001, 20.002, 35)
		s += e + n + u
	}
	_ = s
}

func BenchmarkENUToGeodetic(b *testing.B) {
	l, _ := NewLocal(10, 20, 30)
	var s float64
	b.ReportAllocs()
	for b.Loop() {
		lat, lon, h := l.ENUToGeodetic(120, -340, 2)
		s += lat + lon + h
	}
	_ = s
}
