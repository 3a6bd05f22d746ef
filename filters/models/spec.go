package models

import "fmt"

// Motion has the method set of filters.MotionModel (declared here too so
// that this package needs nothing from its parent; values convert freely).
type Motion interface {
	Dim() int
	Propagate(dst, x []float64, dt float64)
	Jacobian(F, x []float64, dt float64)
	NoiseFactor(G, x []float64, dt float64)
	Residual(dst, a, b []float64)
	Normalize(x []float64)
	PosVel(pv, x, J []float64)
}

// NewMotion builds the target motion model named by a configuration's
// tracker.motion (cv | ca | ctrv). accelSD is passed to NewCA as its jerk
// s.d. (see NewCA); yawAccelSD applies to ctrv only.
func NewMotion(kind string, accelSD, yawAccelSD float64) (Motion, error) {
	switch kind {
	case "cv":
		return NewCV(accelSD)
	case "ca":
		return NewCA(accelSD)
	case "ctrv":
		return NewCTRV(accelSD, yawAccelSD)
	}
	return nil, fmt.Errorf("%w: motion %q, want cv, ca or ctrv", ErrParam, kind)
}

// Spec describes a target sensor as configured.
type Spec struct {
	Kind     string // position_xy | range_bearing | range_bearing_rate | pinhole
	Mount    Mount
	Coverage Coverage
	NoiseSD  []float64 // one s.d. per measurement component
	// pinhole only
	FX, CX, RangeSDFrac float64
}

// MeasurementDim returns the measurement dimension of a sensor kind,
// including the ego kinds gnss and odometry.
func MeasurementDim(kind string) (int, error) {
	switch kind {
	case "position_xy", "range_bearing", "pinhole", "gnss", "odometry":
		return 2, nil
	case "range_bearing_rate":
		return 3, nil
	}
	return 0, fmt.Errorf("%w: unknown sensor kind %q", ErrParam, kind)
}

// NewTargetSensor builds the measurement model for a target sensor from its
// spec, for targets moving with k.
func NewTargetSensor(k Kinematics, s Spec) (TargetSensor, error) {
	var (
		ts  TargetSensor
		tg  *target
		err error
	)
	switch s.Kind {
	case "position_xy":
		var p *PositionXY
		if p, err = NewPositionXY(k, s.Mount); err == nil {
			ts, tg = p, &p.target
		}
	case "range_bearing":
		var p *RangeBearing
		if p, err = NewRangeBearing(k, s.Mount); err == nil {
			ts, tg = p, &p.target
		}
	case "range_bearing_rate":
		var p *RangeBearingRate
		if p, err = NewRangeBearingRate(k, s.Mount); err == nil {
			ts, tg = p, &p.target
		}
	case "pinhole":
		var p *Pinhole
		if p, err = NewPinhole(k, s.Mount, s.FX, s.CX); err == nil {
			err = p.SetRangeSDFrac(s.RangeSDFrac)
			ts, tg = p, &p.target
		}
	case "gnss", "odometry":
		return nil, fmt.Errorf("%w: %s observes the platform, not targets (use NewGNSS / NewOdometry)", ErrParam, s.Kind)
	default:
		return nil, fmt.Errorf("%w: unknown sensor kind %q", ErrParam, s.Kind)
	}
	if err != nil {
		return nil, err
	}
	if err := tg.SetNoise(s.NoiseSD); err != nil {
		return nil, fmt.Errorf("%s: %w", s.Kind, err)
	}
	if err := tg.SetCoverage(s.Coverage); err != nil {
		return nil, fmt.Errorf("%s: %w", s.Kind, err)
	}
	return ts, nil
}
