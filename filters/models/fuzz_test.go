package models

import (
	"math"
	"testing"
)

// Birth and Preprocess take detections straight from the wire. Whatever
// the numbers, they must not panic, and an accepted detection must yield a
// finite position with a symmetric covariance whose determinant is not
// negative beyond rounding.
func FuzzBirth(f *testing.F) {
	f.Add(uint8(0), 12.0, -4.0, 0.0, 0.3, 0.0, 0.02, 1.5, 0.4, -0.3)
	f.Add(uint8(1), 25.0, 0.4, 0.0, 0.3, 0.01, 0.02, 0.0, 0.0, 0.0)
	f.Add(uint8(2), 25.0, -0.7, 1.1, 0.3, 0.0, 0.02, 3.6, 0.0, 0.0)
	f.Add(uint8(3), 500.0, 18.0, 0.0, 2.0, 0.1, 0.5, 0.0, 0.0, 3.1)
	f.Add(uint8(1), 1e308, 1e308, 0.0, 1e-308, 0.0, 1e308, 0.0, 0.0, 0.0)
	f.Fuzz(func(t *testing.T, kind uint8, z0, z1, z2, r00, r10, r11, mx, my, myaw float64) {
		cv, _ := NewCV(1)
		mount := Mount{X: mx, Y: my, Yaw: myaw}
		models := []func() (TargetSensor, error){
			func() (TargetSensor, error) { return NewPositionXY(cv, mount) },
			func() (TargetSensor, error) { return NewRangeBearing(cv, mount) },
			func() (TargetSensor, error) { return NewRangeBearingRate(cv, mount) },
			func() (TargetSensor, error) { return NewPinhole(cv, mount, 800, 640) },
		}
		s, err := models[int(kind)%len(models)]()
		if err != nil {
			return // a non-finite mount is refused at construction
		}
		m := s.Dim()
		z := []float64{z0, z1, z2}[:m]
		Rs := make([]float64, m*m)
		Rs[0], Rs[m], Rs[m+1] = r00, r10, r11
		if m == 3 {
			Rs[8] = 1
		}
		pos, cov := []float64{7, 7}, []float64{7, 7, 7, 7}
		if err := s.Birth(pos, cov, z, Rs); err != nil {
			return
		}
		if !finite(pos...) {
			// Finite input at the edge of float64 can still overflow; the
			// caller must then see non-finite numbers, never a panic. Only
			// moderate inputs have to give finite output.
			if math.Abs(z0) < 1e6 && math.Abs(z1) < 1e6 && math.Abs(mx) < 1e6 && math.Abs(my) < 1e6 {
				t.Fatalf("birth at %v for z %v", pos, z)
			}
			return
		}
		if finite(cov...) {
			if cov[1] != cov[2] {
				t.Fatalf("covariance %v not symmetric", cov)
			}
			det := cov[0]*cov[3] - cov[1]*cov[2]
			if cov[0] < 0 || cov[3] < 0 || det < -1e-9*(cov[0]*cov[3]+1e-300) {
				t.Fatalf("covariance %v not positive semi-definite", cov)
			}
		}
	})
}

func FuzzGNSSPreprocess(f *testing.F) {
	f.Add(1.25, 103.5, 1.2501, 103.5003)
	f.Add(0.0, 0.0, 90.0, 180.0)
	f.Add(-89.9, 10.0, -90.0, -360.0)
	f.Add(45.0, 7.0, math.NaN(), 0.0)
	f.Fuzz(func(t *testing.T, lat0, lon0, lat, lon float64) {
		ego, _ := NewEgo(1, 1)
		g, err := NewGNSS(ego, lat0, lon0, 10, Mount{})
		if err != nil {
			return
		}
		z := []float64{lat, lon}
		if err := g.Preprocess(z, z); err != nil {
			if z[0] != lat && !(math.IsNaN(lat) && math.IsNaN(z[0])) {
				t.Fatal("refused fix overwrote its input")
			}
			return
		}
		if !finite(z...) {
			t.Fatalf("fix (%v, %v) about (%v, %v) gave %v", lat, lon, lat0, lon0, z)
		}
	})
}
