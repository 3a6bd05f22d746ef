package filters_test

import (
	"errors"
	"math"
	"testing"

	"github.com/godwit-fusion/godwit/filters"
)

// TestCopyFromIsExact: a snapshot taken with CopyFrom, driven with the same
// inputs, stays bit-identical to the original (the engine's out-of-sequence
// rewind relies on it), including a copy taken between Prepare and Update.
func TestCopyFromIsExact(t *testing.T) {
	sc := newCTRVScenario()
	makers := map[string]func() (filters.Filter, error){
		"srekf": func() (filters.Filter, error) { return filters.NewSREKF(sc.f) },
		"srukf": func() (filters.Filter, error) { return filters.NewSRUKF(sc.f, filters.UTParams{Alpha: 0.5, Beta: 2}) },
	}
	for name, mk := range makers {
		a, _ := mk()
		b, _ := mk()
		if err := a.Init(sc.x0, sc.S0); err != nil {
			t.Fatal(err)
		}
		z := []float64{13, 0.4, 2.5}
		for step := 0; step < 10; step++ {
			if err := a.Predict(0.1); err != nil {
				t.Fatal(err)
			}
			if err := a.Prepare(sc.h, sc.Rs); err != nil {
				t.Fatal(err)
			}
			if step == 4 {
				if err := b.CopyFrom(a); err != nil {
					t.Fatal(err)
				}
			}
			if _, err := a.Update(z); err != nil {
				t.Fatal(err)
			}
		}
		// Replay b from its snapshot (prepared, before the step-4 update).
		if _, err := b.Update(z); err != nil {
			t.Fatalf("%s: Update on a copied prepared filter: %v", name, err)
		}
		for step := 5; step < 10; step++ {
			if err := b.Predict(0.1); err != nil {
				t.Fatal(err)
			}
			if err := b.Prepare(sc.h, sc.Rs); err != nil {
				t.Fatal(err)
			}
			if _, err := b.Update(z); err != nil {
				t.Fatal(err)
			}
		}
		ga, gb := a.State(), b.State()
		for i := range ga.X {
			if math.Float64bits(ga.X[i]) != math.Float64bits(gb.X[i]) {
				t.Fatalf("%s: replayed copy differs in x[%d]", name, i)
			}
		}
		for i := range ga.S {
			if math.Float64bits(ga.S[i]) != math.Float64bits(gb.S[i]) {
				t.Fatalf("%s: replayed copy differs in S[%d]", name, i)
			}
		}
	}
}

func TestCopyFromRejectsMismatch(t *testing.T) {
	ekf5, _ := filters.NewSREKF(ctrvMotion{})
	ekf4, _ := filters.NewSREKF(cvMotion{q: 1})
	ukf5, _ := filters.NewSRUKF(ctrvMotion{}, filters.DefaultUTParams())
	if err := ekf5.CopyFrom(ukf5); !errors.Is(err, filters.ErrBadParameter) {
		t.Errorf("SRUKF into SREKF: %v", err)
	}
	if err := ukf5.CopyFrom(ekf5); !errors.Is(err, filters.ErrBadParameter) {
		t.Errorf("SREKF into SRUKF: %v", err)
	}
	if err := ekf5.CopyFrom(ekf4); !errors.Is(err, filters.ErrDimension) {
		t.Errorf("dimension 4 into 5: %v", err)
	}
	if _, err := filters.NewSREKF(nil); !errors.Is(err, filters.ErrBadParameter) {
		t.Errorf("nil model: %v", err)
	}
	if err := ekf5.Init([]float64{1, 2, 3}, make([]float64, 9)); !errors.Is(err, filters.ErrDimension) {
		t.Errorf("short x0: %v", err)
	}
	S0 := make([]float64, 25)
	for i := 0; i < 5; i++ {
		S0[i*5+i] = 1
	}
	S0[3*5+3] = 0
	if err := ekf5.Init(make([]float64, 5), S0); !errors.Is(err, filters.ErrNotPosDef) {
		t.Errorf("zero diagonal S0: %v", err)
	}
	if _, err := ekf5.Update([]float64{1, 2, 3}); !errors.Is(err, filters.ErrNotPrepared) {
		t.Errorf("Update before Prepare: %v", err)
	}
}
