package particle_test

import (
	"fmt"
	"math"

	"github.com/godwit-fusion/godwit/filters/models"
	"github.com/godwit-fusion/godwit/filters/particle"
)

// Track an invented warehouse robot with a particle filter: seeded, so the
// printed numbers are the same on every run and machine.
func ExampleNew() {
	cv, _ := models.NewCV(0.5)
	pos, _ := models.NewPositionXY(cv, models.Mount{})
	pf, err := particle.New(cv, particle.Config{Particles: 2000, ResampleBelow: 0.5, Seed1: 42})
	if err != nil {
		fmt.Println(err)
		return
	}
	_ = pf.Init([]float64{0, 0, 1, 0}, []float64{1, 0, 0, 0, 0, 1, 0, 0, 0, 0, 0.5, 0, 0, 0, 0, 0.5})
	Rs := []float64{0.2, 0, 0, 0.2} // 20 cm position noise
	for k := 1; k <= 10; k++ {
		_ = pf.Predict(0.1)
		_ = pf.Prepare(pos, Rs)
		if _, err := pf.Update([]float64{0.1 * float64(k), 0}); err != nil {
			fmt.Println(err)
			return
		}
	}
	st := pf.State()
	// The robot is at (1, 0) m after 1 s; 20 cm measurements, ten of them.
	fmt.Println("within 15 cm:", math.Hypot(st.X[0]-1, st.X[1]) < 0.15)
	// Output:
	// within 15 cm: true
}
