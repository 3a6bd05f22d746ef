package engine

import (
	"math"

	"github.com/godwit-fusion/godwit/filters/models"
)

// Sensor kinds the engine knows (DESIGN.md, "Measurement models").
const (
	kindPositionXY = iota
	kindRangeBearing
	kindRangeBearingRate
	kindPinhole
	kindGNSS
	kindOdometry
)

var kindNames = [...]string{"position_xy", "range_bearing", "range_bearing_rate", "pinhole", "gnss", "odometry"}
var kindDims = [...]int{2, 2, 3, 2, 2, 2}

func kindByName(s string) (int, bool) {
	for i, n := range kindNames {
		if n == s {
			return i, true
		}
	}
	return 0, false
}

// Pose is the platform's planar state in the site frame at one instant:
// position (m), heading (rad, counter-clockwise from east), velocity (m/s)
// and yaw rate (rad/s).
type Pose struct {
	X, Y, Yaw, VX, VY, YawRate float64
}

func (p Pose) platform() models.Platform {
	return models.Platform{X: p.X, Y: p.Y, Yaw: p.Yaw, VX: p.VX, VY: p.VY, YawRate: p.YawRate}
}

// wrapAngle maps a to (−π, π].
func wrapAngle(a float64) float64 {
	a = math.Mod(a+math.Pi, 2*math.Pi) // (−2π, 2π)
	if a <= 0 {
		a += 2 * math.Pi // (0, 2π]
	}
	return a - math.Pi
}

// maxEig2 is the larger eigenvalue of a symmetric 2×2 matrix [a b; b d].
func maxEig2(a, b, d float64) float64 {
	h := (a + d) / 2
	return h + math.Sqrt(math.Max(0, (a-d)*(a-d)/4+b*b))
}

// chol factors the m×m symmetric matrix A (row-major) into lower-triangular
// L with A = L·Lᵀ. It reports false when A is not positive definite.
func chol(L, A []float64, m int) bool {
	for i := range L[:m*m] {
		L[i] = 0
	}
	for j := 0; j < m; j++ {
		s := A[j*m+j]
		for k := 0; k < j; k++ {
			s -= L[j*m+k] * L[j*m+k]
		}
		if !(s > 0) || math.IsInf(s, 0) {
			return false
		}
		d := math.Sqrt(s)
		L[j*m+j] = d
		for i := j + 1; i < m; i++ {
			s := A[i*m+j]
			for k := 0; k < j; k++ {
				s -= L[i*m+k] * L[j*m+k]
			}
			L[i*m+j] = s / d
		}
	}
	return true
}
