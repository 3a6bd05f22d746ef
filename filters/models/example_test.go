package models_test

import (
	"fmt"
	"math"

	"github.com/godwit-fusion/godwit/filters/models"
)

// A front radar on an invented campus shuttle: build the model from its
// configuration, place the shuttle, predict what the radar should report
// for a cart ahead, and turn a detection back into a site position.
func ExampleNewTargetSensor() {
	ctrv, _ := models.NewCTRV(1.5, 0.6)
	radar, err := models.NewTargetSensor(ctrv, models.Spec{
		Kind:     "range_bearing_rate",
		Mount:    models.Mount{X: 3.6},
		Coverage: models.Coverage{MaxRange: 120, FOV: 120 * math.Pi / 180},
		NoiseSD:  []float64{0.3, 0.01, 0.15},
	})
	if err != nil {
		fmt.Println(err)
		return
	}
	// Shuttle at the site origin heading north at 2 m/s.
	_ = radar.SetPlatform(models.Platform{Yaw: math.Pi / 2, VY: 2})
	// A cart 23.6 m north, driving north at 1 m/s: [px, py, v, yaw, yawrate].
	cart := []float64{0, 23.6, 1, math.Pi / 2, 0}
	z := make([]float64, 3)
	radar.Predict(z, cart)
	fmt.Printf("range %.1f m, bearing %.2f rad, range rate %.1f m/s\n", z[0], z[1], z[2])
	fmt.Println("visible:", radar.Visible(cart[0], cart[1]))

	Rs := make([]float64, 9)
	_ = radar.NoiseSqrt(Rs, cart)
	pos, cov := make([]float64, 2), make([]float64, 4)
	_ = radar.Birth(pos, cov, []float64{20, 0.05, -1}, Rs)
	fmt.Printf("birth at (%.2f, %.2f) m\n", pos[0], pos[1])
	// Output:
	// range 20.0 m, bearing 0.00 rad, range rate -1.0 m/s
	// visible: true
	// birth at (-1.00, 23.58) m
}
