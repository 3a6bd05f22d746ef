package filters_test

import (
	"fmt"

	"github.com/godwit-fusion/godwit/filters"
	"github.com/godwit-fusion/godwit/filters/models"
)

// A yard tractor tracked with a constant-velocity model from position
// fixes: predict, gate one detection by its NIS, then update.
//
// The printed numbers follow by hand from the covariance-form equations
// (Kalman 1960), since the two axes decouple: with P0 = I, dt = 1 and
// q̃ = 1, the predicted per-axis covariance is [[1+1+⅓, 1+½], [1+½, 2]],
// so var(px) = 7/3 and cov(px, vx) = 3/2; the innovation variance is
// 7/3 + ¼ = 31/12, the gains are 28/31 and 18/31, and the innovations
// 0.3 and −0.2 give x = [2 + 0.3·28/31, −0.2·28/31, 2 + 0.3·18/31,
// −0.2·18/31] = [2.271, −0.181, 2.174, −0.116] and
// NIS = (0.09 + 0.04)·12/31 = 0.0503.
func ExampleSREKF() {
	cv, _ := models.NewCV(1.0)
	pos, _ := models.NewPositionXY(cv, models.Mount{})
	kf, _ := filters.NewSRKF(cv)
	_ = kf.Init([]float64{0, 0, 2, 0}, []float64{
		1, 0, 0, 0,
		0, 1, 0, 0,
		0, 0, 1, 0,
		0, 0, 0, 1,
	})
	Rs := make([]float64, 4)
	_ = models.DiagSqrt(Rs, []float64{0.5, 0.5})
	gate, _ := filters.GateThreshold(0.99, 2)

	_ = kf.Predict(1)
	_ = kf.Prepare(pos, Rs)
	z := []float64{2.3, -0.2}
	if kf.NIS(z) <= gate {
		nis, _ := kf.Update(z)
		fmt.Printf("NIS %.3f, x = [%.2f %.2f %.2f %.2f]\n", nis, kf.State().X[0], kf.State().X[1], kf.State().X[2], kf.State().X[3])
	}
	// Output:
	// NIS 0.050, x = [2.27 -0.18 2.17 -0.12]
}
